"""How events read in the app's log: tags that mark them without colour, one-line
descriptions, and the clock format (durations: `sweeps.progress.format_duration`)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from pnbench.sweeps.events import (
    Compliance,
    Event,
    Output,
    Paused,
    Resumed,
    RunFinished,
    RunStarted,
    StageDrifting,
    StageRamping,
    StageStable,
    StepFinished,
    StepStarted,
)
from pnbench.tui.app.words import guard_words, status_words

#: Event kinds that go to the log, with the tag that marks them without colour.
LOG_TAGS = {
    "compliance": "COMPL",
    "limit": "LIMIT",
    "warning": "WARN",
    "error": "ERROR",
    "paused": "PAUSE",
    "resumed": "RESUME",
    "output": "OUTPUT",
    "step_started": "STEP",
    "step_finished": "STEP",
    "run_started": "RUN",
    "run_finished": "RUN",
    "stage_ramping": "STAGE",
    "stage_stable": "STAGE",
    "stage_drifting": "DRIFT",
}



@dataclass
class LogEntry:
    time_s: float
    tag: str
    step: str | None
    text: str

    def line(self) -> str:
        where = f"[{self.step}] " if self.step else ""
        return f"{_clock(self.time_s)} {self.tag:<6} {where}{self.text}"


def _clock(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "--:--:--"
    seconds = max(int(seconds), 0)
    return f"{seconds // 3600:02d}:{seconds // 60 % 60:02d}:{seconds % 60:02d}"


def as_event(event: Event | dict) -> Event:
    """A typed event from an event or an events.jsonl-style dict (envelope keys may be
    missing: a dict made by hand)."""
    if isinstance(event, Event):
        return event
    doc = {"seq": 0, "time_s": math.nan, "step": None, **event}
    return Event.from_json_dict(doc)


def describe(event: Event | dict) -> str:
    """A one-line human description of an event (its message first, where it has one)."""
    event = as_event(event)
    message = event.get("message") or event.get("text")
    match event:
        case Output() if event.role == "stage":
            return "stage to its standby temperature" + (
                " (set point confirmed)" if event.confirmed else " (NOT confirmed)")
        case Output():
            state = "ON" if event.on else "off"
            confirmed = " (confirmed)" if event.confirmed else ""
            return f"{str(event.role or 'source').upper()} output {state}{confirmed}"
        case RunFinished():
            reason = event.reason
            return (f"run {status_words(event.status or '?')}"
                    + (f": {reason}" if reason else ""))
        case RunStarted():
            again = " again (resumed)" if event.resumed else ""
            return f"run started{again}" + (f", {event.planned} points planned"
                                            if event.planned else "")
        case StepStarted():
            return f"step started ({event.step_kind or '?'}, {event.planned or '?'} points)"
        case StepFinished():
            text = (f"step {event.status or 'finished'}: {event.done}/{event.planned or '?'} "
                    "points")
            return text + (f", ended by {guard_words(event.ended_by)}" if event.ended_by
                           else "")
        case Compliance():
            v, i = event.voltage_V, event.current_A
            where = f" at {_short(v)} V, {_short(i)} A" if v is not None and i is not None \
                else ""
            return (message or "reading in compliance") + where
        case Paused() | Resumed():
            return f"{event.kind} after {event.done} points of the step"
        case StageRamping() | StageStable() | StageDrifting():
            from pnbench.tui.stagelines import stage_line

            return stage_line(event.kind, event.payload())
    extras = [f"{key}={_short(value)}" for key, value in event.payload().items()
              if key not in ("message", "text") and not isinstance(value, (dict, list))
              and value is not None]
    body = str(message) if message else event.kind.replace("_", " ")
    return body + (f" ({', '.join(extras)})" if extras and not message else "")


def _short(value: object) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)
