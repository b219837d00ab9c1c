"""Plan files: what a run does, read from TOML, validated, typed. No instrument is touched.

`load_plan(path)` returns a `Plan` or raises `PlanError` listing every problem with its
line and key. The key table is in DEVELOPERS.md ("Plan files"); an annotated example
ships as `sim_configs/plans/example_full.toml`. Step tables are read by `planstep`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

from pnbench.drivers.backends import plan_backend_problem
from pnbench.drivers.backends import resolve as resolve_backend
from pnbench.errors import PlanError
from pnbench.sweeps.limits import (
    HAZARDOUS_VOLTAGE_V,
    RAMP_RATE_RANGE,
    RAMP_RATE_V_PER_S,
    Limits,
)
from pnbench.sweeps.plancorrection import (
    Correction,
    check_correction_over_temperature,
    read_correction,
)
from pnbench.sweeps.planread import Problems, TableReader
from pnbench.sweeps.planstep import Step, read_step
from pnbench.sweeps.statednoise import read_plan_noise
from pnbench.sweeps.thermalplan import (
    TemperaturePlan,
    expand_steps,
    read_stage_ratings,
    read_temperature,
)
from pnbench.sweeps.tomllines import key_lines
from pnbench.tomltext import load_toml

PLAN_FORMAT = 1
ROLES = ("smu", "lcr", "stage")
#: Rating keys an instrument table may carry (the instrument's own maxima), per role.
RATINGS = {
    "smu": {"max_voltage": "V", "max_current": "A"},
    "lcr": {"max_bias": "V", "max_ac_level": "V", "min_frequency": "Hz",
            "max_frequency": "Hz"},
}


@dataclass(frozen=True)
class Device:
    name: str
    area_m2: float | None = None
    material: str | None = None
    temperature_K: float = 300.15
    notes: str = ""

    def to_json_dict(self) -> dict:
        return {"name": self.name, "area_m2": self.area_m2, "material": self.material,
                "temperature_K": self.temperature_K, "notes": self.notes}


@dataclass(frozen=True)
class Instrument:
    """Where one role's instrument is and how to talk to it."""

    role: str
    resource: str
    backend: str = "@py"
    dialect: str | None = None  # path of a dialect file; None = the built-in default
    timeout_ms: int = 2000
    ratings: dict = field(default_factory=dict)  # rating key -> SI value
    noise: object = None  # the stated noise (fitnoise.StatedNoise; statednoise.PLAN_KEYS)

    def to_json_dict(self) -> dict:
        return {"resource": self.resource, "backend": self.backend,
                "dialect": self.dialect, "timeout_ms": self.timeout_ms,
                "ratings": dict(self.ratings),
                **({"noise": self.noise.to_json_dict()} if self.noise is not None else {})}


@dataclass(frozen=True)
class Plan:
    path: str
    text: str
    title: str
    device: Device
    limits: Limits
    instruments: dict  # role -> Instrument
    steps: tuple[Step, ...]
    line_frequency_Hz: float = 50.0
    warnings: tuple[str, ...] = ()
    temperature: TemperaturePlan | None = None  # a run over temperature (thermalplan)
    correction: Correction | None = None  # [lcr_correction]; None: none asked

    def step(self, name: str) -> Step:
        for s in self.steps:
            if s.name == name:
                return s
        raise KeyError(name)

    @property
    def roles_needed(self) -> set[str]:
        roles = {s.instrument for s in self.steps}
        return roles | {"stage"} if self.temperature is not None else roles

    @property
    def total_points(self) -> int:
        return sum(s.planned for s in self.steps)

    @property
    def simulated(self):
        """The simulated bench the instruments are on (a drivers.sim.backend.SimSpec),
        or None for real instruments."""
        from pnbench.drivers.sim.backend import is_sim_backend, parse

        for inst in self.instruments.values():
            if is_sim_backend(inst.backend):
                return parse(inst.backend)
        return None

    def on_simulated_bench(self, backend: str) -> Plan:
        """This plan with every instrument on the simulated bench named by ``backend``
        (``DEVICE@pnsim[:time_scale=X]``): what ``--simulate`` does to a plan."""
        from pnbench.drivers.sim.backend import RESOURCES, parse

        parse(backend)  # BadInput for a malformed string
        stage = self.instruments.get("stage")  # its ratings bound the plan's ramp
        instruments = {role: Instrument(role=role, resource=name, backend=backend,
                                        timeout_ms=5000,
                                        ratings=stage.ratings if role == "stage" and stage
                                        else {})
                       for role, name in RESOURCES.items()}
        return replace(self, instruments=instruments)


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file; PlanError names every problem's line and key."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise PlanError(f"plan {path}: cannot read it ({exc.strerror or exc})") from None
    return parse_plan(data, str(path), base_dir=path.parent)


def parse_plan(data: bytes | str, filename: str = "<plan>",
               base_dir: Path | None = None) -> Plan:
    """Validate plan text (bytes are decoded as UTF-8)."""
    if isinstance(data, bytes):
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise PlanError(f"plan {filename}: not UTF-8 text (byte {exc.start} cannot be "
                            "decoded); a plan is a TOML text file") from None
    else:
        text = data
    doc = load_toml(text, PlanError, f"plan {filename}",
                    "a plan has tables of values and lists of steps")
    problems = Problems(filename, key_lines(text))
    plan = _read(doc, text, filename, base_dir or Path("."), problems)
    if problems.items:
        count = len(problems.items)
        head = f"plan {filename}: {count} problem{'s' if count > 1 else ''}"
        raise PlanError(head + ":\n  " + "\n  ".join(problems.items))
    assert plan is not None
    return plan


def _read(doc: dict, text: str, filename: str, base_dir: Path, problems: Problems):
    top = TableReader(doc, (), problems)
    meta = TableReader(top.raw("plan") or {}, ("plan",), problems)
    fmt = meta.integer("format", PLAN_FORMAT, low=1, high=99)
    if fmt != PLAN_FORMAT:
        meta.problem("format", f"format {fmt} is not known; this pnbench reads format "
                     f"{PLAN_FORMAT}")
    title = meta.text("title", "") or ""
    meta.text("description", "")
    line_hz = meta.quantity("line_frequency", "Hz", 50.0)
    if line_hz not in (50.0, 60.0):
        meta.problem("line_frequency", f"{line_hz:g} Hz: accepted 50 Hz or 60 Hz")
        line_hz = 50.0
    meta.finish()

    device = _read_device(TableReader(top.raw("device", True, "a [device] table") or {},
                                      ("device",), problems))
    instruments = _read_instruments(top.raw("instruments"), base_dir, problems)
    limits = _read_limits(TableReader(top.raw("limits", True, "a [limits] table") or {},
                                      ("limits",), problems), instruments)
    correction = read_correction(top.raw("lcr_correction"), problems)
    steps_raw = top.raw("steps", True, "at least one [[steps]] table")
    temperature_raw = top.raw("temperature")
    top.finish()

    steps: list[Step] = []
    warnings: list[str] = []
    if steps_raw is not None:
        if not isinstance(steps_raw, list) or not steps_raw:
            problems.add(("steps",), "expected one or more [[steps]] tables")
        else:
            names: set[str] = set()
            for k, raw in enumerate(steps_raw):
                step = read_step(TableReader(raw, ("steps", k), problems), limits,
                                 instruments, warnings)
                if step is None:
                    continue
                if step.name in names:
                    problems.add(("steps", k, "name"), f"the name {step.name!r} is used by "
                                 "an earlier step; each step needs its own name")
                names.add(step.name)
                steps.append(step)
    if correction is not None and not any(s.instrument == "lcr" for s in steps):
        problems.add(("lcr_correction",), "the plan has no step on the LCR meter, so "
                     "there is nothing to correct for; remove the table or add a step")
    temperature = None
    if temperature_raw is not None:
        stage = instruments.get("stage")
        temperature = read_temperature(
            TableReader(temperature_raw, ("temperature",), problems),
            {s.name for s in steps}, stage.ratings if stage else None, warnings)
    check_correction_over_temperature(correction, temperature, problems, warnings)
    if problems.items or limits is None or device is None:
        return None
    if temperature is not None:
        steps = list(expand_steps(tuple(steps), temperature))
    return Plan(path=filename, text=text, title=title, device=device, limits=limits,
                instruments=instruments, steps=tuple(steps), line_frequency_Hz=line_hz,
                warnings=tuple(warnings), temperature=temperature,
                correction=correction)


def _read_device(t: TableReader) -> Device | None:
    name = t.text("name", required=True)
    area = t.area("area")
    material = t.text("material")
    temperature = t.temperature("temperature", 300.15)
    notes = t.text("notes", "") or ""
    t.finish()
    if not name:
        if name is not None:
            t.problem("name", "must not be empty")
        return None
    return Device(name=name, area_m2=area, material=material, temperature_K=temperature,
                  notes=notes)


def _read_instruments(raw: object, base_dir: Path, problems: Problems) -> dict:
    if raw is None:
        return {}
    table = TableReader(raw, ("instruments",), problems)
    found: dict[str, Instrument] = {}
    for label in list(table.table):
        table.known.add(label)
        t = TableReader(table.table[label], ("instruments", label), problems)
        role = t.choice("role", ROLES, label if label in ROLES else None,
                        required=label not in ROLES)
        resource = t.text("resource", required=True)
        backend = t.text("backend")
        if backend is not None and (why := plan_backend_problem(backend)) is not None:
            t.problem("backend", why)
            backend = None
        backend = resolve_backend(backend)  # the user's VISA library, if any
        dialect = t.text("dialect")
        if dialect is not None and dialect != "default":
            candidate = Path(dialect)
            candidate = candidate if candidate.is_absolute() else base_dir / candidate
            if not candidate.is_file():
                t.problem("dialect", f"no dialect file at {candidate}; give a path to a "
                          "dialect TOML file (relative to the plan) or \"default\"")
            dialect = str(candidate)
        else:
            dialect = None
        timeout_s = t.quantity("timeout", "s", 2.0, positive=True)
        if timeout_s is not None and not TIMEOUT_RANGE_S[0] <= timeout_s <= TIMEOUT_RANGE_S[1]:
            t.problem("timeout", f"{timeout_s:g} s is outside {TIMEOUT_RANGE_S[0]:g} s to "
                      f"{TIMEOUT_RANGE_S[1]:g} s")
            timeout_s = 2.0
        ratings = {}
        for key, unit in RATINGS.get(role or "", {}).items():
            value = t.quantity(key, unit, positive=True)
            if value is not None:
                ratings[key] = value
        if role == "stage":
            ratings = read_stage_ratings(t)
        noise = read_plan_noise(t, role)
        t.finish()
        if role is None or resource is None:
            continue
        if role in found:
            t.problem("role", f"a second {role!r} instrument; a plan has one per role")
            continue
        found[role] = Instrument(role=role, resource=resource, backend=backend,
                                 dialect=dialect, timeout_ms=int(round(timeout_s * 1000)),
                                 ratings=ratings, noise=noise)
    return found


#: Sanity ceilings of [limits] (a typo or a hostile file above them, not an instrument)
#: and of an instrument's I/O timeout. Common practice, no source.
LIMIT_CEILINGS = {"V": 1e4, "A": 1e3, "W": 1e5}
TIMEOUT_RANGE_S = (1e-3, 3600.0)


def _read_limits(t: TableReader, instruments: dict) -> Limits | None:
    v_max = t.quantity("max_voltage", "V", required=True, nonnegative=True)
    v_rev = t.quantity("max_reverse_voltage", "V", 0.0, nonnegative=True)
    i_max = t.quantity("max_current", "A", required=True, positive=True)
    p_max = t.quantity("max_power", "W", required=True, positive=True)
    ack = t.quantity("acknowledge_hazardous_voltage", "V", positive=True)
    for key, value, unit in (("max_voltage", v_max, "V"), ("max_reverse_voltage", v_rev, "V"),
                             ("max_current", i_max, "A"), ("max_power", p_max, "W"),
                             ("acknowledge_hazardous_voltage", ack, "V")):
        if value is not None and abs(value) > LIMIT_CEILINGS[unit]:
            t.problem(key, f"{value:g} {unit} is beyond any bench instrument (at most "
                      f"{LIMIT_CEILINGS[unit]:g} {unit})")
    ramp = t.quantity("ramp_rate", "V/s", RAMP_RATE_V_PER_S, positive=True)
    if ramp is not None and not RAMP_RATE_RANGE[0] <= ramp <= RAMP_RATE_RANGE[1]:
        t.problem("ramp_rate", f"{ramp:g} V/s is outside {RAMP_RATE_RANGE[0]:g} to "
                  f"{RAMP_RATE_RANGE[1]:g} V/s")
        ramp = RAMP_RATE_V_PER_S
    t.finish()
    highest = max(v_max or 0.0, abs(v_rev or 0.0))
    if highest > HAZARDOUS_VOLTAGE_V and (ack is None or ack < highest):
        key = "max_voltage" if (v_max or 0.0) >= abs(v_rev or 0.0) else "max_reverse_voltage"
        found = "is missing" if ack is None else f"covers only {ack:g} V"
        t.problem(key, f"{highest:g} V is above the {HAZARDOUS_VOLTAGE_V:g} V DC "
                  "hazardous-voltage threshold (as older editions of IEC 61010-1 "
                  f"set it; check the edition your lab follows) and the acknowledgment "
                  f"{found}. When the fixture is enclosed and "
                  "interlocked, add  acknowledge_hazardous_voltage = "
                  f"\"{highest:g} V\"  to [limits]")
    if v_max is None or v_rev is None or i_max is None or p_max is None:
        return None
    smu = instruments.get("smu")
    if smu is not None:
        rated_v = smu.ratings.get("max_voltage")
        rated_i = smu.ratings.get("max_current")
        for key, value in (("max_voltage", v_max), ("max_reverse_voltage", abs(v_rev))):
            if rated_v is not None and value > rated_v:
                t.problem(key, f"{value:g} V is beyond the SMU's rating of {rated_v:g} V "
                          "(instruments max_voltage)")
        if rated_i is not None and i_max > rated_i:
            t.problem("max_current", f"{i_max:g} A is beyond the SMU's rating of "
                      f"{rated_i:g} A (instruments max_current)")
    return Limits(max_voltage_V=v_max, max_reverse_voltage_V=abs(v_rev), max_current_A=i_max,
                  max_power_W=p_max, hazardous_ack_V=ack,
                  ramp_rate_V_per_s=ramp if ramp is not None else RAMP_RATE_V_PER_S)
