"""The tissue water reference (Gasparovic et al. 2006): tissue fractions, water mole fractions,
concentration factors, and the measurement of the water signal itself.

References
----------
.. [1] Gasparovic C, Song T, Devier D, et al. Use of tissue water as a concentration reference
   for proton spectroscopic imaging. Magn Reson Med 2006;55:1219-1226.
.. [2] A single-scan, rapid whole-brain protocol for quantitative water content mapping with
   neurobiological implications. Front Neurol 2019;10:1333 (tissue water contents GM 0.837,
   WM 0.691 relative to CSF of about 100 % water, 3 T; the defaults, see
   :data:`specproc.constants.TISSUE_WATER_CONTENT`).
.. [3] Ernst T, Kreis R, Ross BD. Absolute quantitation of water and metabolites in the human
   brain. I. Compartments and water. J Magn Reson B 1993;102:1-8 (GM 0.78, WM 0.65, CSF 0.97 as
   used by [1]; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from specproc.constants import (
    TISSUE_WATER_CONTENT,
    TISSUE_WATER_CONTENT_PROVENANCE,
    WATER_CONSTANT_PROVENANCE,
    WATER_MOLAL_MMOL_PER_KG,
    WATER_MOLAR_37C_MM,
    WATER_MOLAR_MM,
)
from specproc.errors import InvalidInputError
from specproc.quantify._common import TISSUES, _positive
from specproc.quantify.relaxation import (
    Relaxation,
)

if TYPE_CHECKING:
    from specproc.data import Scan

__all__ = [
    "TISSUES",
    "TISSUE_WATER_CONTENT",
    "TISSUE_WATER_CONTENT_SOURCE",
    "WATER_PROTONS",
    "concentration_factors",
    "solution_concentration_mm",
    "validate_tissue_fractions",
    "water_amplitude",
    "water_mole_fractions",
    "water_settings",
]


#: Citation of :data:`specproc.constants.TISSUE_WATER_CONTENT` (the default water contents).
TISSUE_WATER_CONTENT_SOURCE = TISSUE_WATER_CONTENT_PROVENANCE["gm"].citation + " (checked)"

#: Number of 1H nuclei of a water molecule.
WATER_PROTONS: int = 2

_MOLAL_FORMULA = (
    "[M]_molal = (S_M / S_W) * (N_W / N_M) * (a_GM*R_W,GM + a_WM*R_W,WM + a_CSF*R_W,CSF)"
    " / ((1 - a_CSF) * R_M) * [H2O]_molal;  a_t = f_t*d_t / (f_GM*d_GM + f_WM*d_WM + f_CSF*d_CSF)"
)
_MOLAR_FORMULA = (
    "[M]_molar = (S_M / S_W) * (N_W / N_M) * (f_GM*d_GM*R_W,GM + f_WM*d_WM*R_W,WM"
    " + f_CSF*d_CSF*R_W,CSF) / ((1 - f_CSF) * R_M) * [H2O]_molar"
)
_SYMBOLS = (
    "S_M, S_W: metabolite and water signal areas; N_M, N_W = 2: their numbers of protons; "
    "f_t: tissue volume fractions (GM, WM, CSF; sum 1); d_t: MR-visible water content of each "
    "tissue relative to pure water; a_t: water mole fractions; R_W,t: relaxation attenuation of "
    "water in tissue t (water TE/TR); R_M: that of the metabolite (metabolite TE/TR); "
    "[H2O]_molal = 55.51 mol/kg (1000 g / M(H2O)); [H2O]_molar = 55.14 mol/L (pure water at "
    "37 C, IAPWS-95 density); d_t relative to pure water at body temperature"
)



def validate_tissue_fractions(
    fractions: Mapping[str, float], *, atol: float = 0.01
) -> dict[str, float]:
    """Check GM/WM/CSF volume fractions and return them renormalised to sum exactly to 1.

    Parameters
    ----------
    fractions : mapping
        Keys ``gm``, ``wm``, ``csf`` (any case), values in [0, 1].
    atol : float
        Allowed deviation of the sum from 1 (segmentation output is rounded).

    Raises
    ------
    InvalidInputError
        Missing or unknown compartment, negative or non-finite fraction, sum not within ``atol``
        of 1, or a voxel of CSF only (no tissue to refer the concentration to).
    """
    lowered = {str(k).strip().lower(): v for k, v in dict(fractions).items()}
    missing = [t for t in TISSUES if t not in lowered]
    unknown = sorted(set(lowered) - set(TISSUES))
    if missing or unknown:
        raise InvalidInputError(
            f"tissue fractions need exactly gm, wm, csf; missing {missing}, unknown {unknown}"
        )
    values = {}
    for t in TISSUES:
        try:
            v = float(lowered[t])
        except (TypeError, ValueError):
            raise InvalidInputError(
                f"tissue fraction {t} is not a number: {lowered[t]!r}"
            ) from None
        if not math.isfinite(v) or v < 0:
            raise InvalidInputError(f"tissue fraction {t} must be finite and >= 0, got {v}")
        values[t] = v
    total = math.fsum(values.values())
    if abs(total - 1.0) > atol:
        raise InvalidInputError(
            f"tissue fractions sum to {total:.4f}, not 1 within {atol} (gm, wm, csf = "
            f"{values['gm']}, {values['wm']}, {values['csf']})"
        )
    # fractions that already sum to 1 (to rounding) are kept, so that validating twice
    # gives the same numbers
    out = values if abs(total - 1.0) <= 1e-12 else {t: v / total for t, v in values.items()}
    if out["csf"] >= 1.0 - 1e-9:
        raise InvalidInputError("the voxel is CSF only: no tissue to refer concentrations to")
    return out


def water_mole_fractions(
    volume_fractions: Mapping[str, float],
    water_content: Mapping[str, float] | None = None,
) -> dict[str, float]:
    """Fraction of the voxel's MR-visible water in each compartment (Gasparovic et al. 2006).

    ``a_t = f_t·d_t / (f_GM·d_GM + f_WM·d_WM + f_CSF·d_CSF)`` with ``f_t`` the (validated)
    volume fractions and ``d_t`` the relative water contents (default
    :data:`TISSUE_WATER_CONTENT`).
    """
    f = validate_tissue_fractions(volume_fractions)
    d = _water_content(water_content)
    total = sum(f[t] * d[t] for t in TISSUES)
    if total <= 0:
        raise InvalidInputError("the voxel holds no MR-visible water (all f_t·d_t are zero)")
    return {t: f[t] * d[t] / total for t in TISSUES}


def concentration_factors(
    names: Sequence[str],
    *,
    water_amplitude: float,
    volume_fractions: Mapping[str, float],
    te_s: float,
    tr_s: float,
    metabolite_relaxation: Mapping[str, Relaxation],
    water_relaxation: Mapping[str, Relaxation],
    protons: Mapping[str, float] | None = None,
    proton_normalised: bool = False,
    water_proton_normalised: bool = False,
    water_te_s: float | None = None,
    water_tr_s: float | None = None,
    water_protons: float = WATER_PROTONS,
    water_content: Mapping[str, float] | None = None,
    water_molal_mm: float = WATER_MOLAL_MMOL_PER_KG,
    water_molar_mm: float = WATER_MOLAR_37C_MM,
    fraction_atol: float = 0.01,
) -> tuple[dict[str, float], dict[str, float], dict[str, Any]]:
    """Multipliers turning each metabolite amplitude into molar and molal concentrations.

    The concentrations are linear in the amplitudes, ``c_M = k_M · A_M``; this returns the
    ``k_M`` (so that sums and covariances follow by linear algebra) and every constant used.

    Parameters
    ----------
    names : sequence of str
        Metabolites.
    water_amplitude : float
        Water signal area, same scale as the metabolite amplitudes (> 0).
    volume_fractions : mapping
        GM, WM, CSF volume fractions of the voxel (see :func:`validate_tissue_fractions`).
    te_s, tr_s : float
        Echo and repetition time of the metabolite acquisition, s.
    metabolite_relaxation : mapping of str to Relaxation
        T1/T2 of each metabolite in ``names``.
    water_relaxation : mapping of str to Relaxation
        T1/T2 of water in ``gm``, ``wm`` and ``csf``.
    protons : mapping of str to float, optional
        Number of protons N_M of each metabolite; needed unless ``proton_normalised``.
    proton_normalised : bool
        ``False``: amplitudes are signal areas S_M. ``True``: amplitudes are areas per proton
        (``S_M / N_M``, i.e. per molecule, as fitted with a basis whose members carry their
        proton count, such as :class:`specproc.basis.BasisSet`).
    water_proton_normalised : bool
        The same for ``water_amplitude`` (``True``: ``S_W / 2``).
    water_te_s, water_tr_s : float, optional
        TE and TR of the water reference (default: the metabolite TE and TR).
    water_protons : float
        Protons per water molecule, N_W = 2.
    water_content : mapping, optional
        Relative MR-visible water content d_t, relative to pure water at body temperature
        (default :data:`specproc.constants.TISSUE_WATER_CONTENT`).
    water_molal_mm : float
        Molal concentration of pure water, mmol/kg, for the molal formula: 55 508
        (:data:`specproc.constants.WATER_MOLAL_MMOL_PER_KG`).
    water_molar_mm : float
        Molar concentration of pure water at the temperature ``water_content`` refers to,
        mmol/L, for the molar formula: 55 138 at 37 °C
        (:data:`specproc.constants.WATER_MOLAR_37C_MM`).
    fraction_atol : float
        Tolerance of the sum of the volume fractions.

    Returns
    -------
    molar : dict
        ``k`` for mM (mmol per litre of GM+WM tissue).
    molal : dict
        ``k`` for mmol per kg of GM+WM tissue water.
    constants : dict
        Every input constant and intermediate term (JSON-serialisable).

    Notes
    -----
    Molal concentration (Gasparovic et al. 2006, the molal tissue-water equation of their Theory
    section; its equation number was not checked against the paper; also given by Near et al.
    2021):

    .. math::

        [M]_{molal} = \\frac{S_M}{S_W}\\,\\frac{N_W}{N_M}\\,
        \\frac{\\alpha_{GM} R_{W,GM} + \\alpha_{WM} R_{W,WM} + \\alpha_{CSF} R_{W,CSF}}
        {(1 - \\alpha_{CSF})\\, R_M}\\,[\\mathrm{H_2O}]

    with water mole fractions ``α_t = f_t d_t / Σ_u f_u d_u``. Molar concentration per volume
    of GM+WM tissue (the CSF-corrected molar form of Gasparovic et al. 2006):

    .. math::

        [M]_{molar} = \\frac{S_M}{S_W}\\,\\frac{N_W}{N_M}\\,
        \\frac{f_{GM} d_{GM} R_{W,GM} + f_{WM} d_{WM} R_{W,WM} + f_{CSF} d_{CSF} R_{W,CSF}}
        {(1 - f_{CSF})\\, R_M}\\,[\\mathrm{H_2O}]

    where ``R = exp(-TE/T2)(1 - exp(-TR/T1))``, water at the water TE/TR and metabolites at the
    metabolite TE/TR. [H2O] is 55.51 mol/kg in the molal formula and 55.14 mol/L (37 °C) in
    the molar one. Both follow from counting molecules: the voxel holds
    ``n_W = V·[H2O]_molar·Σ f_t d_t`` moles of MR-visible water, so
    ``S_W ∝ N_W·n_W·(Σ f_t d_t R_W,t / Σ f_t d_t)`` and ``S_M ∝ N_M·n_M·R_M`` with the
    metabolite only in GM and WM; dividing the moles ``n_M`` by the tissue volume
    ``V(1 - f_CSF)`` gives the molar form; dividing them by the mass of the GM+WM water,
    ``V·[H2O]_molar·(f_GM d_GM + f_WM d_WM)·M(H2O)``, gives the molal form, in which
    ``[H2O]_molar`` cancels and ``1/M(H2O)`` = 55.51 mol/kg remains (docs/quantification.md).
    """
    s_w = _positive(water_amplitude, "water amplitude", None)
    if water_proton_normalised:
        s_w = s_w * float(water_protons)
    f = validate_tissue_fractions(volume_fractions, atol=fraction_atol)
    d = _water_content(water_content)
    alpha = water_mole_fractions(f, d)
    w_te = te_s if water_te_s is None else water_te_s
    w_tr = tr_s if water_tr_s is None else water_tr_s
    missing = [t for t in TISSUES if t not in water_relaxation]
    if missing:
        raise InvalidInputError(f"water relaxation missing for tissues {missing}")
    r_w = {t: water_relaxation[t].factor(te_s=w_te, tr_s=w_tr) for t in TISSUES}
    if sum(alpha[t] * r_w[t] for t in TISSUES) <= 0:
        raise InvalidInputError("the water relaxation factors are zero (T1 infinite?)")
    water_term_molal = sum(alpha[t] * r_w[t] for t in TISSUES) / (1.0 - alpha["csf"])
    water_term_molar = sum(f[t] * d[t] * r_w[t] for t in TISSUES) / (1.0 - f["csf"])
    molar: dict[str, float] = {}
    molal: dict[str, float] = {}
    metab_consts: dict[str, Any] = {}
    for name in names:
        if name not in metabolite_relaxation:
            raise InvalidInputError(f"no relaxation times for metabolite {name!r}")
        rel = metabolite_relaxation[name]
        r_m = rel.factor(te_s=te_s, tr_s=tr_s)
        if r_m <= 0:
            raise InvalidInputError(f"the relaxation factor of {name!r} is zero (T1 infinite?)")
        if proton_normalised:
            per_proton = 1.0  # A_M = S_M / N_M already
            n_m = None if protons is None or name not in protons else float(protons[name])
        else:
            if protons is None or name not in protons:
                raise InvalidInputError(
                    f"the number of protons of {name!r} is needed (amplitudes are not "
                    "proton-normalised)"
                )
            n_m = _positive(protons[name], f"protons of {name}", None)
            per_proton = 1.0 / n_m
        base = per_proton * float(water_protons) / s_w / r_m
        molar[name] = base * water_term_molar * float(water_molar_mm)
        molal[name] = base * water_term_molal * float(water_molal_mm)
        metab_consts[name] = {**rel.to_dict(), "relaxation_factor": r_m, "protons": n_m}
    constants = {
        "water_amplitude": float(water_amplitude),
        "water_signal": s_w,
        "water_proton_normalised": bool(water_proton_normalised),
        "metabolite_proton_normalised": bool(proton_normalised),
        "water_protons": float(water_protons),
        "water_molal_mm": float(water_molal_mm),
        "water_molar_mm": float(water_molar_mm),
        "water_mm_note": (
            "pure water: water_molal_mm (mmol/kg) in the molal formula, water_molar_mm "
            "(mmol/L at the temperature of the water contents) in the molar formula"
        ),
        "water_constant_provenance": {
            "molal": _record(water_molal_mm, WATER_MOLAL_MMOL_PER_KG,
                             WATER_CONSTANT_PROVENANCE["molal"]),
            "molar": _record(water_molar_mm, WATER_MOLAR_37C_MM,
                             WATER_CONSTANT_PROVENANCE["molar_37c"]),
        },
        "te_s": float(te_s),
        "tr_s": float(tr_s),
        "water_te_s": float(w_te),
        "water_tr_s": float(w_tr),
        "volume_fractions_given": {str(k): float(v) for k, v in dict(volume_fractions).items()},
        "volume_fractions": f,
        "water_content": d,
        "water_content_source": (
            TISSUE_WATER_CONTENT_SOURCE
            if all(math.isclose(d[t], TISSUE_WATER_CONTENT[t], rel_tol=1e-6) for t in TISSUES)
            else "user supplied"
        ),
        "water_content_provenance": {
            t: _record(d[t], TISSUE_WATER_CONTENT[t], TISSUE_WATER_CONTENT_PROVENANCE[t])
            for t in TISSUES
        },
        "water_mole_fractions": alpha,
        "water_relaxation": {
            t: {**water_relaxation[t].to_dict(), "relaxation_factor": r_w[t]} for t in TISSUES
        },
        "water_term_molal": water_term_molal,
        "water_term_molar": water_term_molar,
        "metabolites": metab_consts,
    }
    return molar, molal, constants



def water_settings(section: Mapping[str, Any] | None) -> dict[str, Any]:
    """Keyword arguments of :func:`concentration_factors` from the ``[water]`` configuration.

    Parameters
    ----------
    section : mapping or None
        ``{"content": {"gm": .., "wm": .., "csf": ..}, "molal_mmol_per_kg": ..,
        "molar_mm": ..}`` (any key may be missing: its default is used).

    Returns
    -------
    dict
        ``water_content``, ``water_molal_mm``, ``water_molar_mm``.

    Raises
    ------
    InvalidInputError
        Unknown keys, water contents outside (0, 1] or non-positive concentrations.
    """
    raw = dict(section or {})
    unknown = sorted(set(raw) - {"content", "molal_mmol_per_kg", "molar_mm"})
    if unknown:
        raise InvalidInputError(f"[water]: unknown keys {unknown}")
    return {
        "water_content": _water_content(raw.get("content", TISSUE_WATER_CONTENT)),
        "water_molal_mm": _positive(raw.get("molal_mmol_per_kg", WATER_MOLAL_MMOL_PER_KG),
                                    "[water] molal_mmol_per_kg", None),
        "water_molar_mm": _positive(raw.get("molar_mm", WATER_MOLAR_37C_MM),
                                    "[water] molar_mm", None),
    }


def _record(value: float, default: float, provenance: Any) -> dict[str, Any]:
    """Provenance dict of a water constant: its own record, or an override when changed.

    A value within 1e-6 (relative) of the default counts as the default (the configuration
    file prints the constants rounded).
    """
    if math.isclose(float(value), float(default), rel_tol=1e-6):
        return dict(provenance.to_dict())
    return {"status": "override", "at": f"user value {float(value):g} (default {default:g})"}


def _water_content(water_content: Mapping[str, float] | None) -> dict[str, float]:
    if water_content is None:
        return dict(TISSUE_WATER_CONTENT)
    lowered = {str(k).lower(): v for k, v in dict(water_content).items()}
    if set(lowered) != set(TISSUES):
        raise InvalidInputError(f"water content needs exactly gm, wm, csf, got {sorted(lowered)}")
    out = {}
    for t in TISSUES:
        v = float(lowered[t])
        if not math.isfinite(v) or not 0 < v <= 1.0:
            raise InvalidInputError(f"water content of {t} must be in (0, 1], got {v}")
        out[t] = v
    return out






def solution_concentration_mm(
    amplitude: float,
    water_amplitude: float,
    *,
    metabolite_relaxation: float = 1.0,
    water_relaxation: float = 1.0,
    water_mm: float = WATER_MOLAR_MM,
    water_protons: float = WATER_PROTONS,
) -> float:
    """Concentration of a metabolite in a homogeneous solution (a phantom) against its water.

    ``[M] = (A_M / R_M) / ((S_W / N_W) / R_W) · [H2O]``: the tissue formula of Gasparovic et
    al. 2006 with one compartment of water content 1 and no CSF.

    Parameters
    ----------
    amplitude : float
        Fitted amplitude of the metabolite per molecule (the basis carries its protons).
    water_amplitude : float
        Water signal at t = 0 (:func:`water_amplitude`), on the same scale.
    metabolite_relaxation, water_relaxation : float
        Relaxation attenuations R (:func:`specproc.quantify.relaxation_factor`; 1: none).
    water_mm : float
        Water concentration of the solution, mmol/L (default :data:`WATER_MOLAR_MM`, the
        former name of the molal 55 508; a solution at temperature T holds its density / M(H2O),
        e.g. 55 345 at 25 °C: give it for a phantom).
    water_protons : float
        Protons per water molecule.
    """
    s_w = _positive(water_amplitude, "water amplitude", None)
    return (float(amplitude) / metabolite_relaxation) / (
        (s_w / water_protons) / water_relaxation) * float(water_mm)


# ============================================================================ water signal
def water_amplitude(
    water: Scan, *, window_s: tuple[float, float] = (0.0, 0.15), min_fraction: float = 0.5
) -> tuple[float, float, dict[str, Any]]:
    """Water signal at t = 0 from the decay of an averaged water FID.

    The magnitude ``|w(t)|`` is fitted over ``window_s`` (points above ``min_fraction`` of its
    maximum) by weighted linear least squares of ``ln|w(t)| = ln S_W - a t - b t²`` (a Voigt
    decay: Lorentzian ``a = π Γ_L``, Gaussian ``b = (π Γ_G)² / (4 ln 2)``), with weights
    ``|w(t)|²`` (the noise of ``ln|w|`` is about σ/|w|). ``S_W`` is the extrapolated signal at
    t = 0, on the scale of the fitted metabolite amplitudes.

    The fit is kept to the first part of the decay, down to half the maximum by default: there
    the quadratic is the second-order (cumulant) expansion of ``ln|w(t)|`` about t = 0, which
    holds for any line shape, while an in-vivo water line is rarely a Voigt line over its whole
    decay (tissue compartments of different T2, CSF with a T2 of seconds, sub-voxel field
    components at different frequencies that beat in ``|w(t)|``). Fitted down to 5 % of the
    maximum over 150 ms, such lines gave S_W up to 11 % too high on the validation corpus
    (``benchmarks/validation/``); down to half the maximum, within 1.6 %.

    Parameters
    ----------
    water : Scan
        One averaged water FID (``dims == ()``).
    window_s : (float, float)
        Time window of the fit, s.
    min_fraction : float
        Points whose magnitude is below this fraction of the maximum are left out (0.5: the
        first half-decay).

    Returns
    -------
    amplitude : float
        S_W (units of the data).
    amplitude_sd : float
        Its SD from the least-squares covariance scaled by the residual variance.
    details : dict
        Method, window, fitted decay constants, number of points.

    Raises
    ------
    InvalidInputError
        For a water scan with extra axes or fewer than 8 usable points.
    """
    if water.dims != ():
        raise InvalidInputError("the water reference must be averaged first", water.source)
    t = water.time_s()
    mag = np.abs(np.asarray(water.data, dtype=complex))
    peak = float(mag.max(initial=0.0))
    sel = (t >= window_s[0]) & (t <= window_s[1]) & (mag > min_fraction * peak)
    if np.count_nonzero(sel) < 8 or peak <= 0:
        raise InvalidInputError(
            "the water reference decays too fast to measure its amplitude", water.source
        )
    tt, yy = t[sel], np.log(mag[sel])
    w = mag[sel]
    design = np.stack([np.ones_like(tt), -tt, -(tt**2)], axis=1)
    coef, *_ = np.linalg.lstsq(design * w[:, None], yy * w, rcond=None)
    resid = (yy - design @ coef) * w
    dof = max(1, tt.size - 3)
    sigma2 = float(resid @ resid) / dof
    cov = np.linalg.pinv((design * w[:, None]).T @ (design * w[:, None])) * sigma2
    amplitude = float(np.exp(coef[0]))
    sd = amplitude * float(np.sqrt(max(cov[0, 0], 0.0)))
    from specproc.fit.model import gauss_fwhm_hz, lorentz_fwhm_hz

    details = {
        "method": "ln|w(t)| = ln S_W - a t - b t^2 fitted by weighted least squares "
                  "(weights |w|^2); S_W extrapolated to t = 0",
        "window_s": [float(window_s[0]), float(window_s[1])],
        "min_fraction": float(min_fraction),
        "n_points": int(tt.size),
        "first_point_magnitude": float(mag[0]),
        "lorentz_fwhm_hz": lorentz_fwhm_hz(float(coef[1])),
        "gauss_fwhm_hz": gauss_fwhm_hz(float(coef[2])),
    }
    return amplitude, sd, details
