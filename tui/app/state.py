"""What the screens know about one run: points, estimates, log, progress, outputs.

A pure, single-threaded model fed by two kinds of input, both described in the run-folder
contract of DEVELOPERS.md: points (a row of points.csv, or the in-process `point` event)
and events (one object of events.jsonl), plus the run.json document. The live app and
`pnbench watch` feed it the same way, so both show the same thing. No Textual, no
threads, no files: the screens read it on the UI thread after draining their queue.
"""

from __future__ import annotations

import math
import time
from collections import deque
from dataclasses import dataclass, field

import numpy as np

from pnbench.tui.app.columns import Columns, FrozenColumns, Snapshot, to_number
from pnbench.tui.app.events import LOG_TAGS, LogEntry, describe, format_duration

__all__ = ["ENDED_COMPLETE", "FINAL_STATUSES", "Estimate", "LogEntry", "RunState",
           "Snapshot", "StepProgress", "describe", "format_duration"]

#: Step statuses of a step that has ended with nothing left to do (it may have ended
#: early: a limit reached, its parameters settled); an aborted step is not among them.
ENDED_COMPLETE = ("done", "completed", "finished", "limit", "settled", "ended_early",
                  "skipped")

#: Run statuses after which nothing more will happen.
FINAL_STATUSES = ("completed", "aborted", "safety_stop", "failed", "interrupted")


@dataclass
class Estimate:
    """One fitted parameter as the last `fit` event gave it."""

    value: float
    sigma: float | None
    settled: bool


@dataclass
class StepProgress:
    """Progress of one plan step; `planned` may be unknown (0) until run.json says."""

    name: str
    kind: str = ""
    planned: int = 0
    done: int = 0
    status: str = "pending"
    first_time_s: float = math.nan
    last_time_s: float = math.nan

    def seconds_per_point(self) -> float:
        if self.done < 2 or not math.isfinite(self.first_time_s):
            return math.nan
        return (self.last_time_s - self.first_time_s) / (self.done - 1)

    def remaining_points(self) -> int:
        if self.status not in ("pending", "running", "paused"):
            return 0  # done, ended by a limit or by settling, aborted, skipped
        return max(self.planned - self.done, 0)


@dataclass
class RunState:
    """Everything a run screen shows, built from points, events and run.json."""

    iv: Columns = field(default_factory=lambda: Columns(
        ("voltage_V", "current_A", "time_s", "compliance")))
    cv: Columns = field(default_factory=lambda: Columns(
        ("voltage_V", "frequency_Hz", "capacitance_F", "conductance_S", "time_s")))
    parameters: dict[str, Estimate] = field(default_factory=dict)
    log: deque = field(default_factory=lambda: deque(maxlen=2000))
    #: log entries ever added (the deque keeps only the newest)
    log_total: int = 0
    counts: dict[str, int] = field(default_factory=dict)
    steps: dict[str, StepProgress] = field(default_factory=dict)
    status: str = "idle"
    reason: str = ""
    outputs: dict[str, bool] = field(default_factory=dict)
    outputs_off_confirmed: bool = False
    #: who confirmed the outputs off: the runner, or the guardian after a killed run
    outputs_off_by: str = "runner"
    #: False once the run says no instrument was ever reached
    connected: bool = True
    device: dict = field(default_factory=dict)
    instruments: dict = field(default_factory=dict)
    temperature_K: float = 300.15
    last_time_s: float = 0.0
    current_step: str | None = None
    #: increases at every change, so a screen redraws only when something changed
    version: int = 0
    _wall_at_last_time: float = field(default=math.nan, repr=False)

    # ----------------------------------------------------------------- input
    def add_point(self, row: dict) -> None:
        """One point: a points.csv row (strings) or a `point` event (numbers)."""
        kind = str(row.get("point_kind") or row.get("kind") or "").strip().lower()
        if kind not in ("iv", "cv"):
            kind = ""
        step = str(row.get("step", "") or "")
        values = {key: to_number(row.get(key)) for key in (
            "voltage_V", "current_A", "time_s", "frequency_Hz", "capacitance_F",
            "conductance_S")}
        values["compliance"] = 1.0 if str(row.get("compliance", "")).strip().lower() in (
            "1", "true", "1.0") else 0.0
        if not kind:
            kind = "cv" if math.isfinite(values["capacitance_F"]) else "iv"
        (self.cv if kind == "cv" else self.iv).append(values, step)
        progress = self._step(step) if step else None
        if progress is not None:
            progress.done += 1
            t = values["time_s"]
            if math.isfinite(t):
                if not math.isfinite(progress.first_time_s):
                    progress.first_time_s = t
                progress.last_time_s = t
            if progress.status == "pending":
                progress.status = "running"
        self._note_time(values["time_s"])
        self.version += 1

    def apply_event(self, event: dict) -> None:
        """One event of the stream (a dict as in events.jsonl)."""
        kind = str(event.get("kind", ""))
        step = event.get("step")
        t = to_number(event.get("time_s"))
        if kind == "point":
            self.add_point(event)
            return
        self._note_time(t)
        self.counts[kind] = self.counts.get(kind, 0) + 1
        if kind == "fit":
            for name, entry in (event.get("parameters") or {}).items():
                if isinstance(entry, dict):
                    sigma = entry.get("sigma")
                    self.parameters[name] = Estimate(
                        to_number(entry.get("value")),
                        None if sigma is None else to_number(sigma),
                        bool(entry.get("settled", False)))
        elif kind == "step_started" and step:
            progress = self._step(step)
            progress.status = "running"
            progress.kind = str(event.get("step_kind", event.get("sweep", progress.kind)))
            planned = event.get("planned")
            if isinstance(planned, (int, float)) and planned > 0:
                progress.planned = int(planned)
            self.current_step = step
        elif kind == "step_finished" and step:
            progress = self._step(step)
            progress.status = str(event.get("status", "completed"))
        elif kind == "paused":
            self.status = "paused"
        elif kind == "resumed":
            self.status = "running"
        elif kind == "run_started":
            self.status = "running"
        elif kind == "run_finished":
            self.status = str(event.get("status", "completed"))
            self.reason = str(event.get("reason", self.reason) or "")
            self.outputs_off_confirmed = bool(event.get("outputs_off_confirmed", False))
            self.connected = event.get("connected") is not False
        elif kind == "output":
            self.outputs[str(event.get("role", "source"))] = bool(event.get("on"))
        if kind in LOG_TAGS:
            self.add_log(LogEntry(t, LOG_TAGS[kind], step, describe(event)))
        self.version += 1

    def apply_run_json(self, doc: dict) -> None:
        """The run.json document (status, device, instruments, steps)."""
        self.status = str(doc.get("status", self.status))
        self.reason = str(doc.get("reason", "") or "")
        self.device = dict(doc.get("device") or {})
        self.instruments = dict(doc.get("instruments") or {})
        self.outputs_off_confirmed = bool(doc.get("outputs_off_confirmed", False))
        guardian = doc.get("guardian")
        self.outputs_off_by = ("guardian" if isinstance(guardian, dict)
                               and guardian.get("outputs_off_confirmed") else "runner")
        self.connected = doc.get("connected") is not False
        temperature = to_number(self.device.get("temperature_K"))
        if math.isfinite(temperature) and temperature > 0:
            self.temperature_K = temperature
        for entry in doc.get("steps") or []:
            name = str(entry.get("name", ""))
            if not name:
                continue
            progress = self._step(name)
            progress.kind = str(entry.get("kind", progress.kind))
            planned = entry.get("planned")
            if isinstance(planned, (int, float)) and planned > 0:
                progress.planned = int(planned)
            # "done" is not taken from here: every point is counted from points.csv
            # or the point events, and run.json may lag behind or run ahead of them
            progress.status = str(entry.get("status", progress.status))
            if progress.status == "running":
                self.current_step = name
        if self.status in FINAL_STATUSES and self.outputs_off_confirmed:
            self.outputs = {role: False for role in self.outputs}
        self.version += 1

    def set_plan_steps(self, steps: list[tuple[str, str, int]]) -> None:
        """Steps known before the run starts: (name, kind, planned points)."""
        for name, kind, planned in steps:
            progress = self._step(name)
            progress.kind = kind or progress.kind
            if planned > 0:
                progress.planned = planned
        self.version += 1

    def apply_model_json(self, doc: dict) -> None:
        """The run's model.json (the fit of every point, written after each step and at
        the end) replaces the live estimates: a name it leaves out (say RS, once all the
        data show no series resistance) is no longer shown."""
        self.parameters.clear()
        for name, entry in (doc.get("parameters") or {}).items():
            if not isinstance(entry, dict) or not isinstance(entry.get("value"),
                                                               (int, float)):
                continue
            sigma = entry.get("sigma")
            self.parameters[name] = Estimate(
                float(entry["value"]),
                float(sigma) if isinstance(sigma, (int, float)) else None, True)
        fixture = doc.get("fixture_capacitance_F")  # the bench's, shown marked as such
        if isinstance(fixture, dict) and isinstance(fixture.get("value"), (int, float)):
            sigma = fixture.get("sigma")
            self.parameters["CFIX"] = Estimate(
                float(fixture["value"]),
                float(sigma) if isinstance(sigma, (int, float)) else None, True)
        self.version += 1

    def add_log(self, entry: LogEntry) -> None:
        self.log.append(entry)
        self.log_total += 1

    def new_log_entries(self, seen: int) -> list[LogEntry]:
        """Entries added after the first `seen` (as many as the log still holds)."""
        fresh = self.log_total - seen
        if fresh <= 0:
            return []
        entries = list(self.log)
        return entries[-min(fresh, len(entries)):]

    # ----------------------------------------------------------------- derived
    @property
    def point_count(self) -> int:
        return len(self.iv) + len(self.cv)

    @property
    def source_on(self) -> bool:
        return any(self.outputs.values())

    @property
    def finished(self) -> bool:
        return self.status in FINAL_STATUSES

    def step_kind(self, name: str) -> str:
        progress = self.steps.get(name)
        return progress.kind if progress else ""

    def snapshot(self) -> Snapshot:
        return Snapshot(FrozenColumns(self.iv), FrozenColumns(self.cv),
                        dict(self.parameters),
                        {name: p.kind for name, p in self.steps.items()},
                        self.temperature_K, self.version)

    def eta_s(self) -> tuple[float, float]:
        """Seconds left in the current step and in the whole run (NaN when unknown).

        Per step, the seconds per point measured in that step; steps not yet started
        borrow the mean rate of finished steps of the same I-V or C-V family, else the
        overall rate."""
        if self.finished:
            return 0.0, 0.0
        rates: dict[str, list[float]] = {}
        for progress in self.steps.values():
            rate = progress.seconds_per_point()
            if math.isfinite(rate):
                rates.setdefault(_family(progress.kind), []).append(rate)
        every = [r for values in rates.values() for r in values]
        overall = float(np.mean(every)) if every else math.nan
        step_left = math.nan
        total = 0.0
        for progress in self.steps.values():
            left = progress.remaining_points()
            if left == 0:
                continue
            rate = progress.seconds_per_point()
            if not math.isfinite(rate):
                family = rates.get(_family(progress.kind))
                rate = float(np.mean(family)) if family else overall
            seconds = left * rate
            total += seconds
            if progress.name == self.current_step:
                step_left = seconds
        if not math.isfinite(total):
            return step_left, math.nan
        return step_left, total

    def progress_fraction(self) -> float:
        planned = sum(p.planned for p in self.steps.values())
        if planned <= 0:
            return math.nan
        done = sum(p.planned if p.status in ENDED_COMPLETE else min(p.done, p.planned)
                   for p in self.steps.values())
        return min(done / planned, 1.0)

    def elapsed_s(self) -> float:
        """Run time now: the last event time plus wall time since it, while running."""
        if self.status == "running" and math.isfinite(self._wall_at_last_time):
            return self.last_time_s + (time.monotonic() - self._wall_at_last_time)
        return self.last_time_s

    # ----------------------------------------------------------------- helpers
    def _step(self, name: str) -> StepProgress:
        progress = self.steps.get(name)
        if progress is None:
            progress = self.steps[name] = StepProgress(name)
        return progress

    def _note_time(self, t: float) -> None:
        if math.isfinite(t) and t >= self.last_time_s:
            self.last_time_s = t
            self._wall_at_last_time = time.monotonic()


def _family(kind: str) -> str:
    kind = kind.lower()
    return "cv" if ("cv" in kind or "c-v" in kind or "adm" in kind) else "iv"


