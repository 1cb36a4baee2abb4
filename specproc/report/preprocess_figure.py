"""Figure of a preprocessing run (matplotlib, Agg backend; rendering only, no computation).

Layout: top row, the real spectra of every transient before (left) and after (right) the drift
correction, rejected transients drawn dashed in grey; middle row, the frequency and the phase
found for each transient against its index; bottom, the final averaged spectrum. The transients
are shown as they were after coil combination (before eddy-current correction and referencing,
on their own axis); the ppm axis decreases to the right, as is the custom.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np

from specproc._atomic import write_bytes
from specproc.preprocess.pipeline import PreprocessResult
from specproc.preprocess.transform import ppm_axis, to_spectrum
from specproc.report import palette
from specproc.report.figures import figure_png_bytes, plain_text

__all__ = ["render_preprocess_figure", "save_preprocess_figure"]

_PPM_RANGE = (0.5, 4.5)


def _spectra(fids: np.ndarray, like: Any, centre_ppm: float | None = None
             ) -> tuple[np.ndarray, np.ndarray]:
    centre = like.reference_ppm if centre_ppm is None else centre_ppm
    ppm = ppm_axis(fids.shape[-1], dwell_s=like.dwell_s, spectrometer_mhz=like.spectrometer_mhz,
                   centre_ppm=centre)
    return ppm, to_spectrum(fids)


def save_preprocess_figure(
    result: PreprocessResult, path: str | os.PathLike[str], *, title: str | None = None
) -> None:
    """Write :func:`render_preprocess_figure` to ``path`` (atomically)."""
    write_bytes(path, render_preprocess_figure(result, title=title))


def render_preprocess_figure(result: PreprocessResult, *, title: str | None = None) -> bytes:
    """Draw the transients before/after alignment, the drift and the final spectrum.

    Parameters
    ----------
    result : PreprocessResult
        From :func:`~specproc.preprocess.pipeline.run_pipeline`.
    title : str, optional
        Figure title.

    Returns
    -------
    bytes
        The PNG image.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.collections import LineCollection
    from matplotlib.colors import to_rgba
    from matplotlib.figure import Figure

    scan = result.scan
    report = result.transient_report
    # fixed margins: a layout engine would cost more than drawing the figure (cohort runs)
    fig = Figure(figsize=(11, 9.5))
    grid = fig.add_gridspec(3, 2, height_ratios=[1.2, 0.8, 1.0], left=0.06, right=0.98,
                            top=0.93, bottom=0.06, hspace=0.42, wspace=0.16)
    ax_before = fig.add_subplot(grid[0, 0])
    ax_after = fig.add_subplot(grid[0, 1], sharey=ax_before)
    ax_freq = fig.add_subplot(grid[1, 0])
    ax_phase = fig.add_subplot(grid[1, 1])
    ax_final = fig.add_subplot(grid[2, :])

    kept = report.kept if report is not None else None
    for ax, fids, label in ((ax_before, result.transients_before, "before alignment"),
                            (ax_after, result.transients_after, "after alignment")):
        ax.set_title(f"transients {label}", fontsize=10)
        if fids is None:
            continue
        ppm, spectra = _spectra(np.atleast_2d(fids), scan, result.transients_centre_ppm)
        show = (ppm >= _PPM_RANGE[0]) & (ppm <= _PPM_RANGE[1])
        colours = matplotlib.colormaps["viridis"](np.linspace(0, 1, max(2, spectra.shape[0])))
        n = spectra.shape[0]
        dropped = np.zeros(n, dtype=bool)
        if kept is not None:
            m = min(n, kept.size)
            dropped[:m] = ~np.asarray(kept[:m], dtype=bool)
        colours = colours[:n].copy()
        colours[dropped] = to_rgba("0.55")
        colours[:, 3] = 0.8
        # one collection of all the transients, drawn in their order (one artist, not n)
        segments = list(np.stack(np.broadcast_arrays(ppm[show], spectra.real[:, show]), axis=-1))
        ax.add_collection(LineCollection(
            segments, colors=colours, linewidths=0.6, capstyle="projecting",
            linestyles=["--" if d else "-" for d in dropped]))
        ax.autoscale_view()
    index = np.arange(report.n_transients) if report is not None else np.array([])
    for ax, values, unit, name in ((ax_freq, None if report is None else report.shifts_hz,
                                    "Hz", "frequency offset"),
                                   (ax_phase, None if report is None else report.phases_deg,
                                    "degrees", "phase offset")):
        ax.set_title(f"{name} per transient", fontsize=10)
        ax.set_xlabel("transient index")
        ax.set_ylabel(unit)
        ax.grid(alpha=0.3)
        if values is None or not np.any(np.isfinite(values)):
            ax.text(0.5, 0.5, "not estimated", transform=ax.transAxes, ha="center")
            continue
        ax.plot(index, values, "o-", ms=3, lw=0.8, color=palette.FIT, label="kept")
        if kept is not None and not np.all(kept):
            ax.plot(index[~kept], values[~kept], "x", ms=8, color="#c1272d", label="rejected")
            ax.legend(fontsize=8)

    ppm, final = _spectra(np.asarray(scan.data)[None, :], scan)
    show = (ppm >= _PPM_RANGE[0]) & (ppm <= _PPM_RANGE[1])
    ax_final.plot(ppm[show], final[0].real[show], color=palette.FIT, lw=0.9)
    ax_final.set_title("averaged, corrected spectrum (real part)", fontsize=10)
    for ax in (ax_before, ax_after, ax_final):
        ax.set_xlim(_PPM_RANGE[1], _PPM_RANGE[0])  # ppm decreases to the right
        ax.set_xlabel("chemical shift (ppm)")
        ax.set_yticks([])
    if title:
        fig.suptitle(plain_text(title), fontsize=11)
    return figure_png_bytes(fig, dpi=100)
