"""The phantom report page (``phantom_report.html``): nominal against measured, recovery,
linearity, temperature and trends over sessions.

Rendering only: the numbers come from :func:`specproc.phantom.analyse_phantom` and
:func:`specproc.phantom.linearity`. Plots are inline SVG (:mod:`specproc.report.svgplot`), every
point naming its scan on hover; the page goes through the Jinja2 templates with autoescaping.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from specproc.report.html import render_page
from specproc.report.messages import crlb_text
from specproc.report.palette import FIT, RESIDUAL, member_colour
from specproc.report.svgplot import xy_panel
from specproc.report.tables import sig

__all__ = ["RECOVERY_BAND_PERCENT", "render_phantom_report"]

#: Recovery band drawn as acceptable, % (common practice for phantom QA: within ±10 %).
RECOVERY_BAND_PERCENT: tuple[float, float] = (90.0, 110.0)


def _recovery_rows(measurements: Sequence[Any]) -> list[dict[str, Any]]:
    rows = []
    for m in measurements:
        for name, nominal in m.nominal_mm.items():
            recovery = m.recovery_percent.get(name, math.nan)
            inside = RECOVERY_BAND_PERCENT[0] <= recovery <= RECOVERY_BAND_PERCENT[1]
            rows.append({
                "scan": m.scan, "session": m.session or "—", "compound": name,
                "nominal": sig(nominal), "measured": sig(m.measured_mm.get(name, math.nan)),
                "recovery": sig(recovery), "crlb": crlb_text(m.crlb_percent.get(name)),
                "_class": "" if inside else "unreliable",
            })
    return rows


def _recovery_panel(measurements: Sequence[Any]) -> dict[str, Any]:
    names: list[str] = []
    for m in measurements:
        for n in m.nominal_mm:
            if n not in names:
                names.append(n)
    series = []
    for k, name in enumerate(names):
        points = [(k + 0.12 * (j - (len(measurements) - 1) / 2), m.recovery_percent[name],
                   f"{m.scan}: {name} {sig(m.recovery_percent[name])} %")
                  for j, m in enumerate(measurements) if name in m.recovery_percent]
        series.append({"points": points, "colour": member_colour(name)})
    return xy_panel("Recovery (measured / nominal)", series, y_label="recovery (%)",
                    lines=[{"x": (-0.5, len(names) - 0.5), "y": (100.0, 100.0),
                            "colour": "#1f2430", "dash": True, "label": "100 %"}],
                    band=RECOVERY_BAND_PERCENT,
                    x_ticks=[(float(k), n) for k, n in enumerate(names)],
                    width=max(320.0, 60.0 * len(names) + 80.0))


def _linearity_panels(measurements: Sequence[Any],
                      lin: Mapping[str, Mapping[str, float]]) -> list[dict[str, Any]]:
    panels = []
    for name, fit in lin.items():
        pts = [(m.nominal_mm[name], m.measured_mm[name],
                f"{m.scan}: nominal {sig(m.nominal_mm[name])}, measured "
                f"{sig(m.measured_mm[name])} mM") for m in measurements if name in m.nominal_mm]
        if not math.isfinite(fit["slope"]):
            continue
        xs = [p[0] for p in pts]
        lo, hi = min(xs), max(xs)
        panels.append(xy_panel(
            f"{name}: slope {sig(fit['slope'])}, R² {sig(fit['r_squared'], 4)}",
            [{"points": pts, "colour": member_colour(name)}],
            x_label="nominal (mM)", y_label="measured (mM)",
            lines=[{"x": (lo, hi), "y": (fit["intercept_mm"] + fit["slope"] * lo,
                                         fit["intercept_mm"] + fit["slope"] * hi),
                    "colour": FIT, "label": f"least-squares line, intercept "
                                            f"{sig(fit['intercept_mm'])} mM"},
                   {"x": (lo, hi), "y": (lo, hi), "colour": "#9aa1ad", "dash": True,
                    "label": "measured = nominal"}]))
    return panels


def _trend_panels(measurements: Sequence[Any]) -> list[dict[str, Any]]:
    sessions = [m.session or str(k + 1) for k, m in enumerate(measurements)]
    ticks = [(float(k), s) for k, s in enumerate(sessions)]
    panels = []
    for title, unit, values, colour in (
        ("SNR (NAA)", "", [m.snr for m in measurements], FIT),
        ("NAA FWHM", "Hz", [m.naa_fwhm_hz for m in measurements], RESIDUAL),
        ("temperature", "°C", [m.temperature_c for m in measurements], "#b3261e"),
    ):
        pts = [(float(k), v, f"{m.scan}: {sig(v)} {unit}".rstrip())
               for k, (m, v) in enumerate(zip(measurements, values, strict=True))]
        panels.append(xy_panel(title, [{"points": pts, "colour": colour, "join": True}],
                               x_label="session", y_label=unit, x_ticks=ticks))
    return panels


def render_phantom_report(
    measurements: Sequence[Any],
    lin: Mapping[str, Mapping[str, float]],
    nominal: Any,
    *,
    version: str,
    notes: Sequence[str] = (),
) -> str:
    """The phantom report page (self-contained HTML).

    Parameters
    ----------
    measurements : sequence of PhantomMeasurement
        In session order.
    lin : mapping
        :func:`specproc.phantom.linearity`.
    nominal : NominalSpec
        The nominal file read.
    version : str
        specproc version.
    notes : sequence of str
        Warnings of the run, as sentences.
    """
    th = nominal.thermometry
    temperature_rows = []
    for m in measurements:
        sd = float(getattr(m, "temperature_sd_c", math.nan))
        shown = sig(m.temperature_c) + (f" ± {sig(sd, 1)}" if math.isfinite(sd) else "")
        diff = (m.temperature_c - m.temperature_nominal_c
                if m.temperature_nominal_c is not None else math.nan)
        temperature_rows.append({
            "scan": m.scan, "session": m.session or "—", "estimated": shown,
            "thermometer": "—" if m.temperature_nominal_c is None else sig(
                m.temperature_nominal_c),
            "difference": sig(diff, 2), "water": sig(m.water_ppm, 4),
            "singlet": sig(m.singlet_ppm, 4),
        })
    qa_rows = [{"scan": m.scan, "session": m.session or "—", "phantom": m.phantom,
                "snr": sig(m.snr), "naa": sig(m.naa_fwhm_hz), "water": sig(m.water_fwhm_hz)}
               for m in measurements]
    lin_rows = [{"compound": name, "slope": sig(v["slope"]), "intercept": sig(v["intercept_mm"]),
                 "r2": sig(v["r_squared"], 4), "n": str(v["n"])} for name, v in lin.items()]
    sessions = {m.session for m in measurements}
    all_notes = list(notes)
    for m in measurements:
        all_notes += [f"{m.scan}: {n}" for n in m.notes]
    return render_page(
        "phantom.html.j2",
        page_title="specproc phantom report",
        heading="Phantom report",
        subheading=f"specproc {version} · {len(measurements)} scan(s) · nominal file "
                   f"{nominal.source}",
        reference=("the water reference of each scan, solution water "
                   f"{sig(nominal.water_mm, 5)} mM" if nominal.reference.lower() == "water"
                   else f"the compound {nominal.reference} at its nominal concentration"),
        band=tuple(f"{b:g}" for b in RECOVERY_BAND_PERCENT),
        notes=all_notes,
        recovery_rows=_recovery_rows(measurements),
        recovery_panel=_recovery_panel(measurements),
        lin_rows=lin_rows,
        lin_panels=_linearity_panels(measurements, lin),
        temperature_rows=temperature_rows,
        thermometry=th.formula(),
        qa_rows=qa_rows,
        trend_panels=_trend_panels(measurements) if len(sessions) > 1 else [],
        n_sessions=len(sessions),
    )
