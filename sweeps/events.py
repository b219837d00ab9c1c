"""The event stream: how the runner tells everything that happens.

Every event is a small frozen class, one per kind (`RunStarted`, `StepStarted`,
`PointTaken`, ..., `RunFinished`; the ``warning`` and ``error`` kinds are
`WarningEvent` and `ErrorEvent`), sharing an envelope: ``seq`` (numbered 1, 2, 3...
without gaps, across resumes too), ``time_s`` (seconds since the run started) and
``step`` (or None). One line of events.jsonl is the envelope and the fields, flat::

    {"seq": 12, "time_s": 3.41, "kind": "compliance", "step": "forward", ...}

`EventBus.emit` numbers events, stamps them, writes them to the run folder and hands them
to listeners, which run on the emitting thread and must return at once. Consumers
dispatch on the class (``match event: case StepFinished(): ...``).

This module is the one place to import them from. The classes and their events.jsonl
lines live in `eventkinds`, the bus in `eventbus`.
"""

from pnbench.sweeps.eventbus import EventBus, Listener
from pnbench.sweeps.eventkinds import (
    EVENT_CLASSES,
    IN_PROCESS_ONLY,
    KIND_CLASSES,
    KINDS,
    Compliance,
    Correction,
    ErrorEvent,
    Event,
    Fit,
    Limit,
    OperatorPrompt,
    OtherEvent,
    Output,
    Paused,
    PointTaken,
    Resumed,
    RunFinished,
    RunStarted,
    StageDrifting,
    StageRamping,
    StageStable,
    StepFinished,
    StepStarted,
    WarningEvent,
    finite,
    parse_event_line,
)

__all__ = [
    "EVENT_CLASSES", "IN_PROCESS_ONLY", "KINDS", "KIND_CLASSES", "Compliance", "Correction",
    "ErrorEvent", "Event", "EventBus", "Fit", "Limit", "Listener", "OperatorPrompt",
    "OtherEvent", "Output", "Paused", "PointTaken", "Resumed", "RunFinished", "RunStarted",
    "StageDrifting", "StageRamping", "StageStable", "StepFinished", "StepStarted",
    "WarningEvent", "finite", "parse_event_line",
]
