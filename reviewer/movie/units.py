"""Lengths with units (pixel sizes, scale bars): parsing, and round lengths for a scale bar."""

from __future__ import annotations

import math
import re

from reviewer.errors import BadInput

# metres per unit; "A" and "Å" are the ångström (SI brochure, 9th ed., lists it among non-SI units)
UNITS = {"pm": 1e-12, "A": 1e-10, "Å": 1e-10, "nm": 1e-9, "um": 1e-6, "µm": 1e-6, "μm": 1e-6,
         "mm": 1e-3}
SHOWN = (("nm", 1e-9), ("µm", 1e-6), ("mm", 1e-3))


def parse_length(text: str, what: str = "--pixel-size") -> float:
    """'0.05nm', '0.5 Å', '2um' -> metres."""
    m = re.fullmatch(r"\s*([0-9.eE+-]+)\s*([a-zA-Zµμ Å]+)\s*", text or "")
    unit = m.group(2).strip() if m else ""
    try:
        value = float(m.group(1)) if m else float("nan")
    except ValueError:
        value = float("nan")
    if unit not in UNITS or not math.isfinite(value) or value <= 0:
        raise BadInput(f"{what} {text!r}: expected a positive length with a unit "
                       f"({', '.join(sorted(set(UNITS)))}), e.g. 0.05nm")
    return value * UNITS[unit]


def round_length(metres: float) -> float:
    """The largest 1, 2 or 5 x 10^k not above `metres` (a scale bar's length)."""
    if not metres > 0:
        raise ValueError("length must be positive")
    k = math.floor(math.log10(metres))
    for m in (5, 2, 1):
        if m * 10.0**k <= metres * (1 + 1e-12):
            return m * 10.0**k
    return 10.0**k


def format_length(metres: float) -> str:
    """'2 nm', '500 nm', '1 µm' -- the largest unit in which the number is at least 1."""
    name, scale = SHOWN[0]
    for n, s in SHOWN:
        if metres >= s * (1 - 1e-9):
            name, scale = n, s
    value = metres / scale
    return f"{value:.3g} {name}"
