"""Operator control of a run: pause, resume and abort, asked from any thread.

The runner polls `Control` between points: `check()` raises OperatorStop once an abort
was asked; `wait_while_paused()` blocks until resumed (or aborted); `sleep()` waits a
settle time but wakes at once on abort. Nothing here touches an instrument.
"""

from __future__ import annotations

import threading

from pnbench.errors import OperatorStop


class Control:
    def __init__(self) -> None:
        self._pause = threading.Event()
        self._aborted = threading.Event()
        self.abort_request: tuple[str, str] | None = None  # (reason, run status)

    def pause(self) -> None:
        self._pause.set()

    def resume(self) -> None:
        self._pause.clear()

    def abort(self, reason: str = "stopped by the operator", status: str = "aborted") -> None:
        if self.abort_request is None:
            self.abort_request = (reason, status)
        self._aborted.set()

    @property
    def paused(self) -> bool:
        return self._pause.is_set()

    @property
    def status(self) -> str:
        """The run status an abort asks for ("aborted" or "interrupted")."""
        return self.abort_request[1] if self.abort_request else "aborted"

    def check(self) -> None:
        if self.abort_request is not None:
            raise OperatorStop(self.abort_request[0])

    def wait_while_paused(self) -> None:
        while self._pause.is_set() and self.abort_request is None:
            self._aborted.wait(0.1)
        self.check()

    def sleep(self, seconds: float) -> None:
        self._aborted.wait(seconds)
        self.check()
