"""The figure of a basis set: its members as stacked spectra (matplotlib Agg; rendering only).

Each member is drawn in its fixed colour (:func:`specproc.report.palette.member_colour`), scaled
to its own maximum within the shown range, named at the left; shift decreases to the right.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from specproc.errors import InvalidInputError
from specproc.report import palette

__all__ = ["plot_basis"]


def plot_basis(basis: Any, *, ppm_range: tuple[float, float] = (0.5, 4.5),
               lb_hz: float = 2.0) -> Any:
    """Stacked spectra (real part) of every member of a basis.

    Parameters
    ----------
    basis : BasisSet
        The basis.
    ppm_range : (float, float)
        Shift range shown, ppm.
    lb_hz : float
        Display line broadening, Hz.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    InvalidInputError
        When no spectral point lies in the range.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    lo, hi = sorted(ppm_range)
    ppm = basis.ppm()
    inside = (ppm >= lo) & (ppm <= hi)
    if not inside.any():
        raise InvalidInputError(f"no spectral points between {lo:g} and {hi:g} ppm")
    spectra = basis.spectrum(lb_hz=max(lb_hz, 0.0)).real
    n = len(basis.names)
    fig = Figure(figsize=(7.5, 1.0 + 0.5 * n))
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.14, 0.6 / (1.0 + 0.5 * n), 0.83, 1.0 - 1.0 / (1.0 + 0.5 * n)))
    for i, name in enumerate(basis.names):
        offset = (n - 1 - i) * 1.2
        trace = spectra[i, inside]
        scale = float(np.max(np.abs(trace))) or 1.0  # each trace scaled to its own maximum
        colour = palette.member_colour(name)
        ax.plot(ppm[inside], trace / scale * 0.5 + offset, lw=0.9, color=colour)
        ax.text(hi + 0.02 * (hi - lo), offset, name, fontsize=8, va="bottom", ha="right",
                color=colour, fontweight="bold")
    ax.set_xlim(hi, lo)  # shift decreases to the right
    ax.set_yticks([])
    ax.set_xlabel("chemical shift (ppm)", fontsize=8)
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    te_ms = dict(basis.timings_s).get("te_s", 0.0) * 1e3
    ax.set_title(f"{basis.sequence}, {basis.field_t:.2f} T, TE {te_ms:g} ms; each member "
                 "scaled to its own maximum", fontsize=9, loc="left")
    return fig
