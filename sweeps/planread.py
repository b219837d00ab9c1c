"""Typed reading of plan tables, collecting every problem with its key and line.

`TableReader` wraps one TOML table (a dict) with its key path. Each `quantity`, `integer`,
`choice`... call takes a key, returns a typed value (or None when absent and optional) and
records a problem instead of raising, so one pass over a plan reports all its mistakes.
`finish()` records every key that was never asked for as unknown, with the closest known
name as a suggestion.
"""

from __future__ import annotations

import difflib
import math
import re

from pnbench.errors import BadInput
from pnbench.sweeps.quantities import parse_quantity
from pnbench.sweeps.tomllines import KeyPath, describe, line_of

#: Area units a plan may use, with their size in m^2.
_AREA_UNITS = {"m2": 1.0, "cm2": 1e-4, "mm2": 1e-6, "um2": 1e-12, "µm2": 1e-12}
_AREA = re.compile(r"^\s*([-+0-9.eE]+)\s*([a-zµ]*m)(?:2|\^2|²)\s*$")


class Problems:
    """The problems found in one plan file, each naming its key and line."""

    def __init__(self, filename: str, lines: dict[KeyPath, int]) -> None:
        self.filename = filename
        self.lines = lines
        self._found: list[tuple[int, int, str]] = []

    def add(self, path: KeyPath, message: str) -> None:
        line = line_of(self.lines, path)
        where = f"line {line}, " if line else ""
        self._found.append((line or 0, len(self._found), f"{where}{describe(path)}: {message}"))

    @property
    def items(self) -> list[str]:
        """The problems in the order of the file."""
        return [text for _, _, text in sorted(self._found)]


class TableReader:
    def __init__(self, table: object, path: KeyPath, problems: Problems) -> None:
        self.path = path
        self.problems = problems
        if not isinstance(table, dict):
            problems.add(path, f"expected a table, found {_kind(table)}")
            table = {}
        self.table: dict = table
        self.known: set[str] = set()

    def problem(self, key: str | None, message: str) -> None:
        self.problems.add(self.path + ((key,) if key else ()), message)

    def has(self, key: str) -> bool:
        self.known.add(key)
        return key in self.table

    def raw(self, key: str, required: bool = False, what: str = "a value") -> object:
        self.known.add(key)
        if key not in self.table:
            if required:
                self.problem(None, f"missing key {key!r} ({what})")
            return None
        return self.table[key]

    def text(self, key: str, default: str | None = None, required: bool = False) -> str | None:
        value = self.raw(key, required, "text")
        if value is None:
            return default
        if not isinstance(value, str):
            self.problem(key, f"expected text in quotes, found {_kind(value)} {value!r}")
            return default
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self.raw(key)
        if value is None:
            return default
        if not isinstance(value, bool):
            self.problem(key, f"expected true or false, found {value!r}")
            return default
        return value

    def integer(self, key: str, default: int | None = None, low: int = 1,
                high: int = 1_000_000, required: bool = False) -> int | None:
        value = self.raw(key, required, f"a whole number from {low} to {high}")
        if value is None:
            return default
        if isinstance(value, bool) or not isinstance(value, int):
            self.problem(key, f"expected a whole number, found {value!r}")
            return default
        if not low <= value <= high:
            self.problem(key, f"{value} is out of range; accepted: {low} to {high}")
            return default
        return value

    def number(self, key: str, default: float | None = None, low: float = -math.inf,
               high: float = math.inf, required: bool = False) -> float | None:
        value = self.raw(key, required, "a number")
        if value is None:
            return default
        if isinstance(value, bool) or not isinstance(value, (int, float)) or math.isnan(value):
            self.problem(key, f"expected a plain number, found {value!r}")
            return default
        if not low <= value <= high:
            self.problem(key, f"{value!r} is out of range; accepted: {low:g} to {high:g}")
            return default
        return float(value)

    def quantity(self, key: str, unit: str, default: float | None = None,
                 required: bool = False, positive: bool = False,
                 nonnegative: bool = False) -> float | None:
        """A number in SI units, or text with an optional SI prefix and the unit."""
        value = self.raw(key, required, f"a quantity in {unit}, e.g. \"2.5 m{unit}\"")
        if value is None:
            return default
        return self._convert(key, value, unit, positive, nonnegative, default)

    def quantity_list(self, key: str, unit: str, required: bool = False,
                      positive: bool = False) -> list[float] | None:
        value = self.raw(key, required, f"a list of quantities in {unit}")
        if value is None:
            return None
        if not isinstance(value, list):
            value = [value]
        out = []
        for k, item in enumerate(value):
            converted = self._convert(key, item, unit, positive, False, None, k)
            if converted is None:
                return None
            out.append(converted)
        return out

    def _convert(self, key: str, value: object, unit: str, positive: bool,
                 nonnegative: bool, default: float | None, item: int | None = None):
        where = f"item {item + 1}: " if item is not None else ""
        if isinstance(value, bool) or not isinstance(value, (int, float, str)):
            self.problem(key, f"{where}expected a quantity in {unit} such as 10 or "
                         f"\"10 m{unit}\", found {_kind(value)}")
            return default
        try:
            number = parse_quantity(value, unit, what="value")
        except BadInput as exc:
            self.problem(key, where + str(exc))
            return default
        if positive and number <= 0:
            self.problem(key, f"{where}must be above zero, found {value!r}")
            return default
        if nonnegative and number < 0:
            self.problem(key, f"{where}must not be negative, found {value!r}")
            return default
        return number

    def area(self, key: str) -> float | None:
        """An area in m^2: a number, or text like "0.25 mm2", "1e-3 cm^2"."""
        value = self.raw(key)
        if value is None:
            return None
        number = None
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            number = float(value)
        elif isinstance(value, str):
            match = _AREA.match(value)
            if match and match.group(2) + "2" in _AREA_UNITS:
                try:
                    number = float(match.group(1)) * _AREA_UNITS[match.group(2) + "2"]
                except ValueError:
                    number = None
        if number is None or not math.isfinite(number) or number <= 0:
            self.problem(key, f"cannot read {value!r} as an area; accepted: a positive "
                         "number in m^2 or text such as \"0.25 mm2\", \"1e-3 cm2\", "
                         "\"500 um2\"")
            return None
        return number

    def temperature(self, key: str, default: float) -> float:
        """Kelvin: a number or "300 K"; "25 degC" is converted."""
        value = self.raw(key)
        if value is None:
            return default
        if isinstance(value, str) and value.strip().endswith(("degC", "°C")):
            body = value.strip().removesuffix("degC").removesuffix("°C")
            kelvin = self._convert(key, body, "", False, False, None)
            kelvin = None if kelvin is None else kelvin + 273.15
        else:
            kelvin = self._convert(key, value, "K", True, False, None)
        if kelvin is None:
            return default
        if not 1.0 <= kelvin <= 1000.0:
            self.problem(key, f"{value!r} is not a bench temperature; accepted: 1 K to "
                         "1000 K (or \"25 degC\")")
            return default
        return kelvin

    def choice(self, key: str, options: tuple[str, ...], default: str | None = None,
               required: bool = False) -> str | None:
        value = self.raw(key, required, "one of " + ", ".join(options))
        if value is None:
            return default
        if value not in options:
            self.problem(key, f"{value!r} is not accepted; use one of "
                         + ", ".join(repr(o) for o in options))
            return default
        return value

    def finish(self) -> None:
        for key in self.table:
            if key not in self.known:
                hint = difflib.get_close_matches(key, sorted(self.known), n=1)
                accepted = f"did you mean {hint[0]!r}?" if hint else (
                    "accepted keys: " + ", ".join(sorted(self.known)))
                self.problem(key, f"unknown key {key!r}; {accepted}")


def _kind(value: object) -> str:
    return {dict: "a table", list: "a list", str: "text", bool: "true/false"}.get(
        type(value), type(value).__name__)
