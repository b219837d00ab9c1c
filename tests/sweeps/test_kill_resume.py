"""kill -9 of a `pnbench run` process at random moments, then `pnbench resume`.

The simulated bench runs in this test process with its connection watchdog off, so after
the kill the SMU output stays on exactly as a real instrument's would, unless pnbench's
guardian process switches it off: the test waits for that, then resumes. After each
resume: outputs off, every point the killed process had written still there byte for
byte, each planned point present exactly once, and run.json saying what happened. The
moments come from a seeded generator (PNBENCH_KILL_SEED overrides the seed) so a failure
can be replayed.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import time
from pathlib import Path

import pytest
from plantext import cv, forward, limits, plan_text, reverse
from processhelp import pnbench, start_run, unbuffered, wait_for

from pnbench.drivers.sim.bench import SimBench
from pnbench.sweeps.store import read_events, read_points, read_run


def plan_for(bench) -> str:
    return plan_text(
        forward(source="current", start="10 nA", stop="20 mA", points=None,
                points_per_decade=20, compliance="2 V"),
        reverse(start="-0.1 V", stop="-8 V", points=200, compliance="10 mA",
                breakdown_guard="5 mA"),
        cv(bias_stop="-4 V", bias_points=21),
        device="LH-ZL560",
        instruments={"smu": {"resource": bench.smu_resource},
                     "lcr": {"resource": bench.lcr_resource}},
        # the bench runs at time scale 0, which pnbench cannot know: a fast ramp
        limits=limits(max_reverse_voltage="8 V", max_power="100 mW", ramp_rate="5 kV/s"),
    )


SEED = int(os.environ.get("PNBENCH_KILL_SEED", "5607"))
REPETITIONS = 3


def data_lines(run_dir: Path) -> int:
    try:
        return (run_dir / "points.csv").read_bytes().count(b"\n") - 4
    except FileNotFoundError:
        return 0


@pytest.fixture(scope="module")
def bench():
    # a slow bench (5 % of real instrument time) so that a kill lands mid-sweep
    sim = SimBench.start("lh-zl560", time_scale=0.05, off_on_disconnect=False)
    yield sim
    sim.close()


@pytest.mark.parametrize("repetition", range(REPETITIONS))
def test_kill_9_then_resume(bench, tmp_path, repetition):
    rng = random.Random(SEED * 100 + repetition)
    plan = tmp_path / "plan.toml"
    plan.write_text(plan_for(bench))
    out = tmp_path / "runs"
    env = unbuffered()
    proc = start_run(plan, out, "--no-report")
    try:
        assert wait_for(lambda: any(out.glob("*/points.csv")), 30), "no run folder"
        run_dir = next(out.glob("*/points.csv")).parent
        assert wait_for(lambda: data_lines(run_dir) > 0, 30)
        delay = rng.uniform(0.0, 1.5)
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    what = f"(seed {SEED}, repetition {repetition}, kill {delay:.3f} s after the first point)"
    # the guardian notices the death and switches the bench off, before any resume
    assert wait_for(lambda: not any(bench.outputs().values()), 20), "outputs left on " + what
    assert wait_for(lambda: read_run(run_dir).get("guardian") is not None
                    or read_run(run_dir)["status"] == "completed", 20), what
    before = (run_dir / "points.csv").read_bytes()
    before = before[: before.rfind(b"\n") + 1]
    killed_status = read_run(run_dir)["status"]
    print(what, killed_status, before.count(b"\n"), "lines before resume")
    read_points(run_dir)  # parseable after the kill

    done = subprocess.run(pnbench("resume", str(run_dir), "--no-report"),
                          capture_output=True, text=True, env=env, timeout=60)
    if killed_status == "completed":
        assert done.returncode == 0 and "already completed" in done.stdout
    else:
        assert done.returncode == 0, what + done.stderr
        assert "Traceback" not in done.stderr
    assert bench.outputs() == {"smu_output": False, "lcr_bias": False}, what

    after = (run_dir / "points.csv").read_bytes()
    assert after.startswith(before), "a point already read was lost or rewritten " + what
    run = read_run(run_dir)
    assert run["status"] == "completed" and run["outputs_off_confirmed"] is True, what
    keys = [(p.step, p.index) for p in read_points(run_dir)]
    planned = [(s["name"], k) for s in run["steps"] for k in range(s["done"])]
    assert keys == planned, "a point was repeated or skipped " + what
    assert run["steps"][0]["status"] == "done" and run["steps"][2]["status"] == "done"
    if killed_status != "completed":
        assert killed_status == "interrupted", what  # written by the guardian
        assert run["resume_count"] == 1
        assert run["resumes"][0]["previous_status"] == "interrupted"
        assert run["resumes"][0]["guardian"]["outputs_off_confirmed"] is True, what
        assert any("ended without closing" in e.get("message", "")
                   for e in read_events(run_dir) if e.kind == "warning"), what
        seqs = [e.seq for e in read_events(run_dir)]
        assert seqs == list(range(1, len(seqs) + 1)), what


def test_kill_9_in_the_end_work_then_resume_finishes_it(bench, tmp_path):
    """Killed after the last point, while the model and the report are being made: the
    run is not "completed"; resume finishes the end work from the folder alone."""
    plan = tmp_path / "plan.toml"
    plan.write_text(plan_for(bench))
    out = tmp_path / "runs"
    env = unbuffered()
    proc = start_run(plan, out)

    def ending() -> bool:
        try:
            return bool(read_run(next(out.glob("*/run.json")).parent).get("finishing"))
        except (StopIteration, Exception):  # noqa: BLE001 - not there, or being replaced
            return False

    try:
        assert wait_for(ending, 120), "the end work never began"
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    run_dir = next(out.glob("*/run.json")).parent
    assert wait_for(lambda: read_run(run_dir).get("guardian") is not None, 20)
    killed = read_run(run_dir)
    assert killed["status"] == "interrupted" and killed["finishing"]["status"] == "completed"
    points = (run_dir / "points.csv").read_bytes()

    done = subprocess.run(pnbench("resume", str(run_dir)), capture_output=True, text=True,
                          env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    run = read_run(run_dir)
    assert run["status"] == "completed" and run["finishing"] is None
    assert (run_dir / "points.csv").read_bytes() == points  # nothing measured again
    assert "end work only, instruments not used" in (run_dir / "run.log").read_text()
    assert (run_dir / "report.html").exists() and (run_dir / "LH-ZL560.lib").exists()
    assert read_events(run_dir)[-1].kind == "run_finished"


def test_a_folder_killed_while_being_created_is_said_to_hold_nothing(tmp_path):
    """A kill in the first milliseconds leaves only the staging folder; resume of it says
    plainly that nothing was measured there (exit 2, no traceback)."""
    staging = tmp_path / ".pnbench-partial" / "20310405-060708_LH-ZL560.4242.1"
    staging.mkdir(parents=True)
    (staging / "plan.toml").write_text("# the plan\n")
    done = subprocess.run(pnbench("resume", str(staging)), capture_output=True, text=True,
                          timeout=60)
    assert done.returncode == 2 and "nothing was measured here" in done.stderr
    assert "Traceback" not in done.stderr
