"""One progress model for every front end: done and planned per step, and the ETA.

Headless progress, the app and `pnbench watch` all feed a `ProgressModel` the same way
(typed events, points, run.json) and so show the same numbers. Pure: no threads, no
clocks; times are the run's own ``time_s`` (seconds since the run started).

The ETA of a step is its points left times its seconds per point, where the seconds per
point blend two sources:

- the plan's own estimate (``RunStarted.seconds_per_point``, from `sweeps.check`, at the
  simulated bench's time scale), corrected by how the run's measured time compares with
  the estimate so far (``calibration``);
- the step's measured rate, weighted by how many intervals it rests on
  (`PRIOR_POINTS` of the estimate against n measured ones).

So at the start the ETA is the plan's estimate (not the rate of the first one or two
points, which include connecting and arming), and it moves to the measured rate as points
come. A step with neither borrows the mean measured rate of the run. Gaps far longer
than the step's rate (a pause, a resume after an interruption) are not counted as rate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pnbench.sweeps.events import (
    Event,
    PointTaken,
    RunFinished,
    RunStarted,
    StepFinished,
    StepStarted,
)
from pnbench.sweeps.quantities import format_duration
from pnbench.sweeps.statuses import RUN_FINAL, RunStatus, StepStatus, step_finished

__all__ = ["ProgressModel", "StepProgress", "format_duration"]

#: Weight of the plan's estimate, in measured intervals.
PRIOR_POINTS = 8
#: An interval longer than this many times the step's mean so far is a gap, not rate.
GAP_FACTOR = 20.0


@dataclass
class StepProgress:
    """Progress of one plan step; `planned` may be unknown (0) until run.json says."""

    name: str
    kind: str = ""
    planned: int = 0
    done: int = 0
    status: str = StepStatus.PENDING
    #: the plan's estimate of seconds per point (NaN when unknown)
    estimate_s: float = math.nan
    first_time_s: float = math.nan
    last_time_s: float = math.nan
    #: measured intervals between points of this step, and their sum (gaps left out)
    intervals: int = 0
    interval_sum_s: float = 0.0

    def measured_s(self) -> float:
        """Measured seconds per point (NaN before two points)."""
        return self.interval_sum_s / self.intervals if self.intervals else math.nan

    def seconds_per_point(self) -> float:
        return self.measured_s()

    def remaining_points(self) -> int:
        if self.status not in (StepStatus.PENDING, StepStatus.RUNNING, RunStatus.PAUSED):
            return 0  # done, ended by a limit or by settling, interrupted
        return max(self.planned - self.done, 0)

    def note_times(self, times: np.ndarray | list[float]) -> None:
        """Points of this step at these run times (in order)."""
        t = np.asarray(times, dtype=float)
        t = t[np.isfinite(t)]
        if not t.size:
            return
        if math.isfinite(self.last_time_s):
            t = np.concatenate(([self.last_time_s], t))
        elif not math.isfinite(self.first_time_s):
            self.first_time_s = float(t[0])
        gaps = np.diff(t)
        if gaps.size:
            mean = self.measured_s()
            scale = mean if math.isfinite(mean) and mean > 0 else float(np.median(gaps))
            if self.intervals >= 3 or gaps.size >= 3:
                gaps = gaps[gaps <= GAP_FACTOR * max(scale, 1e-6)]
            self.intervals += int(gaps.size)
            self.interval_sum_s += float(gaps.sum())
        self.last_time_s = float(t[-1])


@dataclass
class ProgressModel:
    """Done/planned per step and the ETA of the run, fed by events and points."""

    steps: dict[str, StepProgress] = field(default_factory=dict)
    current: str | None = None
    status: str = "idle"

    # ----------------------------------------------------------------- input
    def step(self, name: str) -> StepProgress:
        progress = self.steps.get(name)
        if progress is None:
            progress = self.steps[name] = StepProgress(name)
        return progress

    def set_plan(self, steps, seconds_per_point: dict[str, float] | None = None) -> None:
        """Steps known before the run: (name, kind, planned) and the plan's estimates."""
        for name, kind, planned in steps:
            progress = self.step(name)
            progress.kind = kind or progress.kind
            if planned > 0:
                progress.planned = int(planned)
        self.set_estimates(seconds_per_point or {})

    def set_estimates(self, seconds_per_point: dict) -> None:
        for name, seconds in seconds_per_point.items():
            if isinstance(seconds, (int, float)) and seconds > 0 and math.isfinite(seconds):
                self.step(str(name)).estimate_s = float(seconds)

    def apply(self, event: Event) -> None:
        match event:
            case PointTaken():
                self.add_points(event.step or "", [event.time_s], index=event.index)
            case RunStarted():
                self.status = RunStatus.RUNNING
                for name, known in (event.progress or {}).items():
                    progress = self.step(str(name))
                    progress.done = int(known.get("done", progress.done))
                    progress.status = str(known.get("status", progress.status))
                self.set_estimates(event.seconds_per_point or {})
            case StepStarted() if event.step:
                progress = self.step(event.step)
                progress.status = StepStatus.RUNNING
                progress.kind = event.step_kind or progress.kind
                if event.planned:
                    progress.planned = int(event.planned)
                progress.done = max(progress.done, int(event.done or 0))
                progress.last_time_s = math.nan  # a new stretch: no interval across it
                self.current = event.step
            case StepFinished() if event.step:
                progress = self.step(event.step)
                progress.status = str(event.status or StepStatus.DONE)
                if event.done:
                    progress.done = int(event.done)
                if self.current == event.step:
                    self.current = None
            case RunFinished():
                self.status = str(event.status or RunStatus.COMPLETED)
                self.current = None

    def add_points(self, step: str, times, index: int | None = None) -> None:
        """Points of one step at these run times; ``index`` (of the last) when known."""
        progress = self.step(step)
        count = len(times)
        progress.done = index + 1 if index is not None else progress.done + count
        progress.note_times(times)
        if progress.status == StepStatus.PENDING:
            progress.status = StepStatus.RUNNING
        if progress.status == StepStatus.RUNNING:
            self.current = step

    def apply_run_doc(self, doc: dict) -> None:
        """run.json's steps (planned, status) and status; done counts come from points."""
        self.status = str(doc.get("status", self.status))
        for entry in doc.get("steps") or []:
            name = str(entry.get("name", ""))
            if not name:
                continue
            progress = self.step(name)
            progress.kind = str(entry.get("kind", progress.kind) or progress.kind)
            planned = entry.get("planned")
            if isinstance(planned, (int, float)) and planned > 0:
                progress.planned = int(planned)
            progress.status = str(entry.get("status", progress.status))
            if progress.status == StepStatus.RUNNING:
                self.current = name

    # ----------------------------------------------------------------- derived
    @property
    def finished(self) -> bool:
        return self.status in RUN_FINAL

    def total_done(self) -> int:
        return sum(p.done for p in self.steps.values())

    def total_planned(self) -> int:
        """Planned points, counting a step that ended early (limit, settled) as done."""
        return sum(p.done if step_finished(p.status) else p.planned
                   for p in self.steps.values())

    def fraction(self) -> float:
        planned = sum(p.planned for p in self.steps.values())
        if planned <= 0:
            return math.nan
        done = sum(p.planned if step_finished(p.status) else min(p.done, p.planned)
                   for p in self.steps.values())
        return min(done / planned, 1.0)

    def calibration(self) -> float:
        """Measured time over estimated time for the points measured so far, pulled
        towards 1 while few points are measured."""
        measured = estimated = 0.0
        n = 0
        for p in self.steps.values():
            if p.intervals and math.isfinite(p.estimate_s):
                measured += p.interval_sum_s
                estimated += p.intervals * p.estimate_s
                n += p.intervals
        if estimated <= 0:
            return 1.0
        return (PRIOR_POINTS + n * (measured / estimated)) / (PRIOR_POINTS + n)

    def seconds_per_point(self, progress: StepProgress, fallback: float,
                          calibration: float) -> float:
        prior = progress.estimate_s * calibration
        measured = progress.measured_s()
        if math.isfinite(prior) and math.isfinite(measured):
            n = progress.intervals
            return (PRIOR_POINTS * prior + n * measured) / (PRIOR_POINTS + n)
        if math.isfinite(measured):
            return measured
        if math.isfinite(prior):
            return prior
        return fallback

    def eta_s(self) -> tuple[float, float]:
        """Seconds left in the current step and in the whole run (NaN when unknown)."""
        if self.finished:
            return 0.0, 0.0
        rates = [p.measured_s() for p in self.steps.values() if p.intervals]
        fallback = float(np.mean(rates)) if rates else math.nan
        calibration = self.calibration()
        step_left, total = math.nan, 0.0
        for progress in self.steps.values():
            left = progress.remaining_points()
            if left == 0:
                if progress.name == self.current:
                    step_left = 0.0
                continue
            seconds = left * self.seconds_per_point(progress, fallback, calibration)
            total += seconds
            if progress.name == self.current:
                step_left = seconds
        return step_left, (total if math.isfinite(total) else math.nan)
