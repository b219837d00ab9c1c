"""How events read in the app's log: tags that mark them without colour, one-line
descriptions, and clock and duration formats."""

from __future__ import annotations

import math
from dataclasses import dataclass

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
}

#: Keys of an event that are its envelope, not its message.
_ENVELOPE = ("seq", "time_s", "kind", "step")


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


def format_duration(seconds: float) -> str:
    """'1:02:03' style for ETAs; '--' when unknown."""
    if not math.isfinite(seconds):
        return "--"
    seconds = max(int(round(seconds)), 0)
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def describe(event: dict) -> str:
    """A one-line human description of an event (its message first, where it has one)."""
    kind = str(event.get("kind", ""))
    message = event.get("message") or event.get("text")
    if kind == "output":
        state = "ON" if event.get("on") else "off"
        confirmed = " (confirmed)" if event.get("confirmed") else ""
        return f"{str(event.get('role', 'source')).upper()} output {state}{confirmed}"
    if kind == "run_finished":
        reason = event.get("reason")
        return (f"run {status_words(event.get('status', '?'))}"
                + (f": {reason}" if reason else ""))
    if kind == "run_started":
        planned = event.get("planned")
        again = " again (resumed)" if event.get("resumed") else ""
        return f"run started{again}" + (f", {planned} points planned" if planned else "")
    if kind == "step_started":
        return (f"step started ({event.get('step_kind', '?')}, "
                f"{event.get('planned', '?')} points)")
    if kind == "step_finished":
        ended = event.get("ended_by")
        text = (f"step {event.get('status', 'finished')}: {event.get('done', '?')}/"
                f"{event.get('planned', '?')} points")
        return text + (f", ended by {guard_words(ended)}" if ended else "")
    if kind == "compliance":
        v = event.get("voltage_V")
        i = event.get("current_A")
        where = f" at {_short(v)} V, {_short(i)} A" if v is not None and i is not None else ""
        return (message or "reading in compliance") + where
    if kind in ("paused", "resumed"):
        return f"{kind} after {event.get('done', '?')} points of the step"
    extras = [f"{key}={_short(value)}" for key, value in event.items()
              if key not in _ENVELOPE and key not in ("message", "text")
              and not isinstance(value, (dict, list)) and value is not None]
    body = str(message) if message else kind.replace("_", " ")
    return body + (f" ({', '.join(extras)})" if extras and not message else "")


def _short(value: object) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)
