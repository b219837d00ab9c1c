"""Simulated-device files: the diode on the simulated bench and how its instruments behave.

A device file is TOML. `[diode]` holds model-card names in SI units (docs/physics.md); the other
tables are pnbench's own and every key has a documented default (`KEYS`, also printed in
each bundled file's header):

    [device]   part, lab, description, material, junction, area, temperature_K, tnom_K
    [diode]    IS N RS RSH CJO VJ M FC TT BV IBV EG XTI TRS TRS2 TCV (missing: defaults;
               EG and XTI default from material and junction)
    [smu]      identity, seed, ranges, noise (percent of reading + percent of range),
               gain errors, lead resistance
    [lcr]      identity, seed, noise, gain error, limits, fixture strays
    [timing]   line frequency, settling and measurement times
    [stage]    the thermal stage: identity, accepted and reachable range, ramp limit,
               time constant, reading noise (drivers/sim/stage.py)
    [[fault]]  faults armed when the bench starts (same kinds as SimBench.inject)

The device on the bench is the card scaled by `area` (IS, IBV and CJO times area; RS and
RSH divided by it, as simulators treat their AREA factor) and moved from `tnom_K` to
`temperature_K` with the reference simulator's temperature equations (docs/physics.md §3;
`modeling.temperature`: IS with EG and XTI, VJ and CJO through the band gap, RS and BV
with TRS, TRS2 and TCV). Anything wrong raises DeviceFileError naming the file and key.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from pnbench.drivers.sim.devicekeys import (
    FAULT_KEYS,
    FAULT_KINDS,
    INSTRUMENTS,
    KEYS,
    PN_XTI,
    SCHOTTKY_XTI,
    Key,
    MATERIAL_EG_eV,
    SCHOTTKY_EG_eV,
)
from pnbench.errors import DeviceFileError
from pnbench.modeling import junction
from pnbench.modeling.params import UNITS, DiodeParams
from pnbench.tomltext import load_toml


@dataclass(frozen=True)
class FaultSpec:
    """A fault to arm on one instrument; `options` holds the kind's own keys."""

    instrument: str
    kind: str
    after: int = 0
    repeat: int = 1
    options: dict[str, Any] = field(default_factory=dict)

    def option(self, name: str) -> Any:
        return self.options.get(name, FAULT_KEYS[name][1])


@dataclass(frozen=True)
class SimDevice:
    """A loaded device file: the card, the bench conditions and the instrument behaviour."""

    card: DiodeParams
    device: dict[str, Any]
    smu: dict[str, Any]
    lcr: dict[str, Any]
    timing: dict[str, Any]
    faults: tuple[FaultSpec, ...] = ()
    source: str = "<device>"
    stage: dict[str, Any] = field(default_factory=dict)

    @property
    def part(self) -> str:
        return str(self.device["part"])

    @property
    def temperature_K(self) -> float:
        return float(self.device["temperature_K"])

    @property
    def params(self) -> DiodeParams:
        """The diode on the bench: card scaled by area and moved to temperature_K."""
        return self.params_at(self.temperature_K)

    def params_at(self, temperature_K: float) -> DiodeParams:
        """The diode on the bench at another temperature (a thermal stage's)."""
        area = float(self.device["area"])
        p = junction.params_at_temperature(self.card, temperature_K,
                                           float(self.device["tnom_K"]))
        return p.with_values(IS=p.IS * area, IBV=p.IBV * area, CJO=p.CJO * area,
                             RS=p.RS / area, RSH=p.RSH / area)


# --- loading ---------------------------------------------------------------------------

def load_device(path: str | Path) -> SimDevice:
    """Read and check a device file; DeviceFileError names the file and key on any fault."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DeviceFileError(f"{path}: cannot read the device file ({exc})") from None
    return parse_device(text, str(path))


def parse_device(text: str, source: str = "<device>") -> SimDevice:
    """A SimDevice from the text of a device file (`source` names it in messages)."""
    doc = load_toml(text, DeviceFileError, source, "a device file has flat tables of values")
    known = set(KEYS) | {"diode", "fault"}
    for name in doc:
        if name not in known:
            raise DeviceFileError(
                f"{source}: unknown table or key {name!r}; a device file has the tables "
                + ", ".join(f"[{t}]" for t in ("device", "diode", "smu", "lcr", "timing", "stage"))
                + " and [[fault]] entries"
            )
    tables = {name: _table(doc, name, text, source) for name in KEYS}
    card = _diode(doc.get("diode", {}), tables["device"], text, source)
    _cross_checks(tables, text, source)
    faults = doc.get("fault", [])
    if not isinstance(faults, list):
        raise DeviceFileError(f"{source}: 'fault' must be written as [[fault]] tables")
    specs = tuple(
        parse_fault(entry, where=f"{source}: [[fault]] number {k}{_line(text, 'fault', None)}")
        for k, entry in enumerate(faults, start=1)
    )
    return SimDevice(card=card, device=tables["device"], smu=tables["smu"], lcr=tables["lcr"],
                     timing=tables["timing"], faults=specs, source=source,
                     stage=tables["stage"])


def _line(text: str, table: str, key: str | None) -> str:
    """' (line N)' where `key` is written under `[table]` in text, or '' if not found."""
    in_table = False
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if stripped.startswith("["):
            in_table = stripped.strip("[] ").split("#")[0].strip("[] ") == table
            if in_table and key is None:
                return f" (line {number})"
            continue
        if in_table and key and re.match(rf"\s*{re.escape(key)}\s*=", line, re.IGNORECASE):
            return f" (line {number})"
    return ""


def _where(source: str, text: str, table: str, key: str) -> str:
    return f"{source}: [{table}] {key}{_line(text, table, key)}"


def _table(doc: dict, name: str, text: str, source: str) -> dict[str, Any]:
    raw = doc.get(name, {})
    if not isinstance(raw, dict):
        raise DeviceFileError(f"{source}: {name!r} must be a table, written [{name}]")
    keys = {k.name: k for k in KEYS[name]}
    for given in raw:
        if given not in keys:
            raise DeviceFileError(
                f"{_where(source, text, name, given)}: unknown key; [{name}] accepts "
                + ", ".join(keys)
            )
    out: dict[str, Any] = {}
    for key in KEYS[name]:
        if key.name not in raw:
            out[key.name] = key.default
            continue
        out[key.name] = _value(raw[key.name], key, _where(source, text, name, key.name))
    return out


def _value(value: Any, key: Key, where: str) -> Any:
    expected = {"str": "a quoted string", "int": "a whole number",
                "float": "a number", "floats": "a list of numbers > 0 in ascending order"}
    accepted = key.accepted or expected[key.kind]
    if key.kind == "str":
        ok = isinstance(value, str)
    elif key.kind == "int":
        ok = isinstance(value, int) and not isinstance(value, bool)
    elif key.kind == "float":
        ok = isinstance(value, (int, float)) and not isinstance(value, bool) \
            and math.isfinite(value)
        value = float(value) if ok else value
    else:
        ok = (isinstance(value, list) and len(value) > 0
              and all(isinstance(x, (int, float)) and not isinstance(x, bool)
                      and math.isfinite(x) and x > 0 for x in value)
              and all(a < b for a, b in zip(value, value[1:], strict=False)))
        value = tuple(float(x) for x in value) if ok else value
    if not ok or not key.check(value):
        raise DeviceFileError(f"{where} = {value!r}: expected {accepted}")
    return value


def _diode(raw: Any, device: dict, text: str, source: str) -> DiodeParams:
    if not isinstance(raw, dict):
        raise DeviceFileError(f"{source}: 'diode' must be a table, written [diode]")
    values: dict[str, float] = {}
    for given, value in raw.items():
        name = given.upper()
        where = _where(source, text, "diode", given)
        if name not in UNITS:
            raise DeviceFileError(f"{where}: unknown model-card name; [diode] accepts "
                                  + ", ".join(UNITS))
        if isinstance(value, bool) or not isinstance(value, (int, float)) or math.isnan(value):
            unit = f" in {UNITS[name]}" if UNITS[name] else " (no unit)"
            raise DeviceFileError(f"{where} = {value!r}: expected a number{unit} "
                                  "(inf allowed for RSH and BV)")
        values[name] = float(value)
    schottky = device["junction"] == "schottky"
    values.setdefault("EG", SCHOTTKY_EG_eV if schottky else MATERIAL_EG_eV[device["material"]])
    values.setdefault("XTI", SCHOTTKY_XTI if schottky else PN_XTI)
    try:
        return DiodeParams.from_mapping(values)
    except ValueError as exc:
        name = str(exc).split()[0]
        raise DeviceFileError(f"{_where(source, text, 'diode', name)}: {exc}") from None


def _cross_checks(tables: dict[str, dict], text: str, source: str) -> None:
    stage = tables["stage"]
    for low, high in (("lowest_K", "highest_K"), ("reach_low_K", "reach_high_K")):
        if stage[low] >= stage[high]:
            raise DeviceFileError(f"{_where(source, text, 'stage', low)} = {stage[low]!r}: "
                                  f"must be below {high} = {stage[high]!r}")
    lcr = tables["lcr"]
    for low, high in (("frequency_min_Hz", "frequency_max_Hz"),
                      ("ac_level_min_V", "ac_level_max_V")):
        if lcr[low] >= lcr[high]:
            raise DeviceFileError(f"{_where(source, text, 'lcr', low)} = {lcr[low]!r}: "
                                  f"must be below {high} = {lcr[high]!r}")


def parse_fault(entry: Any, where: str = "fault") -> FaultSpec:
    """A FaultSpec from a mapping (a [[fault]] table or SimBench.inject's keywords)."""
    if not isinstance(entry, dict):
        raise DeviceFileError(f"{where}: expected a table of fault keys")
    for required in ("instrument", "kind"):
        if required not in entry:
            raise DeviceFileError(f"{where}: missing key {required!r} ({FAULT_KEYS[required][2]})")
    instrument, kind = entry["instrument"], entry["kind"]
    if instrument not in INSTRUMENTS:
        raise DeviceFileError(f"{where}: instrument = {instrument!r}: expected smu, lcr "
                              "or stage")
    if kind not in FAULT_KINDS:
        raise DeviceFileError(f"{where}: kind = {kind!r}: expected one of "
                              + ", ".join(FAULT_KINDS))
    options: dict[str, Any] = {}
    for name, value in entry.items():
        if name in ("instrument", "kind"):
            continue
        spec = FAULT_KEYS.get(name)
        if spec is None or kind not in spec[3]:
            usable = [k for k, s in FAULT_KEYS.items() if kind in s[3]]
            raise DeviceFileError(f"{where}: key {name!r} does not apply to a {kind} fault; "
                                  "it accepts " + ", ".join(usable))
        typ = spec[0]
        ok = (isinstance(value, str) if typ == "str" else
              isinstance(value, int) and not isinstance(value, bool) if typ == "int" else
              isinstance(value, (int, float)) and not isinstance(value, bool)
              and math.isfinite(value) and value >= 0)
        if ok and name in ("after", "repeat") and value < 0:
            ok = False
        if not ok:
            raise DeviceFileError(f"{where}: {name} = {value!r}: expected "
                                  + {"str": "a string", "int": "a whole number (>= 0 for "
                                     "after and repeat)", "float": "a number >= 0"}[typ])
        options[name] = float(value) if typ == "float" else value
    after = options.pop("after", 0)
    repeat = options.pop("repeat", 1)
    return FaultSpec(instrument=instrument, kind=kind, after=after, repeat=repeat,
                     options=options)


# --- bundled devices -------------------------------------------------------------------

def bundled_devices() -> dict[str, Path]:
    """Name -> path of every device file shipped in pnbench.sim_configs."""
    found: dict[str, Path] = {}
    for entry in resources.files("pnbench.sim_configs").iterdir():
        if entry.name.endswith(".toml") and entry.is_file():
            if re.search(r"^\[diode\]", entry.read_text(encoding="utf-8"), re.MULTILINE):
                found[entry.name[: -len(".toml")]] = Path(str(entry))
    return dict(sorted(found.items()))


def bundled_device(name: str) -> Path:
    """The path of a bundled device file by name ("lh-vc510", case-insensitive)."""
    devices = bundled_devices()
    key = name.lower().removesuffix(".toml")
    for found, path in devices.items():
        if found.lower() == key:
            return path
    raise DeviceFileError(f"no bundled simulated device named {name!r}; bundled: "
                          + (", ".join(devices) or "none"))


def resolve_device(spec: str | Path | SimDevice) -> SimDevice:
    """A SimDevice from itself, a file path, or the name of a bundled device."""
    if isinstance(spec, SimDevice):
        return spec
    path = Path(spec)
    if path.exists() or isinstance(spec, Path) or path.suffix == ".toml" or "/" in str(spec):
        return load_device(path)
    return load_device(bundled_device(str(spec)))
