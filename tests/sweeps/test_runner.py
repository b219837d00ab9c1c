"""The runner on in-process fake instruments: guards before levels, every way out turning
the outputs off, pause and abort, early end when the fit has settled."""

from __future__ import annotations

import json
import threading

import pytest
from plantext import cv, forward, limits, plan_text, reverse
from sweepfake import FakeBench, FakeLcr, FakeSmu

from pnbench.sweeps.events import EventBus
from pnbench.sweeps.fitfeed import FitWorker
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.runner import Runner
from pnbench.sweeps.store import RunFolder, read_events, read_points, read_run

REV = reverse("rev", stop="-25 V", points=26, breakdown_guard="100 uA")
CV = cv(bias=[0, -1, -2])


def make_plan(*steps: dict, power: str = "150 mW"):
    text = plan_text(*steps, limits=limits(max_reverse_voltage="30 V", max_power=power))
    return parse_plan(text, "t.toml")


def fwd(name="fwd", start="0 V", stop="0.8 V", points=41, compliance="100 mA", **extra):
    return forward(name, start=start, stop=stop, points=points, compliance=compliance,
                   **extra)


class Rig:
    """A plan, a run folder, a bus and a runner on fake instruments."""

    def __init__(self, tmp_path, plan, smu=None, lcr=None, fit=None, off_fails=False):
        self.plan = plan
        self.smu = smu or FakeSmu()
        self.lcr = lcr or FakeLcr()
        self.bench = FakeBench(roles={"smu": self.smu, "lcr": self.lcr}, off_fails=off_fails)
        self.folder = RunFolder.create(tmp_path, plan.text, {"device": {"name": "LH-T1"}},
                                       {"device": "LH-T1"})
        self.bus = EventBus(sink=self.folder.append_event)
        self.seen = []
        self.bus.add_listener(self.seen.append)
        self.runner = Runner(plan, self.folder, self.bench, self.bus, fit=fit,
                             time_scale=0.0)

    def run(self):
        try:
            return self.runner.run()
        finally:
            self.folder.close()

    def events(self, kind):
        return [e for e in self.seen if e.kind == kind]


def test_normal_run_records_everything_and_ends_off(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(), REV, CV))
    outcome = rig.run()
    assert outcome.status == "completed" and outcome.exit_code == 0
    assert not rig.bench.outputs_on()
    run = read_run(rig.folder.path)
    assert run["status"] == "completed" and run["outputs_off_confirmed"] is True
    points = read_points(rig.folder.path)
    assert [p.index for p in points if p.step == "fwd"] == list(range(41))
    assert [p.index for p in points if p.step == "cv"] == list(range(6))
    # output switched on and off around each SMU step, never left on
    assert ("output", True) in rig.smu.log and rig.smu.log[-1] == ("safe_off", False)
    assert rig.lcr.log[-1] == ("bias", False)
    written = read_events(rig.folder.path)
    assert [e.seq for e in written] == list(range(1, len(written) + 1))
    assert "point" not in {e.kind for e in written}
    kinds = [e.kind for e in written]
    assert kinds[0] == "run_started" and kinds[-1] == "run_finished"
    assert len(rig.events("point")) == len(points)


def test_power_is_checked_before_the_level_is_applied(tmp_path):
    """Forward current grows about e-fold per N*Vt (~26 mV, common practice): with a
    10 mW limit the step must end before any applied level dissipates more than that."""
    smu = FakeSmu()
    rig = Rig(tmp_path, make_plan(fwd(stop="1 V", points=101), power="10 mW"), smu=smu)
    outcome = rig.run()
    assert outcome.status == "completed"
    limit = rig.events("limit")
    assert limit and limit[0]["guard"] == "power"
    points = read_points(rig.folder.path)
    assert max(abs(p.voltage_V * p.current_A) for p in points) <= 0.010
    # the fake never saw a level whose true power exceeds the limit
    top = smu.max_abs_level_on
    assert top * smu._current(top) <= 0.010
    run = read_run(rig.folder.path)
    assert run["steps"][0]["status"] == "limit" and run["steps"][0]["ended_by"] == "power"


def test_compliance_storm_ends_the_step_not_the_run(tmp_path):
    smu = FakeSmu(compliance_from=0.3)
    rig = Rig(tmp_path, make_plan(fwd(), REV), smu=smu)
    outcome = rig.run()
    assert outcome.status == "completed"
    steps = read_run(rig.folder.path)["steps"]
    assert steps[0]["ended_by"] == "compliance_storm" and steps[1]["status"] == "limit"
    flagged = [p for p in read_points(rig.folder.path) if p.step == "fwd" and p.compliance]
    assert len(flagged) == 3
    # rate-limited to one per step and second; the points carry the flag
    assert len([e for e in rig.events("compliance") if e.step == "fwd"]) == 1


def test_breakdown_guard_ends_reverse_step_and_ramps_back(tmp_path):
    rig = Rig(tmp_path, make_plan(REV))
    rig.run()
    rev = [p for p in read_points(rig.folder.path) if p.step == "rev"]
    assert abs(rev[-1].current_A) >= 1e-4 and all(abs(p.current_A) < 1e-4 for p in rev[:-1])
    assert rig.events("limit")[0]["guard"] == "breakdown_guard"
    assert rig.smu.level == 0.0 and not rig.smu.on


def test_reading_beyond_limits_is_a_safety_stop(tmp_path):
    smu = FakeSmu(overshoot=True)
    rig = Rig(tmp_path, make_plan(fwd(stop="1 V", points=101, compliance="1 mA"),
                                  power="10 W"), smu=smu)
    outcome = rig.run()
    assert outcome.status == "safety_stop" and outcome.exit_code == 4
    assert not rig.bench.outputs_on()
    assert read_run(rig.folder.path)["outputs_off_confirmed"] is True


def test_instrument_fault_keeps_points_and_switches_off(tmp_path):
    smu = FakeSmu(fail_after=17)
    rig = Rig(tmp_path, make_plan(fwd()), smu=smu)
    outcome = rig.run()
    assert outcome.status == "failed" and outcome.exit_code == 3
    assert "connection lost" in outcome.reason
    assert [p.index for p in read_points(rig.folder.path)] == list(range(17))
    assert not rig.bench.outputs_on()
    run = read_run(rig.folder.path)
    assert run["status"] == "failed" and run["steps"][0]["status"] == "interrupted"


def test_error_queue_entry_fails_the_step(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(), REV))
    rig.smu.session.errors.append((-222, "Data out of range"))
    outcome = rig.run()
    assert outcome.status == "failed" and "Data out of range" in outcome.reason
    assert not rig.bench.outputs_on()


def test_unconfirmed_off_is_reported_and_not_exit_zero(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(points=5)), off_fails=True)
    outcome = rig.run()
    assert outcome.status == "completed" and not outcome.outputs_off_confirmed
    assert outcome.exit_code == 3
    assert read_run(rig.folder.path)["outputs_off_confirmed"] is False
    assert any("could not confirm" in e["message"] for e in rig.events("error"))


def test_internal_error_is_recorded_switched_off_and_raised(tmp_path):
    smu = FakeSmu()
    rig = Rig(tmp_path, make_plan(fwd()), smu=smu)
    calls = {"n": 0}
    real = smu.apply_and_read

    def broken(level):
        calls["n"] += 1
        if calls["n"] == 5:
            raise ZeroDivisionError("bug")
        return real(level)

    smu.apply_and_read = broken
    with pytest.raises(ZeroDivisionError):
        rig.run()
    assert not rig.bench.outputs_on()
    assert read_run(rig.folder.path)["status"] == "failed"


def test_a_failing_listener_does_not_stop_the_run(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(points=5)))
    rig.bus.add_listener(lambda e: 1 / 0)
    assert rig.run().status == "completed"


def test_pause_turns_the_source_off_and_resume_continues(tmp_path):
    smu = FakeSmu()
    rig = Rig(tmp_path, make_plan(fwd(points=200)), smu=smu)
    states = []
    paused = threading.Event()

    def listener(event):
        if event.kind == "point" and event["index"] == 50:
            rig.runner.pause()
        if event.kind == "paused":
            states.append(smu.on)
            paused.set()

    rig.bus.add_listener(listener)

    def release():
        paused.wait(10)
        rig.runner.resume()

    t = threading.Thread(target=release)
    t.start()
    outcome = rig.run()
    t.join()
    assert outcome.status == "completed" and states == [False]
    assert [p.index for p in read_points(rig.folder.path)] == list(range(200))
    kinds = [e.kind for e in read_events(rig.folder.path)]
    assert kinds.index("paused") < kinds.index("resumed")


def test_abort_from_another_thread(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(points=500), REV))

    def listener(event):
        if event.kind == "point" and event["index"] == 10:
            threading.Thread(target=rig.runner.abort, args=("test abort",)).start()

    rig.bus.add_listener(listener)
    outcome = rig.run()
    assert outcome.status == "aborted" and outcome.exit_code == 4
    assert outcome.reason == "test abort"
    assert not rig.bench.outputs_on()
    run = read_run(rig.folder.path)
    assert run["status"] == "aborted" and run["steps"][1]["status"] == "pending"


def test_step_ends_early_when_the_fit_has_settled(tmp_path):
    """With 0.01 % current noise a few dozen points determine IS and N far better than
    5 %: the step ends soon after min_points, long before its 3000 points."""
    plan = make_plan(fwd(start="0.3 V", stop="0.75 V", points=3000,
                         end_when_settled=0.05, min_points=20))
    rig = Rig(tmp_path, plan, smu=FakeSmu(noise_rel=1e-4, io_delay_s=2e-4))
    worker = FitWorker(plan.steps, rig.bus, temperature_K=300.15, snapshot_interval_s=0.01)
    rig.runner.fit = worker
    outcome = rig.run()
    assert outcome.status == "completed"
    step = read_run(rig.folder.path)["steps"][0]
    assert step["status"] == "settled" and 20 <= step["done"] < 3000
    fits = rig.events("fit")
    assert fits and all(p["settled"] for p in fits[-1]["parameters"].values())


def test_run_json_is_valid_json_at_every_state_change(tmp_path):
    rig = Rig(tmp_path, make_plan(fwd(points=5), CV))
    snapshots = []
    rig.bus.add_listener(lambda e: snapshots.append(
        json.loads((rig.folder.path / "run.json").read_text())["status"]))
    rig.run()
    assert set(snapshots) >= {"running", "completed"}


def test_plan_warnings_are_recorded_as_run_events(tmp_path):
    """A plan warning (here a 20 mV rms test level at forward bias) reaches events.jsonl,
    where the app, watch and the report show it, not only the terminal that started it."""
    loud = cv("adm", bias=[0.5, 0.6], ac_level="20 mV")
    rig = Rig(tmp_path, make_plan(loud))
    assert rig.plan.warnings
    rig.run()
    warned = [e for e in read_events(rig.folder.path) if e.kind == "warning"]
    assert any("ac_level 20 mV" in e["message"] for e in warned)
