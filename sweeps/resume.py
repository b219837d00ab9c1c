"""Where an interrupted run stands: what is on disk, which steps are finished, what is next.

`load_state(run_dir, plan)` reads points.csv (the authority on what was measured),
events.jsonl (which steps finished, and how) and run.json, and checks that each step's
points are numbered 0, 1, 2... without gap or repeat. A step with points but no
``step_finished`` event is replayed through the guards: if its last reading had already
ended it (breakdown guard reached, power, a compliance storm) the step counts as finished,
exactly as the interrupted process would have decided, so a resume never drives a device
past a limit it had reached. Otherwise the step continues at the next index.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

from pnbench.errors import DataFileError, SafetyStop
from pnbench.sweeps.limits import Reading, StepGuard
from pnbench.sweeps.plan import Plan
from pnbench.sweeps.store import Point, read_events, read_points, read_run

FINISHED = ("done", "limit", "settled")


@dataclass
class ResumeState:
    done: dict[str, int]
    statuses: dict[str, str]
    ended_by: dict[str, str] = field(default_factory=dict)
    tails: dict[str, list[Point]] = field(default_factory=dict)
    points: dict[str, list[Point]] = field(default_factory=dict)
    newly_finished: list[tuple[str, str, str]] = field(default_factory=list)
    last_seq: int = 0
    started_epoch_s: float | None = None
    previous_status: str = ""
    guardian: dict | None = None  # what the guardian did after the process died

    @property
    def remaining(self) -> int:
        return sum(1 for s in self.statuses.values() if s not in FINISHED)


def load_state(run_dir: str | Path, plan: Plan) -> ResumeState:
    run_dir = Path(run_dir)
    run = read_run(run_dir)
    names = {s.name for s in plan.steps}
    by_step: dict[str, list[Point]] = {s.name: [] for s in plan.steps}
    for point in read_points(run_dir):
        if point.step not in names:
            raise DataFileError(f"{run_dir}/points.csv: a point of step {point.step!r}, "
                                "which plan.toml does not have")
        by_step[point.step].append(point)
    done = {}
    for name, pts in by_step.items():
        for expected, p in enumerate(pts):
            if p.index != expected:
                raise DataFileError(f"{run_dir}/points.csv: step {name!r} has point index "
                                    f"{p.index} where {expected} was due (a gap or a "
                                    "repeat); the run folder was edited or damaged")
        done[name] = len(pts)

    statuses = {s.name: "pending" for s in plan.steps}
    ended_by: dict[str, str] = {}
    last_seq = 0
    for event in read_events(run_dir):
        last_seq = max(last_seq, event.seq)
        if event.kind == "step_finished" and event.step in statuses:
            statuses[event.step] = str(event.get("status", "done"))
            if event.get("ended_by"):
                ended_by[event.step] = str(event["ended_by"])
    state = ResumeState(done=done, statuses=statuses, ended_by=ended_by, last_seq=last_seq,
                        previous_status=str(run.get("status", "")), points=by_step,
                        guardian=run.get("guardian") or None,
                        started_epoch_s=_epoch(run.get("started")))
    for step in plan.steps:
        if statuses[step.name] in FINISHED:
            continue
        pts = by_step[step.name]
        if len(pts) >= step.planned:
            statuses[step.name] = "done"
            state.newly_finished.append((step.name, "done", ""))
            continue
        statuses[step.name] = "pending" if not pts else "running"
        if step.instrument == "smu" and pts:
            _replay(step, pts, plan, state)
    return state


def _replay(step, pts: list[Point], plan: Plan, state: ResumeState) -> None:
    guard = StepGuard(plan.limits, step.source, step.compliance, step.breakdown_guard_A)
    for n, p in enumerate(pts):
        verdict = guard.after(step.points[p.index].level,
                              Reading(p.voltage_V or 0.0, p.current_A or 0.0, p.compliance))
        if verdict is None:
            continue
        if verdict.ends == "run":
            raise SafetyStop(f"step {step.name}, point {p.index}: {verdict.message}; check "
                             "the device and the instrument, then start a new run")
        if n == len(pts) - 1:
            state.statuses[step.name] = "limit"
            state.ended_by[step.name] = verdict.kind
            state.newly_finished.append((step.name, "limit", verdict.message))
            return
    state.tails[step.name] = pts[-3:]


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
        if step.instrument == "smu" and state.statuses.get(step.name) == "running":
            done = state.done.get(step.name, 0)
            if done > 0:
                return step.source, step.points[done - 1].level
    return None
