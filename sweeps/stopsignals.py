"""Signals that end a run gracefully: SIGTERM, SIGHUP and Ctrl-C (SIGINT).

    with stop_on_signals(launch):
        launch.run()

A signal only asks the runner to stop (`abort`): the runner finishes the point in hand,
ramps the source down, turns every output off, confirms it and records why. SIGTERM and
SIGHUP (the terminal or SSH session went away) record status ``interrupted``; Ctrl-C
records ``aborted`` (the operator). A second Ctrl-C raises KeyboardInterrupt to cut a
long wait short, except while the outputs are being switched off, which nothing
interrupts. Handlers are installed only on the main thread and restored on exit.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator

_NAMES = {signal.SIGTERM: "SIGTERM", signal.SIGINT: "Ctrl-C (SIGINT)"}
if hasattr(signal, "SIGHUP"):
    _NAMES[signal.SIGHUP] = "SIGHUP (terminal or SSH session closed)"


@contextlib.contextmanager
def stop_on_signals(target) -> Iterator[None]:
    """``target`` has ``abort(reason, status)`` and ``in_shutdown`` (Launch, Runner)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    count = {"int": 0}

    def handler(signum, _frame) -> None:
        name = _NAMES.get(signum, f"signal {signum}")
        if signum == signal.SIGINT:
            count["int"] += 1
            if count["int"] > 1 and not getattr(target, "in_shutdown", False):
                raise KeyboardInterrupt
            target.abort(f"stopped by the operator ({name})", "aborted")
        else:
            target.abort(f"stopped by {name}", "interrupted")

    previous = {}
    for signum in _NAMES:
        with contextlib.suppress(ValueError, OSError):
            previous[signum] = signal.signal(signum, handler)
    try:
        yield
    finally:
        for signum, old in previous.items():
            with contextlib.suppress(ValueError, OSError):
                signal.signal(signum, old)
