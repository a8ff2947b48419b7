"""Layer heights by name: one atomic layer (interplanar spacing) of a few handbook crystals.

For the cubic crystals below d(hkl) = a / sqrt(h^2 + k^2 + l^2), so d(111) = a / sqrt(3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Spacing:
    name: str
    lattice_nm: float
    hkl: tuple[int, int, int]
    source: str

    @property
    def d_nm(self) -> float:
        h, k, l = self.hkl  # noqa: E741
        return self.lattice_nm / math.sqrt(h * h + k * k + l * l)

    def describe(self) -> str:
        h, k, l = self.hkl  # noqa: E741
        return (f"{self.name}: d({h}{k}{l}) = a/sqrt({h * h + k * k + l * l}) = {self.d_nm:.5f} nm "
                f"with a = {self.lattice_nm} nm ({self.source})")


SPACINGS: dict[str, Spacing] = {
    s.name: s for s in (
        Spacing("si111", 0.5431020511, (1, 1, 1), "CODATA 2018, Si lattice parameter at 22.5 C"),
        Spacing("ge111", 0.5658, (1, 1, 1), "Ioffe semiconductor database"),
        Spacing("gaas111", 0.565325, (1, 1, 1), "Ioffe semiconductor database"),
        Spacing("au111", 0.40786, (1, 1, 1), "CRC Handbook of Chemistry and Physics, from memory"),
        Spacing("nio111", 0.4177, (1, 1, 1), "rock-salt NiO at room temperature, from memory"),
    )
}


def layer_height(name: str) -> Spacing:
    """The named spacing; KeyError lists the known names."""
    try:
        return SPACINGS[name.lower()]
    except KeyError:
        raise KeyError(f"unknown layer {name!r}; known: {', '.join(SPACINGS)}") from None
