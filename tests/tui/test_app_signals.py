"""The app in a real pseudo-terminal, losing it: a hung-up SSH link (SIGHUP) or a
SIGTERM during a sweep must stop the sweep, confirm the outputs off and end the
process, although Textual can no longer draw; and record the same status and reason as
a headless run given the same signal (tests/tui/test_cmd_run.py checks that side)."""

from __future__ import annotations

import json
import os
import pty
import signal
import sys
import time
from pathlib import Path

import pytest
from plantext import sweep_plan

from pnbench.sweeps.statuses import reason_for_signal, status_for_signal

PLAN = sweep_plan("LH-QT16-hup", 2000)

PATIENCE_S = 90.0


def _run_json(out: Path) -> dict | None:
    folders = sorted(out.glob("*/run.json")) if out.exists() else []
    if not folders:
        return None
    try:
        return json.loads(folders[0].read_text(encoding="utf-8"))
    except ValueError:
        return None  # being replaced right now


def _points(out: Path) -> int:
    files = sorted(out.glob("*/points.csv")) if out.exists() else []
    if not files:
        return 0
    return sum(1 for line in files[0].read_text().splitlines()
               if line and not line.startswith(("#", "step,")))


def _drain(fd: int) -> None:
    """Read what the app drew, so it never blocks on a full terminal."""
    try:
        while True:
            import select

            ready, _, _ = select.select([fd], [], [], 0)
            if not ready or not os.read(fd, 65536):
                return
    except OSError:
        return


@pytest.mark.parametrize("how", ["hangup", "sigterm"])
def test_losing_the_terminal_aborts_the_sweep_with_outputs_off(tmp_path, how):
    plan = tmp_path / "plan.toml"
    plan.write_text(PLAN, encoding="utf-8")
    out = tmp_path / "runs"
    argv = [sys.executable, "-m", "pnbench.tui.cli", "run", str(plan), "--simulate",
            "lh-qt16", "--time-scale", "1", "--out", str(out)]
    pid, fd = pty.fork()
    if pid == 0:  # the child: the app on the pseudo-terminal
        os.environ["TERM"] = "xterm-256color"
        os.execv(sys.executable, argv)
    try:
        deadline = time.monotonic() + PATIENCE_S
        while _points(out) < 5:
            assert time.monotonic() < deadline, "the sweep never started"
            _drain(fd)
            time.sleep(0.05)
        if how == "hangup":
            os.close(fd)  # the terminal goes away: the kernel sends SIGHUP
            fd = -1
        else:
            os.kill(pid, signal.SIGTERM)
        status = None
        while status is None:
            assert time.monotonic() < deadline, "the app did not end"
            if fd >= 0:
                _drain(fd)
            done, code = os.waitpid(pid, os.WNOHANG)
            if done:
                status = code
            time.sleep(0.05)
    finally:
        if fd >= 0:
            os.close(fd)
        try:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        except (ProcessLookupError, ChildProcessError):
            pass
    doc = _run_json(out)
    assert doc is not None
    signum = signal.SIGHUP if how == "hangup" else signal.SIGTERM
    assert doc["status"] == status_for_signal(signum) == "interrupted", doc
    assert doc["reason"] == reason_for_signal(signum), doc
    assert doc["outputs_off_confirmed"] is True
    assert _points(out) < 2000  # it really stopped early
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 4
