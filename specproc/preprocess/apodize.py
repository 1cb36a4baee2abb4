"""Apodization (line broadening) and zero-filling of FIDs.

Both are for display: the default pipeline leaves them off, because the fitter models the
line shape and the FID length itself (a window would correlate the noise of neighbouring points).

* Exponential window ``exp(-π L t)``: a Lorentzian line of width W becomes one of width W + L
  (the Fourier transform of a product is the convolution of the transforms, and Lorentzian widths
  add). Applied with :func:`nmrglue.process.proc_base.em`, whose ``lb`` is in points
  (``L / spectral_width = L · dwell``).
* Gaussian window ``exp(-(π G t)² / (4 ln 2))``: the spectrum is convolved with a Gaussian of FWHM
  G Hz. Applied with :func:`nmrglue.process.proc_base.gmb` (``exp(-a n - b n²)``,
  ``b = (π G dwell)² / (4 ln 2)``).
* Zero-filling appends zeros (:func:`specproc.preprocess.transform.zero_fill`): a finer spectral
  grid, no new information.

nmrglue is imported only when a window is applied (it loads scipy.signal, tenths of a second).

References
----------
.. [1] Ernst RR, Bodenhausen G, Wokaun A. Principles of Nuclear Magnetic Resonance in One and
   Two Dimensions. Oxford: Clarendon Press; 1987 (sensitivity and resolution enhancement).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from specproc._versions import library_versions
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.transform import zero_fill

__all__ = [
    "apodize_exponential",
    "apodize_gaussian",
    "apodize_scan",
    "zero_fill",
    "zero_fill_scan",
]

WindowKind = Literal["exponential", "gaussian"]
_KINDS = ("exponential", "gaussian")


def apodize_exponential(fid: np.ndarray, *, lb_hz: float, dwell_s: float) -> np.ndarray:
    """Multiply by ``exp(-π lb_hz t)``: Lorentzian broadening by ``lb_hz`` (FWHM, Hz).

    Parameters
    ----------
    fid : (..., n_points) complex ndarray
    lb_hz : float
        Added Lorentzian FWHM, Hz (negative values narrow the line).
    dwell_s : float
        Sampling interval, s.
    """
    from nmrglue.process import proc_base

    data = np.asarray(fid)
    if not np.iscomplexobj(data):
        data = data.astype(np.complex128)
    return proc_base.em(data, lb=float(lb_hz) * float(dwell_s))


def apodize_gaussian(fid: np.ndarray, *, gb_hz: float, dwell_s: float) -> np.ndarray:
    """Multiply by ``exp(-(π gb_hz t)² / (4 ln 2))``: Gaussian broadening of FWHM ``gb_hz``."""
    if gb_hz < 0:
        raise InvalidInputError(f"the Gaussian broadening must be >= 0 Hz, got {gb_hz}")
    from nmrglue.process import proc_base

    data = np.asarray(fid)
    if not np.iscomplexobj(data):
        data = data.astype(np.complex128)
    b = (np.pi * float(gb_hz) * float(dwell_s)) ** 2 / (4 * np.log(2))
    return proc_base.gmb(data, a=0.0, b=b)


def apodize_scan(scan: Scan, *, kind: WindowKind = "exponential", lw_hz: float = 2.0) -> Scan:
    """Apply an exponential or Gaussian window of width ``lw_hz`` (Hz) to a Scan."""
    if kind == "exponential":
        data = apodize_exponential(scan.data, lb_hz=lw_hz, dwell_s=scan.dwell_s)
    elif kind == "gaussian":
        data = apodize_gaussian(scan.data, gb_hz=lw_hz, dwell_s=scan.dwell_s)
    else:
        raise InvalidInputError(f"unknown window {kind!r}; valid: {', '.join(_KINDS)}")
    details = {"kind": kind, "lw_hz": float(lw_hz), "libraries": library_versions("nmrglue")}
    return scan.with_step("apodization", details,
                          data=data.astype(scan.data.dtype))


def zero_fill_scan(scan: Scan, *, factor: int = 2) -> Scan:
    """Zero-fill a Scan to ``factor`` times its length."""
    if int(factor) < 1:
        raise InvalidInputError(f"the zero-filling factor must be >= 1, got {factor}")
    n_new = scan.n_points * int(factor)
    return scan.with_step("zero-filling", {"factor": int(factor), "n_points": n_new},
                          data=zero_fill(scan.data, n_points=n_new))
