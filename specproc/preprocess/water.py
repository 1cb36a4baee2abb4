"""Residual water removal by HLSVD (Pijnappel et al. 1992).

The FID is modelled as a sum of K exponentially damped complex sinusoids,
``x(t) = Σ_k a_k exp((2πi f_k - π lw_k) t)``. HLSVD (Hankel Lanczos SVD; Barkhuijsen et al. 1987,
Pijnappel et al. 1992) puts the first ``n`` points in an L × (n - L + 1) Hankel matrix
``H[i, j] = x[i + j]``, keeps its K leading left singular vectors ``U_K`` (a truncated SVD, see
below), and takes the signal poles ``z_k = exp((2πi f_k - π lw_k) Δt)`` as the
eigenvalues of the least-squares solution of ``U_K[:-1] Z = U_K[1:]`` (shift invariance). The
complex amplitudes ``a_k`` follow by linear least squares. For water removal only the components
whose shift lies in a band around water (default 4.2-5.2 ppm) are subtracted from the FID.

Frequencies are on the FFT axis of :mod:`specproc.preprocess.transform` (``ppm = centre_ppm -
f / MHz``), ``lw_k`` is the Lorentzian FWHM (Hz) of component k.

Only K of the min(L, n - L + 1) singular vectors are needed, so by default they are computed
as the K leading eigenvectors of the Hermitian ``H Hᴴ`` by ARPACK's implicitly restarted
Lanczos/Arnoldi iteration (:func:`scipy.sparse.linalg.eigsh`; Lehoucq, Sorensen and Yang 1998)
with the product ``H Hᴴ u`` done as two convolutions by FFT in O(n log n), never forming
``H``. The iteration runs to a relative residual of 1e-10 from a fixed start vector, so the
result is deterministic and spans the same subspace as the full SVD to about 1e-8 even where
the noise singular values beyond K lie close together (about 100 products for K = 25 at 1024
points); the poles, which depend only on that subspace, agree accordingly. ``solver="full"``
keeps the dense LAPACK SVD as the reference; small matrices, where it is as fast, and the rare
ARPACK failure to converge use it too.

The rest of the method costs little beside it: the shift-invariance equations are solved by
their normal equations (the K columns of ``U_K`` are orthonormal, so that system is as well
conditioned as the problem), and the Vandermonde matrix ``exp(t_n s_k)`` of the amplitudes and
of the model is built from two short tables of exponentials, ``exp(t_(32a) s_k) exp(t_b s_k)``
(two exponentials for every 32 points instead of one for each).

References
----------
.. [1] Pijnappel WWF, van den Boogaart A, de Beer R, van Ormondt D. SVD-based quantification of
   magnetic resonance signals. J Magn Reson 1992;97:122-134.
.. [2] Barkhuijsen H, de Beer R, van Ormondt D. Improved algorithm for noniterative time-domain
   model fitting to exponentially damped magnetic resonance signals. J Magn Reson
   1987;73:553-557.
.. [3] Lehoucq RB, Sorensen DC, Yang C. ARPACK Users' Guide: Solution of Large-Scale Eigenvalue
   Problems with Implicitly Restarted Arnoldi Methods. SIAM, Philadelphia 1998.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.fft
import scipy.linalg
import scipy.sparse.linalg

from specproc._versions import library_versions
from specproc.data import Scan
from specproc.errors import InvalidInputError
from specproc.preprocess.transform import hz_to_ppm

__all__ = [
    "HLSVD_SOLVERS",
    "DampedSinusoids",
    "damped_sinusoids_fid",
    "hlsvd",
    "remove_water",
    "remove_water_scan",
]


#: Ways of computing the leading singular vectors in :func:`hlsvd`.
HLSVD_SOLVERS: tuple[str, ...] = ("lanczos", "full")

#: Below this many Hankel rows, or with more than a quarter of them kept, the dense SVD is used:
#: it is as fast there and ARPACK needs a Krylov space well inside the matrix.
_LANCZOS_MIN_ROWS = 96
#: Relative residual at which ARPACK stops (0 would be machine precision: about 15 % more work
#: for no change that matters; the components agree with the full SVD to a few 1e-8 Hz and
#: 1e-9 in relative amplitude either way, benchmarks/bench_preprocess.py).
_LANCZOS_TOL = 1e-10
#: Krylov vectors kept by ARPACK per wanted vector (its default is 2 K + 1): 1.7 K needs a few
#: more restarts but less orthogonalization, about a tenth faster at K = 25, 1024 points, with
#: the components still within a few 1e-8 of the full SVD (benchmarks/bench_preprocess.py).
_LANCZOS_NCV_PER_VECTOR = 1.7
#: Rows of the finer table of exponentials of :func:`_vandermonde`.
_TABLE_STEP = 32


@dataclass(frozen=True)
class DampedSinusoids:
    """Components of a sum of damped complex sinusoids (the HLSVD model).

    Attributes
    ----------
    freq_hz : (K,) ndarray
        Frequencies on the FFT axis, Hz.
    lw_hz : (K,) ndarray
        Lorentzian full widths at half maximum, Hz (``damping = π lw``, s⁻¹).
    amplitude : (K,) complex ndarray
        Complex amplitude at t = 0.
    """

    freq_hz: np.ndarray
    lw_hz: np.ndarray
    amplitude: np.ndarray


def _vandermonde(rates: np.ndarray, *, n_points: int, dwell_s: float) -> np.ndarray:
    """``exp(n · dwell_s · rates[k])`` for n < n_points, (n_points, K) complex.

    Each entry is the product of two exponentials of a coarse and a fine table (rows ``32 a``
    and ``b < 32``): about 2 √n K exponentials instead of n K, to within a few units of
    round-off of the direct ones.
    """
    rates = np.asarray(rates, dtype=complex).ravel()
    n, step = int(n_points), _TABLE_STEP
    if rates.size == 0:  # no component (nothing in the water band, say)
        return np.zeros((n, 0), dtype=complex)
    fine = np.exp(np.outer(np.arange(step) * float(dwell_s), rates))
    coarse = np.exp(np.outer(np.arange(0, n, step) * float(dwell_s), rates))
    return (coarse[:, None, :] * fine[None, :, :]).reshape(-1, rates.size)[:n]


def damped_sinusoids_fid(
    components: DampedSinusoids, *, n_points: int, dwell_s: float
) -> np.ndarray:
    """Evaluate ``Σ_k a_k exp((2πi f_k - π lw_k) t)`` at t = n · dwell, n < n_points."""
    rates = 2j * np.pi * np.asarray(components.freq_hz) - np.pi * np.asarray(components.lw_hz)
    return _vandermonde(rates, n_points=n_points, dwell_s=dwell_s) @ np.asarray(
        components.amplitude, dtype=complex)


class _HankelGram(scipy.sparse.linalg.LinearOperator):
    """``u -> H Hᴴ u`` for the rows × (n - rows + 1) Hankel matrix of ``x``, by FFT.

    ``(Hᴴ u)[j] = Σ_i conj(x[i + j]) u[i]`` is entry ``n - 1 - j`` of the convolution of ``u``
    with ``y = conj(x)`` reversed, so ``v = Hᴴ u`` reversed is the slice ``rows - 1 ...
    n - 1`` of that convolution; ``(H v)[i] = Σ_j x[i + j] v[j]`` is entry ``i + cols - 1`` of
    the convolution of ``x`` with ``v`` reversed. A circular convolution of length ≥ n has no
    wrap-around at those entries, so one FFT length serves both: four FFTs of about n points
    per product, against the rows × cols multiply-adds of a dense one.
    """

    def __init__(self, x: np.ndarray, rows: int) -> None:
        super().__init__(dtype=np.dtype(complex), shape=(rows, rows))
        self._rows, self._cols = rows, x.size - rows + 1
        self._n_fft = scipy.fft.next_fast_len(x.size)
        self._spec_x = scipy.fft.fft(x, self._n_fft)
        self._spec_y = scipy.fft.fft(np.conj(x[::-1]), self._n_fft)

    def _matvec(self, u: np.ndarray) -> np.ndarray:
        rows, cols, n_fft = self._rows, self._cols, self._n_fft
        fft, ifft = scipy.fft.fft, scipy.fft.ifft
        adjoint = ifft(self._spec_y * fft(np.ravel(u), n_fft), overwrite_x=True)
        v_reversed = adjoint[rows - 1 : rows - 1 + cols]
        product = ifft(self._spec_x * fft(v_reversed, n_fft), overwrite_x=True)
        return product[cols - 1 : cols - 1 + rows]


def _leading_left_vectors(x: np.ndarray, rows: int, order: int, solver: str) -> np.ndarray:
    """The ``order`` leading left singular vectors of the Hankel matrix of ``x``, (rows, order).

    Any orthonormal basis of their span serves: the poles do not depend on the basis.
    """
    if solver == "lanczos" and rows >= _LANCZOS_MIN_ROWS and 4 * order <= rows:
        start = np.full(rows, 1.0 / np.sqrt(rows), dtype=complex)  # fixed: reproducible
        try:
            values, vectors = scipy.sparse.linalg.eigsh(
                _HankelGram(x, rows), k=order, which="LM", v0=start, tol=_LANCZOS_TOL,
                ncv=min(rows, int(_LANCZOS_NCV_PER_VECTOR * order)),
            )
        except (scipy.sparse.linalg.ArpackNoConvergence, scipy.sparse.linalg.ArpackError):
            pass  # fall back to the dense SVD below
        else:
            return vectors[:, np.argsort(-np.real(values))]
    hankel = scipy.linalg.hankel(x[:rows], x[rows - 1 :])
    u, _, _ = scipy.linalg.svd(hankel, full_matrices=False, lapack_driver="gesdd")
    return u[:, :order]


def hlsvd(
    fid: np.ndarray,
    *,
    dwell_s: float,
    model_order: int = 25,
    fit_points: int | None = 1024,
    solver: Literal["lanczos", "full"] = "lanczos",
) -> DampedSinusoids:
    """Fit a sum of ``model_order`` damped sinusoids to an FID by HLSVD (Pijnappel et al. 1992).

    Parameters
    ----------
    fid : (n_points,) complex ndarray
        One FID.
    dwell_s : float
        Sampling interval, s.
    model_order : int
        Number of components K (the rank kept in the truncated SVD).
    fit_points : int or None
        Use only the first ``fit_points`` points (``None``: all); 1024 keeps the SVD fast.
    solver : {"lanczos", "full"}
        ``"lanczos"``: the K leading singular vectors by ARPACK with an FFT Hankel product (see
        the module notes); ``"full"``: the dense LAPACK SVD of the whole Hankel matrix (the
        reference; about ten times slower at 1024 points).

    Returns
    -------
    DampedSinusoids
        Components sorted by frequency.
    """
    x = np.asarray(fid, dtype=complex)
    if x.ndim != 1:
        raise InvalidInputError(f"HLSVD works on one FID, got shape {x.shape}")
    n = x.size if fit_points is None else min(int(fit_points), x.size)
    order = int(model_order)
    rows = n // 2
    if order < 1 or order >= min(rows, n - rows + 1):
        raise InvalidInputError(
            f"the HLSVD model order must be between 1 and {min(rows, n - rows + 1) - 1} for "
            f"{n} points, got {order}"
        )
    if not np.any(np.abs(x[:n]) > 0):
        raise InvalidInputError("HLSVD on an all-zero FID")
    if solver not in HLSVD_SOLVERS:
        raise InvalidInputError(
            f"the HLSVD solver must be one of {', '.join(HLSVD_SOLVERS)}, got {solver!r}"
        )
    # poles do not depend on the scale: work on the FID scaled to a largest magnitude of 1, so
    # that samples near the float limits neither overflow nor underflow the products
    scale = float(np.max(np.maximum(np.abs(x.real[:n]), np.abs(x.imag[:n]))))
    x = x / scale
    uk = _leading_left_vectors(x[:n], rows, order, solver)
    # shift invariance U↓ Z = U↑ in least squares, by the normal equations: U↓ is U_K less one
    # row, its Gram matrix within that row's norm of the identity (well conditioned)
    lower, upper = uk[:-1], uk[1:]
    lower_adj = lower.conj().T
    z_matrix = np.linalg.solve(lower_adj @ lower, lower_adj @ upper)
    poles = np.linalg.eigvals(z_matrix)
    poles = poles[np.abs(poles) > 0]
    log_poles = np.log(poles) / dwell_s
    freq_hz = np.imag(log_poles) / (2 * np.pi)
    lw_hz = -np.real(log_poles) / np.pi
    basis = _vandermonde(log_poles, n_points=n, dwell_s=dwell_s)
    amplitude, *_ = np.linalg.lstsq(basis, x[:n], rcond=None)
    order_idx = np.argsort(freq_hz)
    return DampedSinusoids(freq_hz[order_idx], lw_hz[order_idx], amplitude[order_idx] * scale)


def remove_water(
    fid: np.ndarray,
    *,
    dwell_s: float,
    spectrometer_mhz: float,
    centre_ppm: float,
    band_ppm: tuple[float, float] = (4.2, 5.2),
    model_order: int = 25,
    fit_points: int | None = 1024,
    solver: Literal["lanczos", "full"] = "lanczos",
) -> tuple[np.ndarray, DampedSinusoids]:
    """Subtract the HLSVD components whose shift lies inside ``band_ppm``.

    Parameters
    ----------
    fid : (n_points,) complex ndarray
    dwell_s, spectrometer_mhz, centre_ppm : float
        Sampling interval (s), spectrometer frequency (MHz), shift at the centre (ppm).
    band_ppm : (float, float)
        Components with a shift in this band (inclusive, either order) are removed; growing
        components (negative width, a fitting artefact) are left alone, since extrapolating
        them over the whole FID would add a diverging signal.
    model_order, fit_points, solver :
        See :func:`hlsvd`.

    Returns
    -------
    cleaned : (n_points,) complex ndarray
    removed : DampedSinusoids
        The components subtracted.
    """
    x = np.asarray(fid)
    comps = hlsvd(x, dwell_s=dwell_s, model_order=model_order, fit_points=fit_points,
                  solver=solver)
    shift = hz_to_ppm(comps.freq_hz, spectrometer_mhz=spectrometer_mhz, centre_ppm=centre_ppm)
    low, high = sorted(float(v) for v in band_ppm)
    inside = (shift >= low) & (shift <= high) & (comps.lw_hz >= 0)  # never extrapolate growth
    removed = DampedSinusoids(comps.freq_hz[inside], comps.lw_hz[inside],
                              comps.amplitude[inside])
    model = damped_sinusoids_fid(removed, n_points=x.size, dwell_s=dwell_s)
    return (x - model).astype(np.result_type(x.dtype, np.complex64)), removed


def remove_water_scan(
    scan: Scan,
    *,
    band_ppm: tuple[float, float] = (4.2, 5.2),
    model_order: int = 25,
    fit_points: int | None = 1024,
    solver: Literal["lanczos", "full"] = "lanczos",
) -> Scan:
    """HLSVD residual water removal on an averaged Scan (``dims == ()``); see :func:`remove_water`.

    The record lists the removed components (shift, width, magnitude).
    """
    if scan.dims != ():
        raise InvalidInputError("residual water removal needs one averaged FID", scan.source)
    try:
        cleaned, removed = remove_water(
            scan.data, dwell_s=scan.dwell_s, spectrometer_mhz=scan.spectrometer_mhz,
            centre_ppm=scan.reference_ppm, band_ppm=band_ppm, model_order=model_order,
            fit_points=fit_points, solver=solver,
        )
    except InvalidInputError as exc:  # name the file (e.g. too few points for the order)
        raise exc.with_path(scan.source) if scan.source else exc from None
    shift = hz_to_ppm(removed.freq_hz, spectrometer_mhz=scan.spectrometer_mhz,
                      centre_ppm=scan.reference_ppm)
    details = {
        "method": "HLSVD (Pijnappel et al. 1992), components inside the band subtracted",
        "libraries": library_versions("numpy", "scipy"),
        "band_ppm": [float(v) for v in band_ppm],
        "model_order": int(model_order),
        "fit_points": fit_points,
        "solver": solver,
        "removed_shift_ppm": [float(v) for v in np.atleast_1d(shift)],
        "removed_lw_hz": [float(v) for v in removed.lw_hz],
        "removed_abs_amplitude": [float(v) for v in np.abs(removed.amplitude)],
    }
    return scan.with_step("residual water removal", details,
                          data=cleaned.astype(scan.data.dtype))
