"""The one table of semiconductor constants, each value with its source (docs/physics.md §8).

Permittivity, band gap and intrinsic density hold at 300 K. Silicon, germanium and gallium
arsenide follow the property tables of Sze & Ng, *Physics of Semiconductor Devices*, 3rd
ed., 2007, appendix (recalled, not re-read: check the last digit before relying on it).
4H-SiC and GaN depend on polytype, orientation and source; their values are labelled
approximate. Values are SI (permittivity relative, band gap in eV, intrinsic density per
m^3).

Each entry also holds the EG a model card takes by default for a pn junction of that
material (``card_eg_eV``). That is the activation energy of the simulator's IS(T) law
(docs/physics.md §3), not the band gap at 300 K: for Si and Ge the SPICE2 defaults (1.11
and 0.67 eV) differ from the 300 K gaps (1.12 and 0.66 eV). Where no simulator default
exists the band gap stands in. Schottky barriers take ``SCHOTTKY_CARD_EG`` whatever the
semiconductor.
"""

from __future__ import annotations

from dataclasses import dataclass

from scipy import constants

from pnbench.errors import BadInput

_SZE = "Sze & Ng, Physics of Semiconductor Devices, 3rd ed. (2007), appendix, from memory"
_APPROX = "approximate: varies with polytype/orientation and between sources; from memory"
_SPICE2 = ("Nagel, SPICE2, UCB/ERL M520 (1975), diode model parameter table, from memory; "
           "also the ngspice manual's diode model")
_NO_CARD_DEFAULT = "no simulator default; the band gap at 300 K stands in"

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
    #: EG [eV] a pn-junction model card takes by default (None: the band gap stands in).
    card_eg_eV: SourcedValue | None = None

    @property
    def default_card_eg_eV(self) -> float:
        """The EG [eV] of a pn-junction model card of this material, when none is given."""
        return (self.card_eg_eV or self.bandgap_eV).value

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
        SourcedValue(11.7, "", _SZE + " (other tables give 11.8-11.9)"),
        SourcedValue(1.12, "eV", _SZE),
        SourcedValue(_m3(9.65e9), "m^-3", _SZE),
        SourcedValue(1.11, "eV", _SPICE2),
    ),
    "Ge": Material(
        "Ge",
        SourcedValue(16.0, "", _SZE + " (other tables give 16.2)"),
        SourcedValue(0.66, "eV", _SZE),
        SourcedValue(_m3(2.33e13), "m^-3", _SZE + " (other tables give 2.0-2.4e13 cm^-3)"),
        SourcedValue(0.67, "eV", _SPICE2),
    ),
    "GaAs": Material(
        "GaAs",
        SourcedValue(12.9, "", _SZE),
        SourcedValue(1.42, "eV", _SZE),
        SourcedValue(_m3(2.1e6), "m^-3", _SZE + " (other tables give 1.8e6-2.25e6 cm^-3)"),
        SourcedValue(1.42, "eV", _NO_CARD_DEFAULT),
    ),
    "4H-SiC": Material(
        "4H-SiC",
        SourcedValue(9.7, "", _APPROX, approximate=True),
        SourcedValue(3.26, "eV", _APPROX, approximate=True),
        SourcedValue(_m3(5e-9), "m^-3", "order of magnitude only; " + _APPROX,
                     approximate=True),
        SourcedValue(3.26, "eV", _NO_CARD_DEFAULT, approximate=True),
    ),
    "GaN": Material(
        "GaN",
        SourcedValue(8.9, "", "other sources give up to 9.5; " + _APPROX, approximate=True),
        SourcedValue(3.4, "eV", _APPROX, approximate=True),
        SourcedValue(_m3(2e-10), "m^-3", "order of magnitude only; " + _APPROX,
                     approximate=True),
        SourcedValue(3.4, "eV", _NO_CARD_DEFAULT, approximate=True),
    ),
}

#: Other names accepted for table entries (matched case-insensitively) -> table key.
ALIASES: dict[str, str] = {"SiC": "4H-SiC"}

#: EG [eV] of a Schottky-barrier model card and XTI of Schottky and pn cards by default.
SCHOTTKY_CARD_EG = SourcedValue(0.69, "eV", _SPICE2)
SCHOTTKY_CARD_XTI = SourcedValue(2.0, "", _SPICE2)
PN_CARD_XTI = SourcedValue(3.0, "", _SPICE2)


class UnknownMaterial(BadInput, ValueError):
    """A material name the table does not hold (a BadInput, and a ValueError)."""


def material(name: str | Material) -> Material:
    """The table entry for ``name`` (case-insensitive, ALIASES too), or the Material itself."""
    if isinstance(name, Material):
        return name
    wanted = str(name).strip().lower()
    wanted = {a.lower(): k for a, k in ALIASES.items()}.get(wanted, wanted).lower()
    for key, entry in MATERIALS.items():
        if key.lower() == wanted:
            return entry
    known = ", ".join([*MATERIALS, *(f"{a} (= {k})" for a, k in ALIASES.items())])
    raise UnknownMaterial(f"unknown material {name!r}; known: {known}")


def permittivity(name: str | Material) -> float:
    """Absolute permittivity [F/m] of a table material; UnknownMaterial if not there."""
    return material(name).permittivity_F_per_m
