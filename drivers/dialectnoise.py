"""A dialect's optional statement of its instrument's noise: `[smu_noise]`, `[lcr_noise]`.

Numbers in SI (the key names carry the unit), 1 sigma of one reading at 1 NPLC:

    [smu_noise]   current_percent, current_floor_A, voltage_percent, voltage_floor_V
    [lcr_noise]   percent (of |Y|, on each of G and B), floor_F (a capacitance)

Every key may be left out (0). The built-in default dialect states none: it is
generic, and the noise belongs to an instrument. A plan's instrument table wins over
these (docs/dialects.md).
"""

from __future__ import annotations

import math

from pnbench.errors import DialectError
from pnbench.modeling.stated import StatedNoise

TABLES = {"smu_noise": ("current_percent", "current_floor_A", "voltage_percent",
                        "voltage_floor_V"),
          "lcr_noise": ("percent", "floor_F")}
MAX_PERCENT = 50.0


def parse_noise(data: dict, source: str) -> dict[str, StatedNoise]:
    """{"smu"|"lcr": StatedNoise} from a dialect document's noise tables."""
    out = {}
    for table, keys in TABLES.items():
        if table not in data:
            continue
        raw = data[table]
        if not isinstance(raw, dict):
            raise DialectError(f"dialect {source}: [{table}]: expected a table")
        unknown = sorted(set(raw) - set(keys))
        if unknown:
            raise DialectError(f"dialect {source}: [{table}] {unknown[0]}: unknown key "
                               f"(accepted: {', '.join(keys)})")
        got = {}
        for key in keys:
            value = raw.get(key, 0.0)
            high = MAX_PERCENT if key.endswith("percent") else 1.0
            if isinstance(value, bool) or not isinstance(value, int | float) \
                    or not math.isfinite(value) or not 0 <= value <= high:
                raise DialectError(f"dialect {source}: [{table}] {key}: expected a number "
                                   f"from 0 to {high:g}, found {value!r}")
            got[key] = float(value)
        if table == "smu_noise":
            volt = (StatedNoise(got["voltage_percent"] / 100, got["voltage_floor_V"])
                    if got["voltage_percent"] or got["voltage_floor_V"] else None)
            noise = StatedNoise(got["current_percent"] / 100, got["current_floor_A"],
                                voltage=volt)
        else:
            noise = StatedNoise(got["percent"] / 100, got["floor_F"])
        if noise.relative == 0 and noise.floor == 0:
            raise DialectError(f"dialect {source}: [{table}]: states no noise; give "
                               f"{keys[0]} and/or {keys[1]} above zero, or leave it out")
        out[table.removesuffix("_noise")] = noise
    return out
