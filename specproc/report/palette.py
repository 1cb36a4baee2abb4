"""specproc's colours: one fixed colour per metabolite, the same in every figure of every scan.

The named members and sums have hand-picked colours (related molecules in related hues: the
NAA family in greens, creatines in blues, cholines in purples, glutamate and glutamine in
oranges); any other name gets a colour from :data:`_SPARE` chosen by a hash of the name, so it
too is the same in every run. Macromolecule and lipid components are drawn in muted greys and
browns: they are context, not results.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping

__all__ = ["BASELINE", "DATA", "FIT", "RESIDUAL", "member_colour"]

#: Measured spectrum (drawn broad and light, so that the model shows on top of it).
DATA = "#a3adb5"
#: Model (sum of members and baseline), drawn thin and dark over the data.
FIT = "#283593"
#: Spline baseline.
BASELINE = "#b08a2e"
#: Residual (data - fit).
RESIDUAL = "#6b58a6"

_NAMED: Mapping[str, str] = {
    "NAA": "#1b7f4b", "NAAG": "#6cbf84", "tNAA": "#1b7f4b",
    "Cr": "#2364aa", "PCr": "#73a7d9", "tCr": "#2364aa",
    "GPC": "#7b3fa0", "PCh": "#b784d1", "tCho": "#7b3fa0",
    "Glu": "#d9630f", "Gln": "#f2a541", "Glx": "#d9630f",
    "mI": "#b8336a", "sI": "#e58fb1",
    "GABA": "#0f8b8d", "GSH": "#8c6d1f", "Lac": "#c1272d",
    "Asc": "#5d8aa8", "Asp": "#9a8c3a", "Tau": "#3f6e5f",
    "Glc": "#a0522d", "PE": "#6a5acd", "Ala": "#8fa31f", "Gly": "#4b6584",
}
_SPARE: tuple[str, ...] = (
    "#2a9d8f", "#e76f51", "#264653", "#f4a261", "#8d5a97", "#4d908e", "#bc6c25", "#577590",
)
_MM = ("#8a8f94", "#a2a5a8", "#6f7479")
_FAT = ("#9c7b5b", "#b59474")


def member_colour(name: str) -> str:
    """Hex colour of a basis member or sum (stable across scans and runs)."""
    if name in _NAMED:
        return _NAMED[name]
    for key, colour in _NAMED.items():
        if key.lower() == name.lower():
            return colour
    digest = int(hashlib.sha256(name.encode("utf-8")).hexdigest()[:8], 16)
    if name.startswith("MM"):
        return _MM[digest % len(_MM)]
    if name.startswith("Fat"):
        return _FAT[digest % len(_FAT)]
    return _SPARE[digest % len(_SPARE)]
