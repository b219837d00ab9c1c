"""The documented keys of a simulated-device file: names, kinds, defaults, checks.

`simdevice` reads files against these tables; `key_table()` prints them (the bundled
files' headers and the sim command's help say the same). See simdevice for the meaning of
the tables as a whole.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from pnbench.modeling.materials import (
    ALIASES,
    MATERIALS,
    PN_CARD_XTI,
    SCHOTTKY_CARD_EG,
    SCHOTTKY_CARD_XTI,
)
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: EG [eV] a pn junction's card takes by default, by material name (the materials table's
#: card_eg_eV, docs/physics.md §8; its aliases accepted too).
MATERIAL_EG_eV = {
    **{name: m.default_card_eg_eV for name, m in MATERIALS.items()},
    **{alias: MATERIALS[key].default_card_eg_eV for alias, key in ALIASES.items()},
}
#: EG [eV] and XTI of a Schottky barrier, and XTI of a pn junction, by default (SPICE2's
#: parameter table, from memory; the materials module keeps them with their source).
SCHOTTKY_EG_eV, SCHOTTKY_XTI = SCHOTTKY_CARD_EG.value, SCHOTTKY_CARD_XTI.value
PN_XTI = PN_CARD_XTI.value

FAULT_KINDS = ("drop", "stall", "garbage", "error", "overflow")
INSTRUMENTS = ("smu", "lcr", "stage")


@dataclass(frozen=True)
class Key:
    """One documented key of a device-file table."""

    name: str
    kind: str  # "float", "int", "str", "floats" (a list of positive numbers, ascending)
    default: Any
    doc: str
    check: Callable[[Any], bool] = lambda _v: True
    accepted: str = ""


def _pos(x: Any) -> bool:
    return x > 0


def _nonneg(x: Any) -> bool:
    return x >= 0


KEYS: dict[str, tuple[Key, ...]] = {
    "device": (
        Key("part", "str", "unnamed part", "part number shown in identities and reports"),
        Key("lab", "str", "", "who made the part (free text)"),
        Key("description", "str", "", "one line about the part"),
        Key("material", "str", "Si", "semiconductor; sets the EG default",
            lambda v: v in MATERIAL_EG_eV, "one of " + ", ".join(MATERIAL_EG_eV)),
        Key("junction", "str", "pn", "pn or schottky; schottky sets EG 0.69 eV, XTI 2",
            lambda v: v in ("pn", "schottky"), "pn or schottky"),
        Key("area", "float", 1.0, "area factor: IS, IBV, CJO times it; RS, RSH divided",
            _pos, "a number > 0"),
        Key("temperature_K", "float", DEFAULT_TEMPERATURE_K, "device temperature on the bench",
            _pos, "a temperature in kelvin > 0"),
        Key("tnom_K", "float", DEFAULT_TEMPERATURE_K, "temperature the [diode] values hold at",
            _pos, "a temperature in kelvin > 0"),
    ),
    "smu": (
        Key("identity", "str", "pnbench,simulated SMU,0,1", "the *IDN? reply"),
        Key("seed", "int", 1, "noise seed: the same commands give the same readings"),
        Key("voltage_ranges_V", "floats", (0.2, 2.0, 20.0, 200.0),
            "voltage ranges; the largest is the source limit"),
        Key("current_ranges_A", "floats",
            (1e-8, 1e-7, 1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 0.1, 1.0),
            "current ranges; the largest is the source limit"),
        Key("current_noise_percent_of_reading", "float", 0.01,
            "1-sigma current noise at 1 NPLC, percent of the reading", _nonneg, "a number >= 0"),
        Key("current_noise_percent_of_range", "float", 0.005,
            "1-sigma current noise floor at 1 NPLC, percent of the range", _nonneg,
            "a number >= 0"),
        Key("voltage_noise_percent_of_reading", "float", 0.005,
            "1-sigma voltage noise at 1 NPLC, percent of the reading", _nonneg, "a number >= 0"),
        Key("voltage_noise_percent_of_range", "float", 0.002,
            "1-sigma voltage noise floor at 1 NPLC, percent of the range", _nonneg,
            "a number >= 0"),
        Key("current_gain_error_percent", "float", 0.0, "fixed gain error of current readings",
            lambda v: abs(v) < 50, "a number between -50 and 50"),
        Key("voltage_gain_error_percent", "float", 0.0, "fixed gain error of voltage readings",
            lambda v: abs(v) < 50, "a number between -50 and 50"),
        Key("lead_resistance_ohm", "float", 0.0,
            "test-lead resistance seen in 2-wire mode (remote sense off)", _nonneg,
            "a number >= 0"),
    ),
    "lcr": (
        Key("identity", "str", "pnbench,simulated LCR meter,0,1", "the *IDN? reply"),
        Key("seed", "int", 2, "noise seed"),
        Key("noise_percent_of_reading", "float", 0.05,
            "1-sigma noise of real and imaginary admittance, percent of |Y|", _nonneg,
            "a number >= 0"),
        Key("noise_floor_F", "float", 2e-15,
            "1-sigma noise floor as a capacitance (2*pi*f*C siemens)", _nonneg,
            "a number >= 0"),
        Key("gain_error_percent", "float", 0.0, "fixed gain error of the admittance",
            lambda v: abs(v) < 50, "a number between -50 and 50"),
        Key("frequency_min_Hz", "float", 20.0, "lowest test frequency", _pos, "a number > 0"),
        Key("frequency_max_Hz", "float", 2e6, "highest test frequency", _pos, "a number > 0"),
        Key("ac_level_min_V", "float", 0.005, "lowest AC level (rms)", _pos, "a number > 0"),
        Key("ac_level_max_V", "float", 2.0, "highest AC level (rms)", _pos, "a number > 0"),
        Key("bias_max_V", "float", 40.0, "largest DC bias magnitude", _pos, "a number > 0"),
        Key("bias_current_limit_A", "float", 0.1,
            "the bias source sags to hold this current", _pos, "a number > 0"),
        Key("fixture_capacitance_F", "float", 0.0,
            "stray capacitance across the fixture, removed by open correction", _nonneg,
            "a number >= 0"),
        Key("fixture_resistance_ohm", "float", 0.0,
            "series resistance of the fixture, removed by short correction", _nonneg,
            "a number >= 0"),
    ),
    "timing": (
        Key("line_frequency_Hz", "float", 50.0, "power-line frequency: 1 NPLC = 1/this",
            lambda v: v in (50.0, 60.0), "50 or 60"),
        Key("smu_settling_s", "float", 5e-4,
            "settling before a reading after the source changed", _nonneg, "a number >= 0"),
        Key("lcr_settling_s", "float", 5e-3,
            "settling after bias, frequency or level changed", _nonneg, "a number >= 0"),
        Key("lcr_measurement_s", "float", 0.02, "one LCR reading", _nonneg, "a number >= 0"),
        Key("command_s", "float", 1e-4, "parsing one command unit", _nonneg, "a number >= 0"),
    ),
    "stage": (
        Key("identity", "str", "pnbench,simulated thermal stage,0,1", "the *IDN? reply"),
        Key("seed", "int", 3, "noise seed of the temperature reading"),
        Key("lowest_K", "float", 223.15, "lowest set point the stage accepts", _pos,
            "a temperature in kelvin > 0"),
        Key("highest_K", "float", 473.15, "highest set point the stage accepts", _pos,
            "a temperature in kelvin > 0"),
        Key("reach_low_K", "float", 223.15,
            "coldest the stage can hold (a weak stage settles short of a colder set point)",
            _pos, "a temperature in kelvin > 0"),
        Key("reach_high_K", "float", 473.15, "hottest the stage can hold", _pos,
            "a temperature in kelvin > 0"),
        Key("max_ramp_K_per_min", "float", 30.0, "fastest ramp rate the stage accepts", _pos,
            "a number > 0"),
        Key("time_constant_s", "float", 30.0,
            "first-order lag of the device temperature behind the stage's ramp", _pos,
            "a number > 0"),
        Key("reading_noise_K", "float", 0.01, "1-sigma noise of the stage's reading",
            _nonneg, "a number >= 0"),
    ),
}

#: Keys of one [[fault]] entry: (kind, default, doc); which kinds use them.
FAULT_KEYS: dict[str, tuple[str, Any, str, tuple[str, ...]]] = {
    "instrument": ("str", None, "smu, lcr or stage (required)", FAULT_KINDS),
    "kind": ("str", None, "drop, stall, garbage, error or overflow (required)", FAULT_KINDS),
    "after": ("int", 0, "command units the instrument handles before the fault fires",
              FAULT_KINDS),
    "repeat": ("int", 1, "how many times it fires (0 = every time after)", FAULT_KINDS),
    "seconds": ("float", 30.0, "how long a stalled reply is held back", ("stall",)),
    "text": ("str", "@@?!#garbled", "the garbage sent instead of a reply", ("garbage",)),
    "code": ("int", -300, "error-queue code pushed", ("error",)),
    "message": ("str", "Device-specific error; simulated fault", "error-queue message",
                ("error",)),
}


def key_table() -> str:
    """Every documented key with its default, as text (for help and file headers)."""
    lines = []
    for table, keys in KEYS.items():
        lines.append(f"[{table}]")
        for k in keys:
            lines.append(f"  {k.name} = {k.default!r}  # {k.doc}")
    lines.append("[diode]  IS N RS RSH CJO VJ M FC TT BV IBV EG XTI TRS TRS2 TCV "
                 "(model-card names, SI)")
    lines.append("[[fault]]")
    for name, (_typ, default, doc, kinds) in FAULT_KEYS.items():
        lines.append(f"  {name} = {default!r}  # {doc}; kinds: {', '.join(kinds)}")
    return "\n".join(lines)
