"""Running pnbench as a separate process in tests (for kill -9 and signals), and polling
for what it writes."""

from __future__ import annotations

import sys
import time


def pnbench(*args: str) -> list[str]:
    """The argv that runs this checkout's pnbench in a fresh interpreter."""
    return [sys.executable, "-m", "pnbench.tui.cli", *args]


def wait_for(predicate, timeout_s: float) -> bool:
    """Poll `predicate()` every 5 ms until it holds (True) or the time runs out (False)."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.005)
    return False
