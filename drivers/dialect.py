"""Instrument dialects: the command vocabulary of each role, read from a TOML file.

A dialect file has a ``[dialect]`` table (name, format, separator, terminations and the
words for on/off), a ``[common]`` table (IEEE 488.2 commands and the error-queue query)
and one table per role it serves (``[smu]``, ``[lcr]``, ``[stage]`` for a thermal stage;
a file may leave a role out).
Every key of a table that is present must be given; an empty string means "this
instrument has no such command" where that is allowed. Loading checks every key, its type,
its placeholders and whether it is a query, and names the file and key of any fault.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from importlib import resources
from pathlib import Path
from typing import Any

from pnbench.drivers import scpi
from pnbench.drivers.dialectnoise import parse_noise
from pnbench.errors import DialectError
from pnbench.tomltext import load_toml

#: The two-element forms an LCR meter may report, named in pnbench's own plain words
#: (by the equivalent circuit and its second quantity), and what the two fields are.
LCR_FORMS = {
    "parallel": "parallel capacitance Cp [F], parallel conductance Gp [S]",
    "parallel_r": "parallel capacitance Cp [F], parallel resistance Rp [ohm]",
    "parallel_d": "parallel capacitance Cp [F], dissipation factor D",
    "series": "series capacitance Cs [F], series resistance Rs [ohm]",
    "series_d": "series capacitance Cs [F], dissipation factor D",
    "admittance": "conductance G [S], susceptance B [S]",
    "impedance": "resistance R [ohm], reactance X [ohm]",
}
SMU_FIELDS = ("voltage", "current", "compliance", "skip")
LCR_FIELDS = ("primary", "secondary", "skip")


@dataclass(frozen=True)
class CommonCommands:
    identify: str
    reset: str
    clear_status: str
    operation_complete: str
    next_error: str


@dataclass(frozen=True)
class SmuCommands:
    source_voltage_mode: str
    source_current_mode: str
    set_voltage: str
    set_current: str
    current_limit: str
    voltage_limit: str
    current_range: str
    current_autorange: str
    voltage_range: str
    voltage_autorange: str
    integration_nplc: str
    remote_sense: str
    output: str
    output_query: str
    read: str
    read_fields: tuple[str, ...]
    tripped_sourcing_voltage: str
    tripped_sourcing_current: str


@dataclass(frozen=True)
class LcrCommands:
    frequency: str
    ac_level: str
    bias_level: str
    bias_state: str
    bias_state_query: str
    model: str
    form: str
    read: str
    read_fields: tuple[str, ...]
    open_correction: str
    short_correction: str
    #: the correction data at the frequency set: open G, B [S]; short R, X [ohm]
    open_data_query: str = ""
    short_data_query: str = ""
    #: turn the meter's stored open/short correction on or off ({state}), and ask it;
    #: empty: the correction command itself turns it on (pnbench cannot turn it off)
    open_state: str = ""
    short_state: str = ""
    open_state_query: str = ""
    short_state_query: str = ""


@dataclass(frozen=True)
class StageCommands:
    """A thermal stage (chuck, oven, cryostat controller); temperatures in
    ``temperature_unit`` ("K" or "C"), the ramp rate in that unit per minute."""

    temperature_unit: str
    set_point: str
    set_point_query: str
    measure: str
    ramp_rate: str
    control: str
    control_query: str


#: Units a stage dialect may state its temperatures in.
STAGE_UNITS = ("K", "C")


@dataclass(frozen=True)
class Dialect:
    """A validated dialect. `source` names the file it came from."""

    name: str
    format: int
    separator: str
    read_termination: str
    write_termination: str
    on: str
    off: str
    common: CommonCommands
    smu: SmuCommands | None
    lcr: LcrCommands | None
    source: str
    stage: StageCommands | None = None
    #: the instrument's stated noise by role ("smu", "lcr"), from [smu_noise]/[lcr_noise]
    noise: dict = field(default_factory=dict)

    def fill(self, template: str, **kwargs: Any) -> str:
        """`scpi.fill` with this dialect's on/off words."""
        return scpi.fill(template, on=self.on, off=self.off, **kwargs)

    def join(self, commands: list[str]) -> str:
        """One program message from several units, with this dialect's separator."""
        return scpi.join(commands, self.separator)

    def require(self, role: str) -> SmuCommands | LcrCommands | StageCommands:
        """The commands of `role` ("smu", "lcr" or "stage"); DialectError if the file
        has none."""
        table = getattr(self, role, None)
        if table is None:
            raise DialectError(
                f"dialect {self.source} has no [{role}] table, so it cannot drive that "
                f"instrument; add the table (see the default dialect for its keys)"
            )
        return table


# --- what each key may hold ----------------------------------------------------------
# kind: "setting" (no '?', no placeholder), "query" (has '?'), "value"/"state"/"form"
# (a setting with that placeholder); a trailing "?" on the kind means "may be empty".
_COMMON_KINDS = {
    "identify": "query",
    "reset": "setting",
    "clear_status": "setting",
    "operation_complete": "query",
    "next_error": "query",
}
_SMU_KINDS = {
    "source_voltage_mode": "setting?",
    "source_current_mode": "setting?",
    "set_voltage": "value",
    "set_current": "value",
    "current_limit": "value",
    "voltage_limit": "value",
    "current_range": "value?",
    "current_autorange": "state?",
    "voltage_range": "value?",
    "voltage_autorange": "state?",
    "integration_nplc": "value?",
    "remote_sense": "state?",
    "output": "state",
    "output_query": "query",
    "read": "query",
    "read_fields": "fields",
    "tripped_sourcing_voltage": "query?",
    "tripped_sourcing_current": "query?",
}
_LCR_KINDS = {
    "frequency": "value",
    "ac_level": "value",
    "bias_level": "value",
    "bias_state": "state",
    "bias_state_query": "query?",
    "model": "form?",
    "form": "form_name",
    "read": "query",
    "read_fields": "fields",
    "open_correction": "setting?",
    "short_correction": "setting?",
    "open_data_query": "query?",
    "short_data_query": "query?",
    "open_state": "state?",
    "short_state": "state?",
    "open_state_query": "query?",
    "short_state_query": "query?",
}
#: Keys a dialect file may leave out (they read as empty): added after format 1 began.
_OPTIONAL_KEYS = {"lcr": ("open_data_query", "short_data_query", "open_state",
                          "short_state", "open_state_query", "short_state_query")}
_STAGE_KINDS = {
    "temperature_unit": "unit",
    "set_point": "value",
    "set_point_query": "query",
    "measure": "query",
    "ramp_rate": "value?",
    "control": "state?",
    "control_query": "query?",
}
_DIALECT_KEYS = ("name", "format", "separator", "read_termination", "write_termination",
                 "on", "off")


def _fault(source: str, where: str, what: str) -> DialectError:
    return DialectError(f"dialect {source}: {where}: {what}")


def _check_keys(table: dict, expected: tuple[str, ...] | dict, source: str, name: str) -> None:
    missing = [k for k in expected if k not in table]
    unknown = [k for k in table if k not in expected]
    problems = [f"missing key {k!r}" for k in missing] + [f"unknown key {k!r}" for k in unknown]
    if problems:
        raise _fault(source, f"[{name}]", "; ".join(problems) + " (every key of the table "
                     f"must be given, no other; keys: {', '.join(expected)})")


def _check_command(value: Any, kind: str, source: str, where: str) -> str:
    optional = kind.endswith("?")
    kind = kind.rstrip("?")
    if not isinstance(value, str):
        raise _fault(source, where, f"expected a string, found {value!r}")
    text = value.strip()
    if not text:
        if optional:
            return ""
        raise _fault(source, where, "must not be empty (this command is required)")
    if kind == "query":
        if "?" not in text:
            raise _fault(source, where, f"{text!r} must be a query (contain '?')")
        sample: dict[str, Any] = {}
    else:
        if text.rstrip().endswith("?"):
            raise _fault(source, where, f"{text!r} must be a setting, not a query")
        sample = {"setting": {}, "value": {"value": 1.0}, "state": {"state": True},
                  "form": {"form": "parallel"}}[kind]
    try:
        if kind == "form" and "{form}" not in text:
            sample = {}  # the instrument's own word for the form, written in full
        scpi.fill(text, **sample)
    except ValueError as exc:
        raise _fault(source, where, f"{exc}") from None
    return text


def _check_fields(value: Any, allowed: tuple[str, ...], needed: tuple[str, ...],
                  source: str, where: str) -> tuple[str, ...]:
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise _fault(source, where, f"expected a list of names, found {value!r}")
    for v in value:
        if v not in allowed:
            raise _fault(source, where, f"unknown field {v!r} (accepted: {', '.join(allowed)})")
    for n in needed:
        if value.count(n) != 1:
            raise _fault(source, where, f"must name {n!r} exactly once, found {value!r}")
    if value.count("compliance") > 1:
        raise _fault(source, where, "'compliance' may appear at most once")
    return tuple(value)


def _build(cls: type, table: dict, kinds: dict, source: str, name: str) -> Any:
    table = {**{k: "" for k in _OPTIONAL_KEYS.get(name, ())}, **table}
    _check_keys(table, kinds, source, name)
    values = {}
    for key, kind in kinds.items():
        where = f"[{name}] {key}"
        if kind == "fields":
            allowed = SMU_FIELDS if name == "smu" else LCR_FIELDS
            needed = ("voltage", "current") if name == "smu" else ("primary", "secondary")
            values[key] = _check_fields(table[key], allowed, needed, source, where)
        elif kind == "unit":
            unit = table[key]
            if not isinstance(unit, str) or unit.strip().upper() not in STAGE_UNITS:
                raise _fault(source, where, f"found {unit!r}; accepted: \"K\" (kelvin) or "
                             "\"C\" (degrees Celsius)")
            values[key] = unit.strip().upper()
        elif kind == "form_name":
            form = table[key]
            if not isinstance(form, str) or form.strip().lower() not in LCR_FORMS:
                raise _fault(source, where, f"unknown form {form!r}; pnbench names the "
                             "reading forms in plain words: "
                             + "; ".join(f"{k} = {v}" for k, v in LCR_FORMS.items())
                             + " (the instrument's own word for it goes into `model`)")
            values[key] = form.strip().lower()
        else:
            values[key] = _check_command(table[key], kind, source, where)
    assert {f.name for f in fields(cls)} == set(values)
    return cls(**values)


def parse_dialect(data: dict, source: str) -> Dialect:
    """A Dialect from the parsed TOML document `data`; `source` names it in errors."""
    tables = ("dialect", "common", "smu", "lcr", "stage", "smu_noise", "lcr_noise")
    for key in data:
        if key not in tables:
            raise _fault(source, "top level", f"unknown table [{key}] "
                         f"(accepted: {', '.join('[' + t + ']' for t in tables)})")
    for key in ("dialect", "common"):
        if not isinstance(data.get(key), dict):
            raise _fault(source, "top level", f"missing table [{key}]")
    head = data["dialect"]
    _check_keys(head, _DIALECT_KEYS, source, "dialect")
    if head["format"] != 1:
        raise _fault(source, "[dialect] format",
                     f"found {head['format']!r}; this pnbench reads format 1")
    for key in ("name", "separator", "on", "off"):
        if not isinstance(head[key], str) or not head[key].strip():
            raise _fault(source, f"[dialect] {key}", f"expected a non-empty string, "
                         f"found {head[key]!r}")
    for key in ("read_termination", "write_termination"):
        if not isinstance(head[key], str):
            raise _fault(source, f"[dialect] {key}", f"expected a string such as \"\\n\", "
                         f"found {head[key]!r}")
    if head["on"].strip().upper() == head["off"].strip().upper():
        raise _fault(source, "[dialect] on/off", "the words for on and off must differ")
    roles = {}
    for role, cls, kinds in (("smu", SmuCommands, _SMU_KINDS), ("lcr", LcrCommands, _LCR_KINDS),
                             ("stage", StageCommands, _STAGE_KINDS)):
        if role in data:
            if not isinstance(data[role], dict):
                raise _fault(source, f"[{role}]", "expected a table")
            roles[role] = _build(cls, data[role], kinds, source, role)
    if not roles:
        raise _fault(source, "top level",
                     "no [smu], [lcr] or [stage] table: the dialect drives nothing")
    return Dialect(
        name=head["name"].strip(),
        format=1,
        separator=head["separator"].strip(),
        read_termination=head["read_termination"],
        write_termination=head["write_termination"],
        on=head["on"].strip(),
        off=head["off"].strip(),
        common=_build(CommonCommands, data["common"], _COMMON_KINDS, source, "common"),
        smu=roles.get("smu"),
        lcr=roles.get("lcr"),
        source=source,
        stage=roles.get("stage"),
        noise=parse_noise(data, source),
    )


def parse_dialect_text(text: str, source: str = "<text>") -> Dialect:
    """A Dialect from TOML text; a syntax error names the line."""
    data = load_toml(text, DialectError, f"dialect {source}",
                     "a dialect is a flat list of commands")
    return parse_dialect(data, source)


def default_dialect_text() -> str:
    """The text of the built-in default dialect (package data of pnbench.drivers)."""
    return (resources.files("pnbench.drivers") / "dialects" / "default.toml").read_text(
        encoding="utf-8")


def load_dialect(path: str | Path | None = None) -> Dialect:
    """Load and validate a dialect file; None loads the built-in default dialect."""
    if path is None:
        return parse_dialect_text(default_dialect_text(), "default.toml (built in)")
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise DialectError(f"dialect {path}: no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise DialectError(f"dialect {path}: cannot be read: {exc}") from None
    return parse_dialect_text(text, str(path))
