"""A small table of semiconductor constants at 300 K, each value with its source.

Silicon, germanium and gallium arsenide follow PHYSICS.md §5 (Sze & Ng, *Physics of
Semiconductor Devices*, 3rd ed., 2007, appendix; recalled, not re-read: check the last
digit before relying on it). 4H-SiC and GaN depend on polytype, orientation and source;
their values are labelled approximate. Values are SI (permittivity relative, band gap in
eV, intrinsic density per m^3).
"""

from __future__ import annotations

from dataclasses import dataclass

from scipy import constants

from pnbench.errors import BadInput

_SZE = "Sze & Ng, Physics of Semiconductor Devices, 3rd ed. (2007), appendix, from memory"
_APPROX = "approximate: varies with polytype/orientation and between sources; from memory"

#: Temperature of the table [K].
TABLE_TEMPERATURE_K = 300.0


@dataclass(frozen=True)
class SourcedValue:
    """One tabulated number with its unit, where it comes from, and whether it is rough."""

    value: float
    unit: str
    source: str
    approximate: bool = False


@dataclass(frozen=True)
class Material:
    """Constants of one semiconductor at TABLE_TEMPERATURE_K."""

    name: str
    relative_permittivity: SourcedValue
    bandgap_eV: SourcedValue
    intrinsic_density_per_m3: SourcedValue

    @property
    def permittivity_F_per_m(self) -> float:
        """Absolute permittivity eps_r * eps_0 [F/m] (eps_0 from scipy.constants)."""
        return self.relative_permittivity.value * constants.epsilon_0

    @property
    def approximate(self) -> bool:
        return any(v.approximate for v in (self.relative_permittivity, self.bandgap_eV,
                                           self.intrinsic_density_per_m3))


def _m3(per_cm3: float) -> float:
    return per_cm3 * 1e6


MATERIALS: dict[str, Material] = {
    "Si": Material(
        "Si",
        SourcedValue(11.7, "", "PHYSICS.md §5 after " + _SZE
                     + " (other tables give 11.8-11.9)"),
        SourcedValue(1.12, "eV", _SZE),
        SourcedValue(_m3(9.65e9), "m^-3", _SZE),
    ),
    "Ge": Material(
        "Ge",
        SourcedValue(16.0, "", "PHYSICS.md §5 after " + _SZE + " (other tables give 16.2)"),
        SourcedValue(0.66, "eV", _SZE),
        SourcedValue(_m3(2.33e13), "m^-3", "PHYSICS.md §5 after " + _SZE
                     + " (other tables give 2.0-2.4e13 cm^-3)"),
    ),
    "GaAs": Material(
        "GaAs",
        SourcedValue(12.9, "", _SZE),
        SourcedValue(1.42, "eV", _SZE),
        SourcedValue(_m3(2.1e6), "m^-3", "PHYSICS.md §5 after " + _SZE
                     + " (other tables give 1.8e6-2.25e6 cm^-3)"),
    ),
    "4H-SiC": Material(
        "4H-SiC",
        SourcedValue(9.7, "", "PHYSICS.md §5; " + _APPROX, approximate=True),
        SourcedValue(3.26, "eV", "PHYSICS.md §5; " + _APPROX, approximate=True),
        SourcedValue(_m3(5e-9), "m^-3", "order of magnitude only; " + _APPROX,
                     approximate=True),
    ),
    "GaN": Material(
        "GaN",
        SourcedValue(8.9, "", "PHYSICS.md §5 gives 8.9-9.5; " + _APPROX, approximate=True),
        SourcedValue(3.4, "eV", "PHYSICS.md §5; " + _APPROX, approximate=True),
        SourcedValue(_m3(2e-10), "m^-3", "order of magnitude only; " + _APPROX,
                     approximate=True),
    ),
}


class UnknownMaterial(BadInput, ValueError):
    """A material name the table does not hold (a BadInput, and a ValueError)."""


def material(name: str | Material) -> Material:
    """The table entry for ``name`` (case-insensitive), or the Material itself."""
    if isinstance(name, Material):
        return name
    for key, entry in MATERIALS.items():
        if key.lower() == str(name).strip().lower():
            return entry
    raise UnknownMaterial(f"unknown material {name!r}; known: {', '.join(MATERIALS)}")


def permittivity(name: str | Material) -> float:
    """Absolute permittivity [F/m] of a table material; UnknownMaterial if not there."""
    return material(name).permittivity_F_per_m
