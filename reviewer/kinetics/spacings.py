"""Layer heights by name: one growth layer (interplanar spacing) of a few handbook crystals.

Cubic crystals: d(hkl) = a / sqrt(h^2 + k^2 + l^2), so d(111) = a / sqrt(3). In the diamond and zinc
blende structures (Si, Ge, GaAs) one {111} spacing a / sqrt(3) is a bilayer (two atomic planes close
together), the unit in which those crystals grow along <111>. Hexagonal (wurtzite) crystals, common
in nanowires, grow in units of c / 2, the (0002) spacing.

All lattice parameters are room-temperature values (about 20-25 C); at growth temperatures they are
larger (gold is roughly 0.7 % larger at 500 C, from memory), so a velocity from these heights is
a room-temperature-spacing velocity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Spacing:
    name: str
    lattice_nm: float
    hkl: tuple[int, int, int] | None  # None: hexagonal, d = c / 2 (the (0002) spacing)
    source: str
    layer: str = "one atomic layer"

    @property
    def d_nm(self) -> float:
        if self.hkl is None:
            return self.lattice_nm / 2
        h, k, l = self.hkl  # noqa: E741
        return self.lattice_nm / math.sqrt(h * h + k * k + l * l)

    def describe(self) -> str:
        if self.hkl is None:
            formula, cell = "d(0002) = c/2", f"c = {self.lattice_nm} nm"
        else:
            h, k, l = self.hkl  # noqa: E741
            formula, cell = (f"d({h}{k}{l}) = a/sqrt({h * h + k * k + l * l})",
                             f"a = {self.lattice_nm} nm")
        return (f"{self.name}: {formula} = {self.d_nm:.5f} nm, {self.layer}, with {cell} at room "
                f"temperature ({self.source})")


SPACINGS: dict[str, Spacing] = {
    s.name: s for s in (
        Spacing("si111", 0.5431020511, (1, 1, 1), "CODATA 2018, Si lattice parameter at 22.5 C",
                "one {111} bilayer"),
        Spacing("ge111", 0.5658, (1, 1, 1), "Ioffe semiconductor database", "one {111} bilayer"),
        Spacing("gaas111", 0.565325, (1, 1, 1), "Ioffe semiconductor database",
                "one {111} Ga-As bilayer"),
        Spacing("gaas0002", 0.657, None, "wurtzite GaAs as grown in nanowires, c about 0.657 nm, "
                "from memory", "one (0002) Ga-As bilayer of wurtzite"),
        Spacing("au111", 0.40782, (1, 1, 1), "handbook value, from memory; 0.40786 nm is a "
                "powder-diffraction figure"),
        Spacing("nio111", 0.4177, (1, 1, 1), "rock-salt NiO, from memory",
                "one Ni plane and one O plane"),
    )
}


def layer_height(name: str) -> Spacing:
    """The named spacing; KeyError lists the known names."""
    try:
        return SPACINGS[name.lower()]
    except KeyError:
        raise KeyError(f"unknown layer {name!r}; known: {', '.join(SPACINGS)}") from None
