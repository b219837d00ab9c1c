"""The event bus: numbers, stamps, records and hands events to listeners.

`EventBus.emit` numbers events, stamps them, writes them to the run folder (through its
``sink``) and hands them to listeners. ``point`` events stay in-process (points live in
points.csv): they carry the number of the last recorded event and do not advance it. It is
safe to call from several threads (the acquisition and the fitter both emit). Listeners
run on the emitting thread and must return at once: queue the event, deal with it
elsewhere. Import it through `pnbench.sweeps.events`.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable

from pnbench.sweeps.eventkinds import FIELD_NAMES, IN_PROCESS_ONLY, KIND_CLASSES, Event

Listener = Callable[[Event], None]


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

    def emit(self, kind: type[Event] | str, step: str | None = None, *,
             time_s: float | None = None, **data) -> Event:
        """Emit an event of class ``kind`` (or its name) with these fields; ``time_s``
        overrides the stamp (a point's own time)."""
        cls = KIND_CLASSES.get(kind) if isinstance(kind, str) else kind
        if cls is None or cls not in FIELD_NAMES:
            raise ValueError(f"unknown event kind {kind!r}")
        recorded = cls.KIND not in IN_PROCESS_ONLY
        with self._lock:
            if recorded:
                self._seq += 1
            stamp = time.time() - self._origin if time_s is None else time_s
            try:
                event = cls(seq=self._seq, time_s=stamp, step=step, **data)
            except TypeError:
                event = cls.build({"seq": self._seq, "time_s": stamp, "step": step}, data)
            if self._sink is not None and recorded:
                self._sink(event)
            listeners = self._listeners
        for listener in listeners:
            try:
                listener(event)
            except Exception:  # noqa: BLE001 - a listener must never stop acquisition
                pass
        return event
