"""Signals that end a run gracefully: SIGTERM, SIGHUP and Ctrl-C (SIGINT).

    with stop_on_signals(launch) as signals:
        launch.run()
        write_report(...)          # the end work: still under the same handlers
    code = signals.exit_code(outcome.exit_code)

A signal only asks the runner to stop (`abort`): the runner finishes the point in hand,
ramps the source down, turns every output off, confirms it and records why. SIGTERM and
SIGHUP (the terminal or SSH session went away) record status ``interrupted``; Ctrl-C
records ``aborted`` (the operator): `statuses.status_for_signal`, the rule the app follows
too. A second Ctrl-C raises KeyboardInterrupt to cut a
long wait short, except while the outputs are being switched off or the run folder is
being finished (final fit, model, card, report), which nothing interrupts: a signal then
is reported on stderr (written straight to the file descriptor: a handler must not
take a lock the interrupted code may hold) and the process ends with exit code 4 once
the folder is complete.

The handlers stay for the whole block, so the caller keeps the end work inside it; they
are restored when the block ends (the command is returning its exit code). A signal that
was ignored when the block began stays ignored: ``nohup`` (and ``trap '' HUP``) set
SIGHUP to SIG_IGN, and a run started that way must survive its terminal going away.
Handlers are installed only on the main thread.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator

from pnbench.sweeps.statuses import SIGNAL_NAMES as _NAMES
from pnbench.sweeps.statuses import reason_for_signal, status_for_signal


def signal_name(signum: int) -> str:
    return _NAMES.get(signum, f"signal {signum}")


class Signals:
    """What the handlers saw: the signals received, and whether any came in the end work."""

    def __init__(self, target) -> None:
        self.target = target
        self.received: list[str] = []
        self.late: list[str] = []
        self.ignored: list[str] = []  # signals left ignored (nohup)
        self.ending = False  # set by the caller once the run itself has ended
        self._ints = 0

    def end_work(self) -> None:
        """The run has ended; what follows (report, ...) must not be cut short."""
        self.ending = True

    @property
    def stopped(self) -> bool:
        return bool(self.received)

    def exit_code(self, code: int) -> int:
        """The command's exit code: 4 when a stop signal came, whatever the run did."""
        return 4 if self.received and code == 0 else code

    def _in_shutdown(self) -> bool:
        return self.ending or bool(getattr(self.target, "in_shutdown", False))

    def handle(self, signum, _frame) -> None:
        name = signal_name(signum)
        self.received.append(name)
        if self._in_shutdown():
            message = (f"got {name} while the outputs go off and the run folder is "
                       "finished; finishing it first, then exiting with code 4")
            self.late.append(name)
            with contextlib.suppress(OSError, ValueError):
                os.write(2, f"pnbench: {message}\n".encode())
            if not self.ending:
                self._abort(signum, name)  # harmless if the runner already ended
            return
        if signum == signal.SIGINT:
            self._ints += 1
            if self._ints > 1:
                raise KeyboardInterrupt
        self._abort(signum, name)

    def _abort(self, signum, name: str) -> None:
        self.target.abort(reason_for_signal(signum), status_for_signal(signum))


def ignored(signum: int) -> bool:
    """Whether ``signum`` is ignored in this process (nohup does that to SIGHUP)."""
    try:
        return signal.getsignal(signum) == signal.SIG_IGN
    except (ValueError, OSError):
        return False


@contextlib.contextmanager
def stop_on_signals(target) -> Iterator[Signals]:
    """``target`` has ``abort(reason, status)`` and ``in_shutdown`` (Launch, Runner)."""
    signals = Signals(target)
    if threading.current_thread() is not threading.main_thread():
        yield signals
        return
    previous = {}
    for signum in _NAMES:
        if ignored(signum):
            signals.ignored.append(signal_name(signum))
            continue
        with contextlib.suppress(ValueError, OSError):
            previous[signum] = signal.signal(signum, signals.handle)
    try:
        yield signals
    finally:
        for signum, old in previous.items():
            with contextlib.suppress(ValueError, OSError):
                signal.signal(signum, old)
