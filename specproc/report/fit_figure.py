"""The figure of a linear-combination fit (matplotlib Agg; rendering only).

Layout, top to bottom, all on one ppm axis decreasing to the right:

1. **Spectrum**: the measured absorption spectrum drawn broad and light, the model drawn thin and
   dark over it, the spline baseline dashed.
2. **Residual** (data - model) in its own short panel on the same vertical scale as the spectrum,
   with a band of ±2 noise SD.
3. **Members**: the contribution of each member whose peak height reaches
   ``member_threshold`` of the largest member's, one row each in the member's fixed colour
   (:func:`specproc.report.palette.member_colour`), labelled on the left, with a vertical scale
   bar giving the height of 10 % of the spectrum's maximum; members below the threshold are
   named in one line under the panel.

Cheap to draw (a cohort draws one per scan): fixed margins instead of a layout engine, one line
artist per trace, no legend frame.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from specproc.report import palette
from specproc.report.figures import plain_text

__all__ = ["plot_fit"]


def _nice(value: float) -> float:
    """The 1, 2 or 5 times a power of ten at or below ``value`` (for a scale bar)."""
    if not np.isfinite(value) or value <= 0:
        return 1.0
    power = 10.0 ** np.floor(np.log10(value))
    for step in (5.0, 2.0, 1.0):
        if step * power <= value:
            return float(step * power)
    return float(power)


def shown_members(result: Any, *, member_threshold: float = 0.08) -> tuple[list[int], list[int]]:
    """Indices of the members drawn and of those left out, largest first.

    A member is drawn when the peak height of its contribution is at least ``member_threshold``
    times that of the largest contribution.
    """
    contrib = np.asarray(result.contributions.real)
    if contrib.size == 0:
        return [], []
    height = np.max(np.abs(contrib), axis=1)
    top = float(height.max()) or 1.0
    order = [int(i) for i in np.argsort(-height)]
    shown = [i for i in order if height[i] >= member_threshold * top and height[i] > 0]
    hidden = [i for i in order if i not in shown]
    return shown, hidden


def plot_fit(result: Any, *, title: str | None = None, member_threshold: float = 0.08,
             max_members: int = 10) -> Any:
    """Draw a fit (see the module docstring for the layout).

    Parameters
    ----------
    result : FitResult
        From :func:`specproc.fit.fit_spectrum`.
    title : str, optional
        Title above the spectrum (plain text; ``$`` is shown as a dollar sign).
    member_threshold : float
        Smallest peak height of a drawn member, as a fraction of the largest member's.
    max_members : int
        At most this many members are drawn.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    ppm = np.asarray(result.ppm)
    data = result.data.real
    fit = result.fit.real
    base = result.baseline.real
    resid = result.residual.real
    contrib = result.contributions.real
    shown, hidden = shown_members(result, member_threshold=member_threshold)
    hidden = shown[max_members:] + hidden
    shown = shown[:max_members]

    n_rows = max(len(shown), 1)
    fig = Figure(figsize=(8.0, 4.6 + 0.3 * n_rows))
    FigureCanvasAgg(fig)
    ax_spec, ax_res, ax_mem = fig.subplots(
        3, 1, sharex=True, height_ratios=[3.0, 0.9, 0.42 * n_rows + 0.5],
        gridspec_kw={"left": 0.13, "right": 0.97, "top": 0.95, "bottom": 0.1, "hspace": 0.12},
    )
    for ax in (ax_spec, ax_res, ax_mem):
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.tick_params(labelsize=8)

    ax_spec.plot(ppm, data, color=palette.DATA, lw=2.2, solid_capstyle="round", label="measured")
    ax_spec.plot(ppm, fit, color=palette.FIT, lw=0.9, label="model")
    ax_spec.plot(ppm, base, color=palette.BASELINE, lw=0.9, ls=(0, (4, 2)), label="baseline")
    ax_spec.legend(loc="upper left", fontsize=8, frameon=False, ncols=3)
    ax_spec.set_ylabel("absorption (a.u.)", fontsize=8)
    if title:
        ax_spec.set_title(plain_text(title), fontsize=9, loc="left")

    # the residual on the spectrum's scale, so that its size reads against the peaks
    lo, hi = float(np.min(data)), float(np.max(data))
    half = max(float(np.max(np.abs(resid))) if resid.size else 0.0, 0.06 * (hi - lo)) * 1.15
    noise = float(getattr(result, "noise_sd", np.nan))
    if np.isfinite(noise) and noise > 0:
        ax_res.axhspan(-2 * noise, 2 * noise, color="#ece8f4", lw=0)
    ax_res.axhline(0.0, color="#c9c3dc", lw=0.6)
    ax_res.plot(ppm, resid, color=palette.RESIDUAL, lw=0.8)
    ax_res.set_ylim(-half, half)
    ax_res.set_ylabel("residual", fontsize=8)
    ax_res.text(0.995, 0.96, "band: ±2 noise SD", transform=ax_res.transAxes, ha="right",
                va="top", fontsize=7, color="#6b6380")

    # one common vertical scale (the scale bar); rows closer than the tallest peak, so small
    # members stay readable and the tallest overlaps its lower neighbour a little
    tallest = max((float(np.max(np.abs(contrib[i]))) for i in shown), default=1.0) or 1.0
    step = 0.55 * tallest
    x_label = float(ppm.max()) + 0.01 * float(np.ptp(ppm) or 1.0)
    for row, i in enumerate(shown):
        colour = palette.member_colour(result.names[i])
        offset = -row * step
        ax_mem.plot(ppm, contrib[i] + offset, color=colour, lw=1.0)
        ax_mem.text(x_label, offset, result.names[i], fontsize=8, ha="right", va="bottom",
                    color=colour, fontweight="bold")
    ax_mem.set_yticks([])
    ax_mem.spines["left"].set_visible(False)
    if shown:
        bar = _nice(0.4 * tallest)
        x_bar = float(ppm.min()) + 0.02 * float(np.ptp(ppm) or 1.0)
        ax_mem.plot([x_bar, x_bar], [0.0, bar], color="#222222", lw=2.5, solid_capstyle="butt")
        ax_mem.text(x_bar, bar / 2, f"{bar:g} a.u. ", fontsize=7, va="center", ha="right")
        ax_mem.set_ylim(-(len(shown) - 1) * step - 0.15 * tallest, 1.1 * tallest)
    ax_mem.set_title(f"members (each at least {member_threshold:.0%} of the tallest; "
                     "common scale, bar at right)", fontsize=8, loc="left", color="#444444")
    ax_mem.set_xlabel("chemical shift (ppm)", fontsize=8)
    if hidden:
        names = ", ".join(result.names[i] for i in hidden[:12]) + (" …" if len(hidden) > 12
                                                                   else "")
        fig.text(0.13, 0.015, f"not drawn (below {member_threshold:.0%} of the largest): "
                 f"{names}".replace("$", r"\$"), fontsize=6.5, color="#555555")
    ax_mem.set_xlim(float(ppm.max()), float(ppm.min()))
    return fig
