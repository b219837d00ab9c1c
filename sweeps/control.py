"""Operator control of a run: pause, resume and abort, asked from any thread.

The runner polls `Control` between points: `check()` raises OperatorStop once an abort
was asked; `wait_while_paused()` blocks until resumed (or aborted); `sleep()` waits a
settle time but wakes at once on abort. `ask()` waits for the operator's answer to a
question (a fixture state to confirm) that any thread gives with `answer()`. Nothing here
touches an instrument.
"""

from __future__ import annotations

import threading

from pnbench.errors import OperatorStop


class Control:
    def __init__(self) -> None:
        self._pause = threading.Event()
        self._aborted = threading.Event()
        self.abort_request: tuple[str, str] | None = None  # (reason, run status)
        self._answered = threading.Event()
        self._answer = False
        self.question: str | None = None  # the question waiting for an answer

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

    def ask(self, question: str, announce=None) -> bool:
        """Wait until the operator answers ``question`` (True: go on); OperatorStop on
        abort. ``announce()`` tells the operator (an event); it is called once the
        question is open, so an answer that comes at once is not lost."""
        self._answer = False
        self._answered.clear()
        self.question = question
        try:
            if announce is not None:
                announce()
            while not self._answered.is_set():
                self.check()
                self._answered.wait(0.1)
            self.check()
            return self._answer
        finally:
            self.question = None

    def answer(self, ok: bool) -> None:
        """The operator's answer to the question waiting (ignored when none is)."""
        if self.question is not None:
            self._answer = bool(ok)
            self._answered.set()
