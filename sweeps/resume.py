"""Where an interrupted run stands: what is on disk, which steps are finished, what is next.

`load_state(run_dir, plan)` reads points.csv (the authority on what was measured),
events.jsonl (which steps finished, and how) and run.json, and checks that each step's
points are numbered 0, 1, 2... without gap or repeat. A step with points but no
``step_finished`` event is replayed through the guards: if its last reading had already
ended it (breakdown guard reached, power, a compliance storm) the step counts as finished,
exactly as the interrupted process would have decided, so a resume never drives a device
past a limit it had reached. Otherwise the step continues at the next index. A run whose
steps are all finished needs only its end work (`ResumeState.end_work_only`): the final
fit, model, card and report, without the instruments (see `sweeps.ending`).

Points are read by column (`record.read_columns`); row objects are made only for the
few a resumed step's guards replay.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np

from pnbench.errors import DataFileError, SafetyStop
from pnbench.sweeps.events import StepFinished
from pnbench.sweeps.limits import Reading, StepGuard
from pnbench.sweeps.plan import Plan
from pnbench.sweeps.record import Point, PointColumns, layout, read_columns, read_events, read_run
from pnbench.sweeps.statuses import StepStatus, step_finished

_POINTS_NAME = layout.POINTS


@dataclass
class ResumeState:
    done: dict[str, int]
    statuses: dict[str, str]
    ended_by: dict[str, str] = field(default_factory=dict)
    tails: dict[str, list[Point]] = field(default_factory=dict)
    points: dict[str, list[Point]] = field(default_factory=dict)
    #: each step's points as read, by column (what the fit worker is preloaded with)
    columns: dict[str, PointColumns] = field(default_factory=dict)
    newly_finished: list[tuple[str, str, str]] = field(default_factory=list)
    last_seq: int = 0
    started_epoch_s: float | None = None
    previous_status: str = ""
    guardian: dict | None = None  # what the guardian did after the process died
    #: {"status", "reason"} the run was ending with when it stopped (end work unfinished)
    finishing: dict | None = None
    outputs_off_confirmed: bool = False

    @property
    def remaining(self) -> int:
        return sum(1 for s in self.statuses.values() if not step_finished(s))

    @property
    def end_work_only(self) -> bool:
        """Every step is finished: only the end work (fit, model, card, report) is left."""
        return self.remaining == 0


def load_state(run_dir: str | Path, plan: Plan) -> ResumeState:
    run_dir = Path(run_dir)
    run = read_run(run_dir)
    columns = read_columns(run_dir)
    names = {s.name for s in plan.steps}
    stray = sorted(set(columns.step_names) - names)
    if stray:
        raise DataFileError(f"{run_dir}/{_POINTS_NAME}: a point of step {stray[0]!r}, "
                            "which plan.toml does not have")
    by_step: dict[str, PointColumns] = {}
    done = {}
    for step in plan.steps:
        mine = columns.select(columns.step_mask(step.name))
        bad = np.flatnonzero(mine.index != np.arange(len(mine)))
        if bad.size:
            raise DataFileError(f"{run_dir}/{_POINTS_NAME}: step {step.name!r} has point "
                                f"index {int(mine.index[bad[0]])} where {int(bad[0])} was "
                                "due (a gap or a repeat); the run folder was edited or "
                                "damaged")
        by_step[step.name] = mine
        done[step.name] = len(mine)

    statuses: dict[str, str] = {s.name: StepStatus.PENDING for s in plan.steps}
    ended_by: dict[str, str] = {}
    last_seq = 0
    for event in read_events(run_dir):
        last_seq = max(last_seq, event.seq)
        if isinstance(event, StepFinished) and event.step in statuses:
            statuses[event.step] = str(event.status or StepStatus.DONE)
            if event.ended_by:
                ended_by[event.step] = str(event.ended_by)
    state = ResumeState(done=done, statuses=statuses, ended_by=ended_by, last_seq=last_seq,
                        previous_status=str(run.status), points=_LazyPoints(by_step),
                        columns=by_step,
                        guardian=run.get("guardian") or None,
                        started_epoch_s=_epoch(run.started), finishing=run.finishing,
                        outputs_off_confirmed=run.outputs_off_confirmed)
    for step in plan.steps:
        if step_finished(statuses[step.name]):
            continue
        mine = by_step[step.name]
        if len(mine) >= step.planned:
            statuses[step.name] = StepStatus.DONE
            state.newly_finished.append((step.name, StepStatus.DONE, ""))
            continue
        statuses[step.name] = StepStatus.PENDING if not len(mine) else StepStatus.RUNNING
        if step.instrument == "smu" and len(mine):
            _replay(step, mine, plan, state)
    return state


class _LazyPoints(dict):
    """{step: list[Point]} made on first use from the step's columns (a resume that
    needs no row objects never makes a million of them)."""

    def __init__(self, columns: dict[str, PointColumns]) -> None:
        super().__init__()
        self._columns = columns

    def __missing__(self, name: str) -> list[Point]:
        if name not in self._columns:
            raise KeyError(name)
        rows = list(self._columns[name].rows())
        self[name] = rows
        return rows

    def get(self, name, default=None):
        return self[name] if name in self._columns else default

    def __contains__(self, name) -> bool:
        return name in self._columns


def _replay(step, pts: PointColumns, plan: Plan, state: ResumeState) -> None:
    guard = StepGuard(plan.limits, step.source, step.compliance, step.breakdown_guard_A)
    volts = np.nan_to_num(pts.voltage_V, nan=0.0)
    amps = np.nan_to_num(pts.current_A, nan=0.0)
    levels = step.levels
    for n in range(len(pts)):
        index = int(pts.index[n])
        verdict = guard.after(levels[index], Reading(float(volts[n]), float(amps[n]),
                                                     bool(pts.compliance[n])))
        if verdict is None:
            continue
        if verdict.ends == "run":
            raise SafetyStop(f"step {step.name}, point {index}: {verdict.message}; check "
                             "the device and the instrument, then start a new run")
        if n == len(pts) - 1:
            state.statuses[step.name] = StepStatus.LIMIT
            state.ended_by[step.name] = verdict.kind
            state.newly_finished.append((step.name, StepStatus.LIMIT, verdict.message))
            return
    state.tails[step.name] = [pts.row(n) for n in range(max(0, len(pts) - 3), len(pts))]


def _epoch(text: object) -> float | None:
    if not isinstance(text, str):
        return None
    try:
        return datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()
    except ValueError:
        return None


def last_smu_level(plan: Plan, state: ResumeState) -> tuple[str, float] | None:
    """(source, level) of the SMU step that was in progress, or None."""
    for step in plan.steps:
        if step.instrument == "smu" and state.statuses.get(step.name) == StepStatus.RUNNING:
            done = state.done.get(step.name, 0)
            if done > 0:
                return step.source, step.points[done - 1].level
    return None
