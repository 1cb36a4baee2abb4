"""The cohort page: summary statistics, one point per scan, QC and the scans that need a look.

:class:`CohortPage` is fed one scan summary at a time (the ``summary.json`` of each scan
folder, as :func:`specproc.batch.cohort.write_cohort` reads them) and renders
``cohort.html`` through the Jinja2 templates (autoescaping on). It keeps a few numbers per scan
and member (concentration, ratio, CRLB) and a running sum of the display spectra, never the
spectra of every scan.

Exclusion rules (stated on the page): a failed scan has no values; a flagged scan (any QC
flag, or a fit that did not converge) is left out of the summaries when
``[qc] exclude_flagged`` is true; a value whose CRLB is undefined or above
``[qc] crlb_percent_max`` is left out. Macromolecule and lipid components are not summarised
(no molar unit). The edited members of J-difference edited scans (``GABA+``, ``GABA+_alpha``)
are summarised like the metabolites; an edited QC flag (``edited:<key>``) flags the scan.

Plots are inline SVG drawn by the template, so that every point carries a ``<title>`` naming its
scan (shown on hover by every browser, no script).
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from specproc.report.html import render_page
from specproc.report.messages import member_label, sentences
from specproc.report.palette import FIT, member_colour
from specproc.report.svgplot import nice_ticks
from specproc.report.tables import CONCENTRATION_KINDS, crlb_reliable, sig

__all__ = ["PRINCIPAL", "SUMMARY_COLUMNS", "CohortPage", "summary_statistics"]

#: Columns of the summary tables, in order (key, heading).
SUMMARY_COLUMNS: tuple[tuple[str, str], ...] = (
    ("name", "metabolite"), ("n", "n"), ("mean", "mean"), ("sd", "SD"), ("cv", "CV %"),
    ("median", "median"), ("iqr", "IQR (25–75 %)"), ("excluded", "n left out"),
)
_SUMS_FIRST = ("tNAA", "tCr", "tCho", "Glx")
#: Metabolites of the main tables and plots (after the sums); the other members are in a
#: folded table below them (common practice: the metabolites reliably measured at 3 T).
PRINCIPAL: tuple[str, ...] = ("NAA", "NAAG", "Cr", "PCr", "GPC", "PCh", "mI", "Glu", "Gln",
                              "GABA", "GSH", "Lac", "GABA+")
#: Display spectra of all scans are averaged on this many points.
_GRID_POINTS = 400


def summary_statistics(values: Sequence[float]) -> dict[str, float]:
    """n, mean, SD (ddof = 1), CV % (100 SD / mean), median and quartiles of finite values.

    Quartiles are numpy's default (linear interpolation between order statistics).
    """
    data = np.asarray([v for v in values if math.isfinite(v)], dtype=float)
    nan = math.nan
    if data.size == 0:
        return {"n": 0, "mean": nan, "sd": nan, "cv": nan, "median": nan, "q1": nan, "q3": nan}
    mean = float(data.mean())
    sd = float(data.std(ddof=1)) if data.size > 1 else nan
    q1, median, q3 = (float(q) for q in np.percentile(data, [25, 50, 75]))
    cv = 100.0 * sd / mean if math.isfinite(sd) and mean != 0 else nan
    return {"n": int(data.size), "mean": mean, "sd": sd, "cv": cv, "median": median,
            "q1": q1, "q3": q3}


@dataclass
class _Member:
    kind: str
    conc: list[tuple[str, float, bool]] = field(default_factory=list)
    ratio: list[tuple[str, float, bool]] = field(default_factory=list)


def _strip_panel(title: str, unit: str, points: Sequence[tuple[str, float, bool]],
                 colour: str, *, width: float = 210.0, height: float = 170.0
                 ) -> dict[str, Any]:
    """Geometry of one strip plot: included points filled, left-out points open."""
    finite = [(k, v, ok) for k, v, ok in points if math.isfinite(v)]
    left, right, top, bottom = 46.0, width - 8.0, 24.0, height - 18.0
    if not finite:
        return {"title": title, "unit": unit, "width": width, "height": height, "points": [],
                "ticks": [], "mean": None, "colour": colour, "plot": (left, right, top, bottom)}
    vals = [v for _, v, _ in finite]
    lo, hi = min(vals), max(vals)
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi) * 0.1, 1e-6)
    lo, hi = lo - pad, hi + pad

    def y(v: float) -> float:
        return bottom - (v - lo) / (hi - lo) * (bottom - top)

    centre = 0.5 * (left + right)
    spread = 0.32 * (right - left)
    geometry = []
    for key, v, ok in finite:
        jitter = (zlib.crc32(key.encode("utf-8")) % 1000) / 999.0 - 0.5
        geometry.append({"x": f"{centre + spread * jitter:.1f}", "y": f"{y(v):.1f}",
                         "included": ok, "label": f"{key}: {sig(v)} {unit}".rstrip()
                         + ("" if ok else " (left out)")})
    included = [v for _, v, ok in finite if ok]
    mean = None
    if included:
        m = float(np.mean(included))
        mean = {"y": f"{y(m):.1f}", "x1": f"{centre - spread * 0.8:.1f}",
                "x2": f"{centre + spread * 0.8:.1f}", "label": f"mean {sig(m)} {unit}".rstrip()}
    ticks = [{"y": f"{y(t):.1f}", "label": f"{t:.6g}"} for t in nice_ticks(lo, hi)]
    return {"title": title, "unit": unit, "width": width, "height": height, "points": geometry,
            "ticks": ticks, "mean": mean, "colour": colour,
            "plot": (left, right, top, bottom)}


class CohortPage:
    """Collects scan summaries and renders the cohort page.

    Parameters
    ----------
    title : str
        Page title (escaped).
    qc_config : mapping, optional
        The ``[qc]`` table of the configuration (``crlb_percent_max``, ``exclude_flagged`` and
        the thresholds for the sentences).
    """

    def __init__(self, title: str, qc_config: Mapping[str, Any] | None = None) -> None:
        from specproc.qc import QCThresholds

        self.title = title
        table = dict(qc_config or {})
        self.thresholds = QCThresholds.from_config(table)
        self.crlb_limit = self.thresholds.crlb_percent_max
        self.exclude_flagged = bool(table.get("exclude_flagged", True))
        self.members: dict[str, _Member] = {}
        self.qc_points: dict[str, list[tuple[str, float, bool]]] = {
            "snr": [], "naa_fwhm_hz": [], "residual_ratio": []}
        self.counts = {"ok": 0, "flagged": 0, "failed": 0}
        self.attention: list[dict[str, Any]] = []
        self.scans: list[dict[str, str]] = []
        self._grid: np.ndarray | None = None
        self._sum: np.ndarray | None = None
        self._sumsq: np.ndarray | None = None
        self._n_spectra = 0
        self.n_phantoms = 0

    # ------------------------------------------------------------------ collecting
    def add(self, key: str, summary: Mapping[str, Any], *, report_href: str | None,
            phantom: bool = False) -> None:
        """Take one scan's summary (``status``, ``reason``, ``qc``, ``flags``, ``metabolites``,
        optionally ``spectrum`` with ``ppm``, ``fit`` lists).

        A phantom scan is counted and listed (with its flags) but not summarised.
        """
        status = str(summary.get("status", "failed"))
        self.counts[status if status in self.counts else "failed"] += 1
        qc = dict(summary.get("qc") or {})
        flags = [str(f) for f in summary.get("flags") or []]
        href = report_href if status != "failed" else None
        self.scans.append({"key": key, "status": status + (", phantom" if phantom else ""),
                           "href": href or ""})
        if status == "failed":
            self.attention.append({"key": key, "status": "failed", "href": "",
                                   "reasons": [str(summary.get("reason") or "no reason given")]})
            return
        if flags:
            # edited QC flags (edited:<key>) come with their own words in the summary
            plain = [f for f in flags if not f.startswith("edited:")]
            reasons = sentences(plain, qc=qc, thresholds=self.thresholds.to_dict())
            reasons += [f"Edited spectroscopy: {s}." for s in summary.get("edited_flags") or []]
            self.attention.append({"key": key, "status": status + (", phantom" if phantom
                                                                   else ""),
                                   "href": href or "", "reasons": reasons})
        if phantom:
            self.n_phantoms += 1
            return
        scan_ok = not (flags and self.exclude_flagged)
        for name in self.qc_points:
            v = qc.get(name)
            if isinstance(v, int | float) and not isinstance(v, bool):
                self.qc_points[name].append((key, float(v), scan_ok))
        for row in summary.get("metabolites") or []:
            name = str(row.get("metabolite"))
            kind = str(row.get("kind") or "metabolite")
            member = self.members.setdefault(name, _Member(kind))
            ok = scan_ok and crlb_reliable(row.get("crlb_percent"), self.crlb_limit)
            for column, target in (("conc_molar_mm", member.conc), ("ratio_tcr", member.ratio)):
                v = row.get(column)
                if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
                    target.append((key, float(v), ok))
        spectrum = summary.get("spectrum")
        if scan_ok and isinstance(spectrum, Mapping):
            self._add_spectrum(spectrum)

    def _add_spectrum(self, spectrum: Mapping[str, Any]) -> None:
        try:
            ppm = np.asarray(spectrum["ppm"], dtype=float)
            fit = np.asarray(spectrum["fit"], dtype=float)
        except (KeyError, TypeError, ValueError):
            return
        if ppm.size < 2 or ppm.shape != fit.shape or not np.all(np.isfinite(fit)):
            return
        if self._grid is None:
            self._grid = np.linspace(float(ppm.min()), float(ppm.max()), _GRID_POINTS)
            self._sum = np.zeros(_GRID_POINTS)
            self._sumsq = np.zeros(_GRID_POINTS)
        order = np.argsort(ppm)
        values = np.interp(self._grid, ppm[order], fit[order], left=np.nan, right=np.nan)
        if not np.all(np.isfinite(values)):
            return
        assert self._sum is not None and self._sumsq is not None
        self._sum += values
        self._sumsq += values**2
        self._n_spectra += 1

    # ------------------------------------------------------------------ summaries
    def _names(self) -> list[str]:
        """Members summarised: sums first (tNAA, tCr, tCho, Glx), then metabolites A-Z."""
        names = [n for n, m in self.members.items()
                 if m.kind in CONCENTRATION_KINDS or m.kind == "edited"]
        return sorted(names, key=lambda n: (n not in _SUMS_FIRST,
                                            _SUMS_FIRST.index(n) if n in _SUMS_FIRST else 0,
                                            n.lower()))

    def summary_rows(self, measure: str) -> list[dict[str, Any]]:
        """Rows of a summary table; ``measure`` is ``"conc"`` (mM) or ``"ratio"`` (to tCr).

        Every row carries its numbers (``_stats``) and their text (the shown cells).
        """
        rows = []
        for name in self._names():
            points = getattr(self.members[name], measure)
            if not points:
                continue
            stats = summary_statistics([v for _, v, ok in points if ok])
            excluded = sum(1 for _, _, ok in points if not ok)
            rows.append({
                "name": name, "long": member_label(name), "colour": member_colour(name),
                "principal": name in _SUMS_FIRST or name in PRINCIPAL,
                "n": str(stats["n"]), "mean": sig(stats["mean"]), "sd": sig(stats["sd"], 2),
                "cv": sig(stats["cv"], 2), "median": sig(stats["median"]),
                "iqr": (f"{sig(stats['q1'])} – {sig(stats['q3'])}" if stats["n"] else "—"),
                "excluded": str(excluded), "_stats": stats, "_excluded": excluded,
            })
        return rows

    def _overlay(self) -> dict[str, Any] | None:
        if self._n_spectra == 0 or self._grid is None:
            return None
        assert self._sum is not None and self._sumsq is not None
        n = self._n_spectra
        mean = self._sum / n
        sd = (np.sqrt(np.maximum(self._sumsq / n - mean**2, 0.0) * n / (n - 1)) if n > 1
              else np.zeros_like(mean))
        width, height, left, right, top, bottom = 760.0, 260.0, 50.0, 750.0, 16.0, 228.0
        lo = float(np.min(mean - sd))
        hi = float(np.max(mean + sd))
        hi = hi if hi > lo else lo + 1.0
        g = self._grid

        def x(p: np.ndarray) -> np.ndarray:  # ppm decreases to the right
            return right - (p - g.min()) / (g.max() - g.min()) * (right - left)

        def y(v: np.ndarray) -> np.ndarray:
            return bottom - (v - lo) / (hi - lo) * (bottom - top)

        def path(px: np.ndarray, py: np.ndarray) -> str:
            return " ".join(f"{a:.1f},{b:.1f}" for a, b in zip(px, py, strict=True))

        band = path(np.concatenate([x(g), x(g)[::-1]]),
                    np.concatenate([y(mean + sd), y((mean - sd)[::-1])]))
        ticks = [{"x": f"{float(x(np.array([t]))[0]):.1f}", "label": f"{t:.6g}"}
                 for t in nice_ticks(float(g.min()), float(g.max()), 8)]
        return {"n": n, "band": band, "mean": path(x(g), y(mean)), "width": width,
                "height": height, "ticks": ticks, "colour": FIT,
                "plot": (left, right, top, bottom)}

    # ------------------------------------------------------------------ page
    def render(self, *, version: str, n_scans: int) -> str:
        """The page (a self-contained HTML string)."""
        conc_rows = self.summary_rows("conc")
        ratio_rows = self.summary_rows("ratio")
        use_conc = bool(conc_rows)
        panels_rows = conc_rows if use_conc else ratio_rows
        measure = "conc" if use_conc else "ratio"
        unit = "mM" if use_conc else "ratio to tCr"
        panels = [_strip_panel(r["name"], unit, getattr(self.members[r["name"]], measure),
                               r["colour"]) for r in panels_rows if r["principal"]]
        qc_titles = {"snr": ("SNR (NAA)", ""), "naa_fwhm_hz": ("NAA FWHM", "Hz"),
                     "residual_ratio": ("residual / noise", "")}
        qc_panels = [_strip_panel(qc_titles[k][0], qc_titles[k][1], pts, "#5e6675")
                     for k, pts in self.qc_points.items() if pts]
        rules = [
            "Failed scans have no values.",
            ("Flagged scans (any quality-control flag, or a fit that did not converge) are left "
             "out of the summaries." if self.exclude_flagged else
             "Flagged scans are kept in the summaries ([qc] exclude_flagged = false)."),
            (f"A value whose CRLB is above {self.crlb_limit:g} % ([qc] crlb_percent_max) or "
             "undefined is left out." if self.crlb_limit is not None else
             "A value whose CRLB is undefined is left out (no CRLB limit is set)."),
            "Macromolecule and lipid components are not summarised (no molar unit).",
        ]
        if any(m.kind == "edited" for m in self.members.values()):
            rules.append("GABA+ is measured in the difference spectrum of edited scans "
                         "(GABA-equivalent units, with the co-edited macromolecules); "
                         "GABA+_alpha is its water-referenced value with the alpha correction "
                         "for tissue composition. Its error bound is that of the DIFF fit.")
        if self.n_phantoms:
            rules.append(f"{self.n_phantoms} phantom scan(s) (manifest kind 'phantom') are "
                         "listed below but not summarised with the others.")
        return render_page(
            "cohort.html.j2",
            page_title=self.title,
            heading=self.title,
            subheading=f"specproc {version} · {n_scans} scans",
            counts=[("scans", n_scans), ("processed, no flag", self.counts["ok"]),
                    ("processed, flagged", self.counts["flagged"]),
                    ("failed", self.counts["failed"])],
            rules=rules,
            columns=SUMMARY_COLUMNS,
            conc_rows=conc_rows,
            ratio_rows=ratio_rows,
            panels=panels,
            panel_unit=unit,
            qc_panels=qc_panels,
            overlay=self._overlay(),
            attention=self.attention,
            scans=self.scans,
        )
