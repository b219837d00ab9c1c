"""The event stream: how the runner tells everything that happens.

One small frozen class per event kind (`RunStarted`, `StepStarted`, `PointTaken`, ...,
`RunFinished`), each one line of events.jsonl (`eventkinds`, which describes the line),
and the `EventBus` that numbers, stamps, records and hands them to listeners
(`eventbus`). Consumers dispatch on the class (``match event: case StepFinished(): ...``).

This module is the one place to import them from.
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
