"""Resume state from a run folder: next point, guard replay, damaged folders."""

from __future__ import annotations

import json
import threading

import pytest
from sweepfake import FakeBench, FakeLcr, FakeSmu
from test_runner import CV, REV, fwd, make_plan

from pnbench.errors import DataFileError
from pnbench.sweeps.events import EventBus
from pnbench.sweeps.resume import last_smu_level, load_state
from pnbench.sweeps.runner import Runner
from pnbench.sweeps.store import RunFolder, read_points, read_run


def run_once(tmp_path, plan, smu, stop_at=None, folder=None, state=None):
    bench = FakeBench(roles={"smu": smu, "lcr": FakeLcr()})
    if folder is None:
        folder = RunFolder.create(tmp_path, plan.text, {"device": {"name": "LH-T1"}}, {})
    else:
        folder = RunFolder.reopen(folder)
    bus = EventBus(sink=folder.append_event,
                   start_seq=state.last_seq if state is not None else 0)
    runner = Runner(plan, folder, bench, bus, time_scale=0.0, resume_state=state)
    if stop_at is not None:
        def listener(event):
            if event.kind == "point" and (event.step, event["index"]) == stop_at:
                threading.Thread(target=runner.abort).start()
        bus.add_listener(listener)
    try:
        return runner.run(), folder.path
    finally:
        folder.close()


def test_resume_continues_at_the_next_point(tmp_path):
    plan = make_plan(fwd(points=60), REV, CV)
    outcome, path = run_once(tmp_path, plan, FakeSmu(), stop_at=("fwd", 30))
    assert outcome.status == "aborted"
    state = load_state(path, plan)
    done = state.done["fwd"]
    assert 30 < done < 60 and state.statuses["fwd"] == "running"
    assert last_smu_level(plan, state) == ("voltage", plan.steps[0].levels[done - 1])
    smu = FakeSmu()
    outcome, _ = run_once(tmp_path, plan, smu, folder=path, state=state)
    assert outcome.status == "completed"
    keys = [(p.step, p.index) for p in read_points(path)]
    run = read_run(path)
    assert keys == [(s["name"], k) for s in run["steps"] for k in range(s["done"])]
    assert run["steps"][0]["done"] == 60
    # the source was brought back through at most ten earlier levels, none kept
    assert smu.reads <= (60 - done) + 10 + 26 + 5


def test_a_reverse_step_past_its_guard_is_not_continued(tmp_path):
    """The process died right after the reading that reached the breakdown guard: the
    resume must count the step as ended, as the dead process would have."""
    plan = make_plan(REV, CV)
    outcome, path = run_once(tmp_path, plan, FakeSmu())
    assert read_run(path)["steps"][0]["ended_by"] == "breakdown_guard"
    events = path / "events.jsonl"
    kept = [line for line in events.read_text().splitlines()
            if json.loads(line)["kind"] not in ("step_finished", "run_finished", "limit")
            or json.loads(line)["step"] != "rev"]
    events.write_text("\n".join(kept[:6]) + "\n")
    cv_gone = [line for line in (path / "points.csv").read_text().splitlines(True)
               if not line.startswith("cv,")]
    (path / "points.csv").write_text("".join(cv_gone))
    state = load_state(path, plan)
    assert state.statuses["rev"] == "limit" and state.ended_by["rev"] == "breakdown_guard"
    smu = FakeSmu()
    outcome, _ = run_once(tmp_path, plan, smu, folder=path, state=state)
    assert outcome.status == "completed" and smu.reads == 0
    assert read_run(path)["steps"][1]["done"] == 6


def test_gaps_repeats_and_unknown_steps_are_refused(tmp_path):
    plan = make_plan(fwd(points=10))
    _, path = run_once(tmp_path, plan, FakeSmu())
    text = (path / "points.csv").read_text()
    lines = text.splitlines(True)
    (path / "points.csv").write_text("".join(lines[:-3] + lines[-2:]))
    with pytest.raises(DataFileError, match="gap or a repeat"):
        load_state(path, plan)
    (path / "points.csv").write_text(text + "other,0,iv,1.0,0.1,1e-9,,,,0\n")
    with pytest.raises(DataFileError, match="which plan.toml does not have"):
        load_state(path, plan)
