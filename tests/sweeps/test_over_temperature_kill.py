"""kill -9 of a run over temperature during a ramp and during a soak, then resume.

The simulated bench (its stage included) runs in this test process at 5 % of real time
with its connection watchdog off, so after the kill the instruments stay as the run left
them until pnbench's guardian switches the sources off and sends the stage to standby.
After the resume: every point the killed process wrote is still there byte for byte, each
planned point is present exactly once, and the stage is stable at the interrupted set
point again before the next point is taken.
"""

from __future__ import annotations

import json
import signal
import subprocess
from pathlib import Path

import pytest
from plantext import forward, limits, plan_text, table
from processhelp import pnbench, start_run, unbuffered, wait_for

from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.device import parse_device
from pnbench.sweeps.store import read_points, read_run

DEVICE = """
[device]
part = "LH-T-KILL"
[diode]
IS = 2e-14
N = 1.04
RS = 1.0
[stage]
time_constant_s = 5.0
reading_noise_K = 0.005
"""
#: Two set points 10 K apart above room temperature: a ramp of 3 s in real time at the
#: bench's 5 % (the stage's clock), wide enough for a loaded machine to see it and kill
#: inside it, then a soak of 2 s (pnbench's clock).
TEMPERATURE = {"set_points": [310.0, 320.0], "ramp_rate": "10 K/min", "soak": "2 s",
               "stable_within": "0.1 K", "stable_for": "0.5 s", "poll": "0.1 s",
               "timeout": "120 s", "lowest": "280 K", "highest": "340 K"}


def _plan(bench) -> str:
    text = plan_text(
        forward(source="current", start="10 nA", stop="1 mA", points=None,
                points_per_decade=4, compliance="1.5 V"),
        device="LH-T-KILL",
        instruments={"smu": {"resource": bench.smu_resource},
                     "stage": {"resource": bench.stage_resource}},
        limits=limits(ramp_rate="5 kV/s"))
    return text + "\n" + table("temperature", TEMPERATURE)


def _events(run_dir: Path) -> list[dict]:
    try:
        text = (run_dir / "events.jsonl").read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    return [json.loads(line) for line in text.splitlines() if line.endswith("}")]


@pytest.fixture
def bench():
    sim = SimBench.start(parse_device(DEVICE), time_scale=0.05, off_on_disconnect=False)
    yield sim
    sim.close()


def _ramping_to(events, sp) -> bool:
    return any(e["kind"] == "stage_ramping" and e["set_point_K"] == sp for e in events)


def _stable_at(events, sp) -> bool:
    return any(e["kind"] == "stage_stable" and e["set_point_K"] == sp for e in events)


@pytest.mark.parametrize("moment", ["ramp", "soak"])
def test_kill_9_during_a_ramp_or_a_soak_then_resume(bench, tmp_path, moment):
    plan = tmp_path / "plan.toml"
    plan.write_text(_plan(bench), encoding="utf-8")
    out = tmp_path / "runs"
    env = unbuffered()
    proc = start_run(plan, out, "--no-report")
    try:
        assert wait_for(lambda: any(out.glob("*/events.jsonl")), 30), "no run folder"
        run_dir = next(out.glob("*"))
        if moment == "ramp":
            hit = wait_for(lambda: _ramping_to(_events(run_dir), 320.0), 180)
            assert hit and not _stable_at(_events(run_dir), 320.0)
        else:
            assert wait_for(lambda: _stable_at(_events(run_dir), 320.0), 180)
            assert not any(e["kind"] == "step_started" and e["step"].endswith("320K")
                           for e in _events(run_dir))
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert wait_for(lambda: read_run(run_dir).get("guardian") is not None, 30)
    # the guardian: SMU off, then the stage to its standby (25 degC)
    assert not any(bench.outputs().values())
    assert bench.thermal.set_point_K == pytest.approx(298.15)
    before = (run_dir / "points.csv").read_bytes()
    before = before[: before.rfind(b"\n") + 1]
    n_before = len(_events(run_dir))

    done = subprocess.run(pnbench("resume", str(run_dir), "--no-report"),
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    after = (run_dir / "points.csv").read_bytes()
    assert after.startswith(before), "a point already read was lost or rewritten"
    run = read_run(run_dir)
    assert run["status"] == "completed" and run["outputs_off_confirmed"] is True
    keys = [(p.step, p.index) for p in read_points(run_dir)]
    planned = [(s["name"], k) for s in run["steps"] for k in range(s["done"])]
    assert keys == planned and len(keys) == sum(s["planned"] for s in run["steps"])
    # after the resume the stage is stable at 320 K again before the step there starts
    resumed = _events(run_dir)[n_before:]
    kinds = [(e["kind"], e.get("set_point_K")) for e in resumed]
    start = next(k for k, e in enumerate(resumed) if e["kind"] == "step_started")
    assert ("stage_ramping", 320.0) in kinds[:start] and ("stage_stable", 320.0) in kinds[:start]
    assert bench.thermal.set_point_K == pytest.approx(298.15)  # standby at the end
