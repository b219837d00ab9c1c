"""Instrument faults on the simulated bench over real sockets: the run stops with exit
code 3 and says why, every point read before the fault is on disk, the outputs end off
(the bench's connection watchdog is disabled, so only pnbench can have switched them off),
and `resume` finishes the plan without repeating or losing a point."""

from __future__ import annotations

import pytest
from plantext import cv, forward, limits, plan_text, reverse

from pnbench.drivers.sim.bench import SimBench
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.store import read_events, read_points, read_run


def plan_for(sim, fwd_stop: str, compliance: str) -> str:
    return plan_text(
        forward(source="voltage", stop=fwd_stop, compliance=compliance),
        reverse(),
        cv(),
        device="LH-VC510",
        instruments={"smu": {"resource": sim.smu_resource, "timeout": "400 ms"},
                     "lcr": {"resource": sim.lcr_resource, "timeout": "400 ms"}},
        # the bench runs at time scale 0, which pnbench cannot know: a fast ramp
        limits=limits(ramp_rate="5 kV/s"),
    )


@pytest.fixture
def bench():
    sim = SimBench.start("lh-vc510", time_scale=0.0, off_on_disconnect=False)
    yield sim
    sim.close()


def make_plan(sim, tmp_path, fwd_stop="0.75 V", compliance="100 mA"):
    text = plan_for(sim, fwd_stop, compliance)
    path = tmp_path / "plan.toml"
    path.write_text(text)
    return parse_plan(text, str(path), base_dir=tmp_path)


def planned_keys(plan, run_dir):
    run = read_run(run_dir)
    return [(s["name"], k) for s in run["steps"] for k in range(s["done"])]


def assert_off(sim):
    assert sim.outputs() == {"smu_output": False, "lcr_bias": False}


def run_with_fault(sim, tmp_path, instrument, fault, **options):
    plan = make_plan(sim, tmp_path)
    sim.inject(instrument, fault, **options)
    launch = Launch.new(plan, out_dir=tmp_path / "runs")
    outcome = launch.run()
    return plan, launch, outcome


@pytest.mark.parametrize("instrument, fault, options, words", [
    ("smu", "drop", {"after": 60}, "connection lost"),
    ("smu", "stall", {"after": 60, "seconds": 1.5}, "no reply"),
    ("smu", "garbage", {"after": 60}, "reply"),
    ("lcr", "drop", {"after": 12}, "connection lost"),
])
def test_fault_mid_step_then_resume(bench, tmp_path, instrument, fault, options, words):
    plan, launch, outcome = run_with_fault(bench, tmp_path, instrument, fault, **options)
    assert outcome.status == "failed" and outcome.exit_code == 3
    assert words in outcome.reason
    assert_off(bench)
    run = read_run(launch.run_dir)
    assert run["status"] == "failed" and run["outputs_off_confirmed"] is True
    assert words in run["reason"]
    before = [(p.step, p.index) for p in read_points(launch.run_dir)]
    assert before, "the fault came after some points"
    assert any(e.kind == "run_finished" and e["status"] == "failed"
               for e in read_events(launch.run_dir))

    again = Launch.resume_from(launch.run_dir)
    outcome2 = again.run()
    assert outcome2.status == "completed", outcome2.reason
    assert_off(bench)
    after = [(p.step, p.index) for p in read_points(launch.run_dir)]
    assert after[: len(before)] == before  # nothing already read was lost or rewritten
    assert after == planned_keys(plan, launch.run_dir)  # each planned point exactly once
    run = read_run(launch.run_dir)
    assert run["resume_count"] == 1 and run["resumes"][0]["previous_status"] == "failed"


def test_error_queue_entry_stops_the_run(bench, tmp_path):
    plan, launch, outcome = run_with_fault(bench, tmp_path, "smu", "error", after=30,
                                           code=-222, message="Data out of range")
    assert outcome.status == "failed" and "Data out of range" in outcome.reason
    assert_off(bench)


@pytest.mark.parametrize("instrument, after", [("smu", 40), ("lcr", 30)])
def test_a_reading_that_is_not_a_number_ends_the_run_as_an_instrument_fault(
        bench, tmp_path, monkeypatch, instrument, after):
    """The overflow marker 9.9E37 (SCPI-1999 volume 1, 7.2.1.5) reads as inf: no guard can
    judge it, so no further level is applied; the source ramps down, the step and the run
    end as failed (exit 3), the outputs end off, and resume finishes the plan."""
    from pnbench.drivers.roles import LcrMeter, Smu

    applied = []
    for cls in (Smu, LcrMeter):
        original = cls.apply_and_read

        def spy(self, level, *args, _original=original):
            reading = _original(self, level, *args)
            applied.append((type(self).__name__, level, reading))
            return reading

        monkeypatch.setattr(cls, "apply_and_read", spy)
    plan, launch, outcome = run_with_fault(bench, tmp_path, instrument, "overflow",
                                           after=after)
    assert outcome.status == "failed" and outcome.exit_code == 3
    assert "not a finite number" in outcome.reason
    assert_off(bench)
    run = read_run(launch.run_dir)
    assert run["status"] == "failed" and run["outputs_off_confirmed"] is True
    assert "failed" in [s["status"] for s in run["steps"]]
    # the bad reading was the last level applied: nothing followed it
    import math

    def finite(r):
        if hasattr(r, "current_A"):
            return math.isfinite(r.current_A) and math.isfinite(r.voltage_V)
        return all(math.isfinite(x) for x in (r.primary, r.secondary))

    bad = [k for k, (_, _, r) in enumerate(applied) if not finite(r)]
    assert bad and bad[0] == len(applied) - 1
    points = read_points(launch.run_dir)
    assert all(p.current_A is None or math.isfinite(p.current_A) for p in points)
    assert all(p.capacitance_F is None or math.isfinite(p.capacitance_F) for p in points)

    monkeypatch.undo()
    outcome2 = Launch.resume_from(launch.run_dir).run()
    assert outcome2.status == "completed", outcome2.reason
    assert [(p.step, p.index) for p in read_points(launch.run_dir)] == planned_keys(
        plan, launch.run_dir)


def test_compliance_storm_on_the_bench(bench, tmp_path):
    """A 1 mA compliance meets the LH-VC510 forward current near 0.7 V (IS = 4 fA,
    N = 1.03 in its device file): the forward step ends after three compliance readings
    and the rest of the plan runs."""
    plan = make_plan(bench, tmp_path, fwd_stop="1.0 V", compliance="1 mA")
    launch = Launch.new(plan, out_dir=tmp_path / "runs")
    outcome = launch.run()
    assert outcome.status == "completed"
    assert_off(bench)
    steps = read_run(launch.run_dir)["steps"]
    assert steps[0]["ended_by"] == "compliance_storm" and steps[0]["done"] < 40
    assert steps[2]["status"] == "done"


def test_identity_change_is_refused_on_resume(bench, tmp_path):
    plan = make_plan(bench, tmp_path)
    bench.inject("smu", "drop", after=40)
    launch = Launch.new(plan, out_dir=tmp_path / "runs")
    assert launch.run().status == "failed"
    run_dir = launch.run_dir
    doc = read_run(run_dir)
    doc["instruments"]["smu"]["identity"] = "pnbench,simulated SMU,99999,1"
    (run_dir / "run.json").write_text(__import__("json").dumps(doc))
    from pnbench.errors import InstrumentError

    with pytest.raises(InstrumentError, match="--force-identity"):
        Launch.resume_from(run_dir).run()
    assert_off(bench)
    outcome = Launch.resume_from(run_dir, force_identity=True).run()
    assert outcome.status == "completed"
    assert any("force-identity" in e.get("message", "") for e in read_events(run_dir))
