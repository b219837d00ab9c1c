"""Running pnbench as a separate process in tests (for kill -9 and signals), and polling
for what it writes."""

from __future__ import annotations

import os
import subprocess
import sys
import time


def pnbench(*args: str) -> list[str]:
    """The argv that runs this checkout's pnbench in a fresh interpreter."""
    return [sys.executable, "-m", "pnbench.tui.cli", *args]


def unbuffered() -> dict:
    """The environment of a child pnbench whose output is read as it comes."""
    return {**os.environ, "PYTHONUNBUFFERED": "1"}


def start_run(plan, out, *options: str) -> subprocess.Popen:
    """`pnbench run PLAN --headless --out OUT OPTIONS...` in its own process (stdout
    dropped, stderr piped for the message of a run that fails)."""
    return subprocess.Popen(pnbench("run", str(plan), "--headless", "--out", str(out),
                                    *options),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            env=unbuffered())


def wait_for(predicate, timeout_s: float) -> bool:
    """Poll `predicate()` every 5 ms until it holds (True) or the time runs out (False)."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.005)
    return False
