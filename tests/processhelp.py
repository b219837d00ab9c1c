"""Running pnbench as a separate process in tests (for kill -9 and signals), and polling
for what it writes."""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time


def pnbench(*args: str) -> list[str]:
    """The argv that runs this checkout's pnbench in a fresh interpreter."""
    return [sys.executable, "-m", "pnbench.tui.cli", *args]


def unbuffered() -> dict:
    """The environment of a child pnbench whose output is read as it comes."""
    return {**os.environ, "PYTHONUNBUFFERED": "1"}


def start_run(plan, out, *options: str) -> subprocess.Popen:
    """`pnbench run PLAN --headless --out OUT OPTIONS...` in its own process (stdout
    dropped; stderr, where headless progress goes, into an unnamed temporary file kept as
    ``proc.stderr_file`` for the message of a run that fails). Not a pipe: nobody reads
    it while the run goes on, and a run that filled a pipe's buffer with progress lines
    would block on its next write (a long run over temperature on a loaded machine)."""
    err = tempfile.TemporaryFile()
    proc = subprocess.Popen(pnbench("run", str(plan), "--headless", "--out", str(out),
                                    *options),
                            stdout=subprocess.DEVNULL, stderr=err, env=unbuffered())
    proc.stderr_file = err  # type: ignore[attr-defined]
    return proc


def wait_for(predicate, timeout_s: float) -> bool:
    """Poll `predicate()` every 5 ms until it holds (True) or the time runs out (False)."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.005)
    return False
