"""The event stream: how the runner tells everything that happens.

An `Event` is one line of `events.jsonl` (every kind but ``point``, which lives in
points.csv) and what in-process listeners receive::

    {"seq": 12, "time_s": 3.41, "kind": "compliance", "step": "forward", ...}

`EventBus.emit` numbers events, stamps them with the time since the run started, writes
them to the run folder (through its ``sink``) and hands them to listeners. ``point`` events
carry the number of the last recorded event and do not advance it, so events.jsonl is
numbered 1, 2, 3... without gaps, across resumes too. It is safe to
call from several threads (the acquisition and the fitter both emit). Listeners run on the
emitting thread and must return at once: queue the event and deal with it elsewhere.
"""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

#: Every kind of event, in the order a run usually produces them.
KINDS = (
    "run_started",
    "step_started",
    "point",
    "compliance",
    "limit",
    "warning",
    "fit",
    "step_finished",
    "paused",
    "resumed",
    "output",
    "error",
    "run_finished",
)

#: Kinds that stay in-process (not written to events.jsonl).
IN_PROCESS_ONLY = frozenset({"point"})

Listener = Callable[["Event"], None]


@dataclass(frozen=True)
class Event:
    seq: int
    time_s: float
    kind: str
    step: str | None = None
    data: dict = field(default_factory=dict)

    def to_json_dict(self) -> dict:
        doc = {"seq": self.seq, "time_s": round(self.time_s, 6), "kind": self.kind,
               "step": self.step}
        doc.update(self.data)
        return doc

    def to_json(self) -> str:
        """One line of events.jsonl (no newline)."""
        return json.dumps(self.to_json_dict(), separators=(",", ":"), allow_nan=False,
                          default=_jsonable)

    @classmethod
    def from_json_dict(cls, doc: dict) -> Event:
        data = {k: v for k, v in doc.items() if k not in ("seq", "time_s", "kind", "step")}
        return cls(seq=int(doc["seq"]), time_s=float(doc["time_s"]), kind=str(doc["kind"]),
                   step=doc.get("step"), data=data)

    def __getitem__(self, key: str):
        """``event["status"]`` reads a data field (and seq, time_s, kind, step)."""
        if key in ("seq", "time_s", "kind", "step"):
            return getattr(self, key)
        return self.data[key]

    def get(self, key: str, default=None):
        try:
            return self[key]
        except KeyError:
            return default


def _jsonable(value):
    """JSON for values the standard encoder refuses (numpy scalars, non-finite floats
    inside them are turned into None by `finite`)."""
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


class EventBus:
    """Numbers, stamps, records and distributes events.

    ``sink`` receives every event that belongs in events.jsonl (usually
    `RunFolder.append_event`); ``start_seq`` continues numbering after a resume;
    ``started_epoch_s`` is the run's start (time.time()), so ``time_s`` counts from it.
    """

    def __init__(self, sink: Callable[[Event], None] | None = None, start_seq: int = 0,
                 started_epoch_s: float | None = None) -> None:
        self._sink = sink
        self._seq = start_seq
        self._origin = time.time() if started_epoch_s is None else started_epoch_s
        self._listeners: list[Listener] = []
        self._lock = threading.Lock()

    @property
    def started_epoch_s(self) -> float:
        return self._origin

    def elapsed_s(self) -> float:
        return time.time() - self._origin

    def add_listener(self, listener: Listener) -> None:
        with self._lock:
            self._listeners = [*self._listeners, listener]

    def remove_listener(self, listener: Listener) -> None:
        with self._lock:
            self._listeners = [x for x in self._listeners if x is not listener]

    def emit(self, kind: str, step: str | None = None, **data) -> Event:
        if kind not in KINDS:
            raise ValueError(f"unknown event kind {kind!r}")
        with self._lock:
            if kind not in IN_PROCESS_ONLY:
                self._seq += 1
            event = Event(self._seq, time.time() - self._origin, kind, step, data)
            if self._sink is not None and kind not in IN_PROCESS_ONLY:
                self._sink(event)
            listeners = self._listeners
        for listener in listeners:
            try:
                listener(event)
            except Exception:  # noqa: BLE001 - a listener must never stop acquisition
                pass
        return event
