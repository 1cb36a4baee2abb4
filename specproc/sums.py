"""Combined sums of basis members (tNAA, tCr, tCho, Glx): the one name table.

The fit (:func:`specproc.fit.crlb.combine_sums`, the Cramér-Rao bounds of the sums) and the
quantification (:func:`specproc.quantify.combine_linear`, ratios and concentrations of the
sums) both find the members of a sum with :func:`sum_members`, so they always add the same
members. Names are matched case-insensitively (a member spelled ``pcr`` is PCr); a sum whose
name is itself a basis member is not formed (the fitted member is kept as it is).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

__all__ = ["SUMS", "sum_members"]

#: Combined sums and their members (common practice naming; PCho is another spelling of PCh).
SUMS: Mapping[str, tuple[str, ...]] = {
    "tNAA": ("NAA", "NAAG"),
    "tCr": ("Cr", "PCr"),
    "tCho": ("GPC", "PCh", "PCho", "Cho"),
    "Glx": ("Glu", "Gln"),
}


def sum_members(names: Sequence[str], sums: Mapping[str, Sequence[str]] = SUMS
                ) -> dict[str, tuple[int, ...]]:
    """Indices into ``names`` of the members of each sum that has at least one of them.

    Parameters
    ----------
    names : sequence of str
        Basis member names, in fit order.
    sums : mapping, optional
        Sum name -> member names (default :data:`SUMS`).

    Returns
    -------
    dict of str to tuple of int
        Sum name -> member indices (in the order of ``sums``); sums with no member present, or
        whose name is a member name, are left out.
    """
    lowered = [str(n).lower() for n in names]
    out: dict[str, tuple[int, ...]] = {}
    for total, members in sums.items():
        if total.lower() in lowered:
            continue
        idx = tuple(dict.fromkeys(lowered.index(m.lower()) for m in members
                                  if m.lower() in lowered))
        if idx:
            out[total] = idx
    return out
