"""Signals at the edges of a headless run: a SIGTERM, SIGHUP or Ctrl-C while the report is
written is reported and the folder still completes (exit 4); a run started under nohup
(SIGHUP ignored, POSIX `nohup` utility) survives a hang-up and completes."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time

import pytest
from plantext import forward, limits, plan_text

from pnbench.sweeps.store import read_points, read_run
from pnbench.tui.cli import main


def _plan(tmp_path, points: int) -> str:
    path = tmp_path / "plan.toml"
    text = plan_text(forward(start="0.2 V", stop="0.75 V", points=points, compliance="50 mA"),
                     device="LH-ZL560",
                     limits=limits(max_reverse_voltage="8 V", max_power="100 mW"))
    path.write_text(text, encoding="utf-8")
    return str(path)


@pytest.mark.parametrize("signals", [[signal.SIGTERM], [signal.SIGHUP],
                                     [signal.SIGINT, signal.SIGINT]])
def test_signal_during_the_report_finishes_the_folder_and_exits_4(
        tmp_path, capfd, monkeypatch, signals):
    import pnbench.tui.report as report

    original = report.write_report
    seen = []

    def interrupted(run_dir, *args, **kwargs):
        for signum in signals:
            os.kill(os.getpid(), signum)
            time.sleep(0.05)  # the handler runs on this (the main) thread meanwhile
        seen.append(run_dir)
        return original(run_dir, *args, **kwargs)

    monkeypatch.setattr(report, "write_report", interrupted)
    out = tmp_path / "runs"
    code = main(["run", _plan(tmp_path, 12), "--simulate", "lh-zl560", "--time-scale", "0",
                 "--headless", "--out", str(out)])
    err = capfd.readouterr().err
    assert code == 4, err
    assert seen, "the report was started"
    run_dir = next(out.iterdir())
    assert (run_dir / "report.html").is_file()
    run = read_run(run_dir)
    assert run["status"] == "completed" and run["outputs_off_confirmed"] is True
    assert len(read_points(run_dir)) == 12
    assert "finishing it first" in err and "Traceback" not in err
    # the handlers are gone with the command: this process has its own again
    assert signal.getsignal(signal.SIGTERM) == signal.SIG_DFL


def _wait_points(out, count: int, proc, deadline: float) -> None:
    while time.monotonic() < deadline:
        files = list(out.glob("*/points.csv"))
        if files and sum(1 for line in files[0].read_text().splitlines()
                         if line[:1].isalpha() and not line.startswith("step,")) >= count:
            return
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.02)
    raise AssertionError("the run never reached its points")


def _ignore_hangup() -> None:
    signal.signal(signal.SIGHUP, signal.SIG_IGN)


@pytest.mark.parametrize("how", ["nohup", "ignored"])
def test_a_run_under_nohup_survives_a_hangup(tmp_path, how):
    """The README's overnight advice: `nohup pnbench run ... --headless` goes on when the
    SSH session closes (the kernel sends SIGHUP to the session)."""
    out = tmp_path / "runs"
    argv = [sys.executable, "-m", "pnbench.tui.cli", "run", _plan(tmp_path, 90), "--simulate",
            "lh-zl560", "--time-scale", "1", "--headless", "--no-report", "--out", str(out)]
    if how == "nohup":
        nohup = shutil.which("nohup")
        if nohup is None:
            pytest.skip("no nohup utility on this system")
        proc = subprocess.Popen([nohup, *argv], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True, cwd=tmp_path)
    else:
        proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                text=True, preexec_fn=_ignore_hangup)
    try:
        _wait_points(out, 5, proc, time.monotonic() + 60)
        proc.send_signal(signal.SIGHUP)
        _, stderr = proc.communicate(timeout=90)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, stderr
    run_dir = next(out.iterdir())
    run = read_run(run_dir)
    assert run["status"] == "completed" and run["outputs_off_confirmed"] is True
    assert len(read_points(run_dir)) == 90
