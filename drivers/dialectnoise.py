"""A dialect's optional statement of its instrument's noise: `[smu_noise]`, `[lcr_noise]`.

Numbers in SI (the key names carry the unit), 1 sigma of one reading at 1 NPLC:

    [smu_noise]   current_percent, current_floor_A, voltage_percent, voltage_floor_V,
                  current_floor_per_range_A (a table: current range in A = its floor in A,
                  e.g. { "1e-6" = 2e-12, "1e-3" = 5e-9 }; a reading takes the floor of
                  the smallest listed range at or above it)
    [lcr_noise]   percent (of |Y|, on each of G and B), floor_F (a capacitance)

Every key may be left out (0). The built-in default dialect states none: it is
generic, and the noise belongs to an instrument. A plan's instrument table wins over
these (docs/dialects.md).
"""

from __future__ import annotations

import math

from pnbench.errors import DialectError
from pnbench.modeling.stated import StatedNoise, floor_table

TABLES = {"smu_noise": ("current_percent", "current_floor_A", "voltage_percent",
                        "voltage_floor_V", "current_floor_per_range_A"),
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
        per_range = _range_table(raw.get("current_floor_per_range_A"), source, table)
        for key in keys:
            if key == "current_floor_per_range_A":
                continue
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
                                voltage=volt, floor_by_range=per_range)
        else:
            noise = StatedNoise(got["percent"] / 100, got["floor_F"])
        if noise.relative == 0 and noise.floor == 0 and not any(
                f for _, f in noise.floor_by_range):
            raise DialectError(f"dialect {source}: [{table}]: states no noise; give "
                               f"{keys[0]} and/or {keys[1]} above zero, or leave it out")
        out[table.removesuffix("_noise")] = noise
    return out


def _range_table(raw: object, source: str, table_name: str) -> tuple:
    """``current_floor_per_range_A``: {range in A (a quoted number) = floor in A}."""
    if raw is None:
        return ()
    where = f"dialect {source}: [{table_name}] current_floor_per_range_A"
    if not isinstance(raw, dict) or not raw or not all(
            isinstance(v, int | float) and not isinstance(v, bool) for v in raw.values()):
        raise DialectError(f"{where}: expected a table of current range = floor in A, "
                           f'such as {{ "1e-6" = 2e-12, "1e-3" = 5e-9 }}, found {raw!r}')
    try:
        pairs = floor_table(raw)
    except ValueError as exc:
        raise DialectError(f"{where}: {exc}") from None
    if any(f > 1.0 for _, f in pairs):
        raise DialectError(f"{where}: a floor above 1 A is a typo, found {raw!r}")
    return pairs
