"""The sign of the carrier layer's spin Hall angle, looked up from its material name.

The simulated unidirectional magnetoresistance changes sign with the spin Hall angle of the
heavy metal that carries the current, so a protocol describing a W or Ta stack must not get
the sign of a Pt one. The table holds the metals whose sign is well established; any other
name gets DEFAULT_SIGN, and the run's truth says which rule gave the sign.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

# Sign of the spin Hall angle at room temperature, in the convention where Pt's is positive.
# The 5d metals with a less than half-filled d shell (Hf, Ta, W) and the 4d ones (Nb, Mo) are
# negative; the late transition and noble metals (Pd, Ir, Pt, Au) positive. # from memory
SPIN_HALL_SIGNS: dict[str, int] = {
    "Pt": 1,  # from memory
    "Pd": 1,  # from memory
    "Au": 1,  # from memory
    "Ir": 1,  # from memory
    "Ta": -1,  # from memory (beta-Ta)
    "W": -1,  # from memory (beta-W)
    "Hf": -1,  # from memory
    "Mo": -1,  # from memory
    "Nb": -1,  # from memory
}
ELEMENT_NAMES: dict[str, str] = {
    "platinum": "Pt", "palladium": "Pd", "gold": "Au", "iridium": "Ir", "tantalum": "Ta",
    "tungsten": "W", "wolfram": "W", "hafnium": "Hf", "molybdenum": "Mo", "niobium": "Nb",
}
# A material not in the table gets the positive sign (that of Pt, the usual reference).
DEFAULT_SIGN = 1
# Crystal-phase prefixes written before the element: "beta-W", "β-Ta", "alpha W".
_PHASE_PREFIX = re.compile(r"^(?:alpha|beta|gamma|[αβγ])[\s_-]*", re.IGNORECASE)
_LEADING_WORD = re.compile(r"[A-Za-z]+")


@dataclass(frozen=True)
class SpinHallSign:
    sign: int
    source: str  # "set: spin_hall_sign", "table: W" or "default: 'CuBi' not in the table"


def table_element(material: str) -> str | None:
    """The table's element a layer name denotes ("Pt", "beta-W", "ta", "Tungsten"), or None.

    Only the whole leading word counts, so an alloy or compound such as "PtMn" or "WTe2"
    is not taken for its first element.
    """
    name = _PHASE_PREFIX.sub("", material.strip())
    word = _LEADING_WORD.match(name)
    if word is None:
        return None
    rest = name[word.end():]
    if rest[:1].isalnum():
        return None
    token = word.group(0).lower()
    for symbol in SPIN_HALL_SIGNS:
        if token == symbol.lower():
            return symbol
    return ELEMENT_NAMES.get(token)


def spin_hall_sign_for(material: str, override: int | None = None) -> SpinHallSign:
    """The sign to simulate: the override if given, else the table's, else DEFAULT_SIGN."""
    if override is not None:
        return SpinHallSign(override, "set: spin_hall_sign")
    element = table_element(material)
    if element is not None:
        return SpinHallSign(SPIN_HALL_SIGNS[element], f"table: {element}")
    label = material.strip() or "(unnamed)"
    return SpinHallSign(DEFAULT_SIGN, f"default: {label!r} not in the table")
