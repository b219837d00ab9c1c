"""A sweep owned by the app: the engine's Launch on its own thread, seen through a queue.

`LiveRun` wraps `sweeps.launch.Launch` (the same path `pnbench run` takes, so the run
folder is the same either way) with a listener that only puts events on a queue, and
offers pause, resume and abort. The app drains the queue on a UI timer; nothing here
touches Textual, and the calls the UI thread makes (drain, the control flags) return at
once.
"""

from __future__ import annotations

import queue
import threading
from pathlib import Path


def _write_report(run_dir: Path) -> Path:
    """The engine's end-of-run report hook (the same report `pnbench run` writes)."""
    from pnbench.tui.report import write_report

    return write_report(run_dir)


class LiveRun:
    """One run of a plan by this app. Construct, `start()`, then drain and control."""

    def __init__(self, plan, *, out_dir: str | Path = "runs", report: bool = True):
        """``plan`` names its instruments, real or the simulated bench (as a backend)."""
        from pnbench.sweeps.launch import Launch

        self.plan = plan
        self.events: queue.SimpleQueue = queue.SimpleQueue()
        self.launch = Launch.new(plan, out_dir=out_dir, listeners=[self.events.put],
                                 write_report=_write_report if report else None)
        self._sim = None
        self._error_reported = False
        self._lock = threading.Lock()

    # -- lifecycle ------------------------------------------------------------------------
    def start(self) -> None:
        """Start the run on the engine's thread (connecting happens there)."""
        self.launch.start()

    @property
    def run_dir(self) -> Path | None:
        return self.launch.run_dir

    @property
    def running(self) -> bool:
        return self.launch.is_alive()

    @property
    def in_shutdown(self) -> bool:
        return bool(self.launch.in_shutdown)

    def pause(self) -> None:
        self.launch.pause()

    def resume(self) -> None:
        self.launch.resume()

    def abort(self, reason: str = "aborted by the operator from the app",
              status: str = "aborted") -> None:
        self.launch.abort(reason, status)

    def answer(self, ok: bool) -> None:
        """The operator's answer to the run's operator_prompt (a fixture state set)."""
        self.launch.answer(ok)

    def wait(self, timeout_s: float | None = None) -> bool:
        return self.launch.wait(timeout_s)

    def close(self, timeout_s: float = 60.0) -> None:
        """Abort if still running and wait for the ramp-down and the outputs-off check.
        Safe to call twice and from any thread."""
        if self.launch.is_alive():
            self.abort("the app is closing")
        self.launch.wait(timeout_s)

    # -- reading (UI thread) ---------------------------------------------------------------
    def drain(self, limit: int = 20000) -> list:
        """The typed events (`sweeps.events`) that arrived since the last call."""
        out = []
        for _ in range(limit):
            try:
                out.append(self.events.get_nowait())
            except queue.Empty:
                break
        return out

    def failure(self) -> str | None:
        """The error that ended the run thread, once (None while running or if none)."""
        if self.launch.is_alive() or self._error_reported or self.launch.error is None:
            return None
        self._error_reported = True
        return str(self.launch.error)

    def outputs(self) -> dict[str, bool] | None:
        """The simulated bench's own word on its outputs (None with real instruments)."""
        bench = self.launch.bench
        if bench is not None and getattr(bench, "sim", None) is not None:
            self._sim = bench.sim  # keep it: it still answers after the run closed it
        if self._sim is None:
            return None
        try:
            return {str(k): bool(v) for k, v in dict(self._sim.outputs()).items()}
        except Exception:  # noqa: BLE001 - a bench that never opened has no outputs
            return None
