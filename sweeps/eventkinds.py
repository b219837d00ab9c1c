"""What an event is: the envelope, one frozen class per kind, and its events.jsonl line.

Every event is a small frozen class, one per kind (`RunStarted`, `StepStarted`,
`PointTaken`, ..., `RunFinished`; the ``warning`` and ``error`` kinds are
`WarningEvent` and `ErrorEvent`), sharing an envelope: ``seq`` (numbered 1, 2, 3...
without gaps, across resumes too), ``time_s`` (seconds since the run started) and
``step`` (or None). One line of events.jsonl is the envelope and the fields, flat::

    {"seq": 12, "time_s": 3.41, "kind": "compliance", "step": "forward", ...}

`Event.from_json_dict` reads such a line back into its class (keys this version does not
know are kept in ``extra`` and written back; a kind it does not know becomes an
`OtherEvent`), so events.jsonl written by any version reads and round-trips. A new kind
is a new class here, added to `EVENT_CLASSES`; a new field gets a default, so older
lines still read. Import these through `pnbench.sweeps.events`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field, fields
from typing import Any, ClassVar

from pnbench.sweeps.statuses import RunStatus, StepStatus, run_status

_ENVELOPE = ("seq", "time_s", "kind", "step")


@dataclass(frozen=True, kw_only=True, slots=True)
class Event:
    """The envelope every event shares; subclasses add their fields."""

    KIND: ClassVar[str] = ""
    seq: int = 0
    time_s: float = 0.0
    step: str | None = None
    #: keys of a recorded event this version does not know (kept, written back)
    extra: dict = field(default_factory=dict, compare=False)

    @property
    def kind(self) -> str:
        return self.KIND

    def payload(self) -> dict:
        """The event's own fields (no envelope), as in its events.jsonl line."""
        out = {f.name: getattr(self, f.name) for f in fields(self)
               if f.name not in ("seq", "time_s", "step", "extra")}
        out.update(self.extra)
        return out

    @property
    def data(self) -> dict:
        return self.payload()

    def to_json_dict(self) -> dict:
        doc = {"seq": self.seq, "time_s": round(self.time_s, 6), "kind": self.kind,
               "step": self.step}
        doc.update(self.payload())
        return doc

    def to_json(self) -> str:
        """One line of events.jsonl (no newline)."""
        return json.dumps(self.to_json_dict(), separators=(",", ":"), allow_nan=False,
                          default=_jsonable)

    @staticmethod
    def from_json_dict(doc: dict) -> Event:
        """The event of one events.jsonl object (ValueError/KeyError when it is none)."""
        if not isinstance(doc, dict):
            raise ValueError(f"an event is a JSON object, found {type(doc).__name__}")
        kind = str(doc["kind"])
        envelope = {"seq": int(doc["seq"]), "time_s": float(doc["time_s"]),
                    "step": doc.get("step")}
        cls = KIND_CLASSES.get(kind)
        rest = {k: v for k, v in doc.items() if k not in _ENVELOPE}
        if cls is None:
            return OtherEvent(**envelope, name=kind, extra=rest)
        return cls.build(envelope, rest)

    @classmethod
    def build(cls, envelope: dict, data: dict) -> Event:
        """An event from its envelope and fields; unknown fields go to ``extra``."""
        known = FIELD_NAMES[cls]
        mine = {k: v for k, v in data.items() if k in known}
        extra = {k: v for k, v in data.items() if k not in known}
        return cls(**envelope, **mine, extra=extra)

    def __getitem__(self, key: str) -> Any:
        """``event["status"]``: a field by its events.jsonl name (for generic displays)."""
        if key == "kind":
            return self.kind
        if key in FIELD_NAMES.get(type(self), ()) or key in ("seq", "time_s", "step"):
            return getattr(self, key)
        return self.extra[key]

    def get(self, key: str, default: Any = None) -> Any:
        try:
            value = self[key]
        except KeyError:
            return default
        return value


@dataclass(frozen=True, kw_only=True, slots=True)
class RunStarted(Event):
    KIND: ClassVar[str] = "run_started"
    resumed: bool = False
    resume_count: int = 0
    planned: int = 0
    done: int = 0
    steps: list = field(default_factory=list)
    run_dir: str = ""
    #: {step: {"done": int, "status": str}} (what a resumed run found on disk)
    progress: dict = field(default_factory=dict)
    #: {step: estimated seconds per point} from the plan (already time-scaled)
    seconds_per_point: dict = field(default_factory=dict)


@dataclass(frozen=True, kw_only=True, slots=True)
class StepStarted(Event):
    KIND: ClassVar[str] = "step_started"
    step_kind: str = ""
    planned: int = 0
    done: int = 0
    instrument: str = ""


@dataclass(frozen=True, kw_only=True, slots=True)
class PointTaken(Event):
    """One point (in-process only: points.csv is its record); ``time_s`` is the point's."""

    KIND: ClassVar[str] = "point"
    index: int = 0
    point_kind: str = "iv"
    voltage_V: float | None = None
    current_A: float | None = None
    frequency_Hz: float | None = None
    capacitance_F: float | None = None
    conductance_S: float | None = None
    compliance: bool = False
    planned: int = 0


@dataclass(frozen=True, kw_only=True, slots=True)
class Compliance(Event):
    KIND: ClassVar[str] = "compliance"
    index: int = 0
    voltage_V: float | None = None
    current_A: float | None = None
    limit: float | None = None
    count: int = 0


@dataclass(frozen=True, kw_only=True, slots=True)
class Limit(Event):
    KIND: ClassVar[str] = "limit"
    guard: str | None = None
    message: str = ""
    level: float | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class WarningEvent(Event):
    KIND: ClassVar[str] = "warning"
    message: str = ""
    index: int | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class Fit(Event):
    KIND: ClassVar[str] = "fit"
    fit_kind: str = ""
    success: bool = False
    message: str = ""
    n_points: int = 0
    #: {NAME: {"value", "sigma", "settled"}}: estimates only (see fitfeed.estimates)
    parameters: dict = field(default_factory=dict)
    not_determined: dict = field(default_factory=dict)
    final: bool = False
    ibv_A: float | None = None
    leakage: dict | None = None
    #: the lack-of-fit checks (fitfeed.misfit_figure): {"misfit", "basis", "runs_z", ...}
    misfit: dict | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class StepFinished(Event):
    KIND: ClassVar[str] = "step_finished"
    status: str = StepStatus.DONE
    done: int = 0
    planned: int = 0
    ended_by: str | None = None
    compliance_count: int = 0


@dataclass(frozen=True, kw_only=True, slots=True)
class Paused(Event):
    KIND: ClassVar[str] = "paused"
    done: int = 0


@dataclass(frozen=True, kw_only=True, slots=True)
class Resumed(Event):
    KIND: ClassVar[str] = "resumed"
    done: int = 0


@dataclass(frozen=True, kw_only=True, slots=True)
class Output(Event):
    KIND: ClassVar[str] = "output"
    role: str = "smu"
    on: bool = False
    confirmed: bool | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class OperatorPrompt(Event):
    """The runner waits for the operator to do something and confirm it (answered
    through the launch's ``answer``)."""

    KIND: ClassVar[str] = "operator_prompt"
    topic: str = ""  # e.g. "open_correction"
    message: str = ""


@dataclass(frozen=True, kw_only=True, slots=True)
class Correction(Event):
    """The LCR meter's fixture correction was run; ``values`` per correction kind, as far
    as the meter reports them."""

    KIND: ClassVar[str] = "lcr_correction"
    corrections: list = field(default_factory=list)
    confirmed: bool = False
    values: dict = field(default_factory=dict)
    applied_by: str = "meter"  # or "software": pnbench compensates at fit time
    set_point_K: float | None = None  # the stage set point it was taken at
    reused: bool = False  # a resumed run kept the one recorded before
    reason: str = ""  # on resume: why it was reused or run again


@dataclass(frozen=True, kw_only=True, slots=True)
class ErrorEvent(Event):
    KIND: ClassVar[str] = "error"
    message: str = ""


@dataclass(frozen=True, kw_only=True, slots=True)
class RunFinished(Event):
    KIND: ClassVar[str] = "run_finished"
    status: str = RunStatus.COMPLETED
    reason: str = ""
    outputs_off_confirmed: bool = False
    done: int | None = None
    planned: int | None = None
    #: False when no instrument was ever reached (nothing was switched on)
    connected: bool | None = None

    @property
    def run_status(self) -> RunStatus:
        return run_status(self.status)


@dataclass(frozen=True, kw_only=True, slots=True)
class StageRamping(Event):
    """A run over temperature: the stage was sent to a set point; the wait begins."""

    KIND: ClassVar[str] = "stage_ramping"
    set_point_K: float = 0.0
    temperature_K: float | None = None  # the reading when it was sent
    ramp_K_per_min: float | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class StageStable(Event):
    """Every reading stayed within the band for the stability window; the soak follows."""

    KIND: ClassVar[str] = "stage_stable"
    set_point_K: float = 0.0
    temperature_K: float | None = None
    waited_s: float | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class StageDrifting(Event):
    """A warning: a reading beyond the band during a soak or a step (once per excursion)."""

    KIND: ClassVar[str] = "stage_drifting"
    set_point_K: float = 0.0
    temperature_K: float | None = None
    band_K: float | None = None
    during: str | None = None


@dataclass(frozen=True, kw_only=True, slots=True)
class OtherEvent(Event):
    """An event of a kind this version does not know (read from a newer file)."""

    name: str = ""

    @property
    def kind(self) -> str:
        return self.name

    def payload(self) -> dict:
        return dict(self.extra)


#: Every kind of event, in the order a run usually produces them, with its class.
EVENT_CLASSES = (RunStarted, StepStarted, PointTaken, Compliance, Limit, WarningEvent, Fit,
                 StepFinished, Paused, Resumed, Output, OperatorPrompt, Correction,
                 ErrorEvent, RunFinished, StageRamping, StageStable, StageDrifting)
KIND_CLASSES: dict[str, type[Event]] = {c.KIND: c for c in EVENT_CLASSES}
KINDS = tuple(KIND_CLASSES)
#: Each class's own field names (no envelope).
FIELD_NAMES: dict[type, frozenset[str]] = {
    c: frozenset(f.name for f in fields(c)) - {"seq", "time_s", "step", "extra"}
    for c in (*EVENT_CLASSES, OtherEvent)}

#: Kinds that stay in-process (not written to events.jsonl).
IN_PROCESS_ONLY = frozenset({PointTaken.KIND})


def parse_event_line(line: str | bytes) -> Event:
    """The event of one events.jsonl line (ValueError when it is none)."""
    try:
        return Event.from_json_dict(json.loads(line))
    except KeyError as exc:
        raise ValueError(f"no {exc.args[0]!r} key") from None
    except TypeError as exc:
        raise ValueError(str(exc)) from None


def _jsonable(value):
    """JSON for values the standard encoder refuses (numpy scalars, sets, tuples)."""
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, (set, tuple)):
        return list(value)
    return str(value)


def finite(value: float | None) -> float | None:
    """A float for JSON: NaN and infinities become None (JSON has no such numbers)."""
    if value is None:
        return None
    value = float(value)
    return value if value == value and abs(value) != float("inf") else None

