"""How the app ends: the exit code of the sweep it owned, and what happens when the
terminal goes away (SIGHUP when an SSH link drops, or SIGTERM) in the middle of a sweep.

A dropped terminal can leave Textual's main thread blocked writing to it, so the signal
handler does not rely on the app: it tells the runner to abort (a flag, returns at once)
and starts a guard thread that waits for the runner to ramp down and confirm the outputs
off, gives the app a moment to exit normally, and otherwise ends the process itself.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
import time

from pnbench.errors import PnbenchError
from pnbench.sweeps.statuses import (
    ExitCode,
    RunStatus,
    exit_code_for,
    reason_for_signal,
    status_for_signal,
)

#: Seconds the hang-up guard waits for the sweep's ramp-down and off check, then for the
#: app's own exit, before it ends the process itself.
HANGUP_RUN_WAIT_S = 120.0
HANGUP_EXIT_WAIT_S = 3.0
#: Seconds the guard waits for a report being written when the signal came (the folder
#: is finished before the process ends).
HANGUP_REPORT_WAIT_S = 600.0


def safe_exit_on_signals(app) -> dict:
    """On SIGHUP and SIGTERM: abort the sweep this app owns (the runner ramps down and
    turns every output off) and end the app. A signal ignored on entry (SIGHUP under
    nohup) stays ignored. Returns the previous handlers."""
    previous = {}

    def handler(signum, _frame) -> None:
        if app._closing:
            with contextlib.suppress(OSError):  # not print: the handler may interrupt it
                os.write(2, f"pnbench: got {signal.Signals(signum).name} again; the sweep "
                         "is already ending with its outputs off\n".encode())
            return
        app._closing = True
        app.stopped_by_signal = signal.Signals(signum).name
        live = app.live
        if live is not None and live.running:
            # the same status and reason as a headless run given the same signal
            live.abort(reason_for_signal(signum), status_for_signal(signum))
        threading.Thread(target=_hangup_guard, args=(app, live), daemon=True,
                         name="pnbench-hangup").start()
        with contextlib.suppress(Exception):
            app.call_later(app.exit, None, 4)

    for sig in (signal.SIGHUP, signal.SIGTERM):
        if signal.getsignal(sig) == signal.SIG_IGN:
            continue  # nohup: a hang-up must not end the sweep
        try:
            previous[sig] = signal.signal(sig, handler)
        except (ValueError, OSError):  # not the main thread
            pass
    return previous


def _hangup_guard(app, live) -> None:
    if live is not None:
        # the runner's ramp-down, outputs off, then its end work (report included)
        live.wait(HANGUP_RUN_WAIT_S + HANGUP_REPORT_WAIT_S)
    deadline = time.monotonic() + HANGUP_EXIT_WAIT_S
    while time.monotonic() < deadline:
        if not app.is_running:
            return  # the app ended by itself; run_app finishes the job
        time.sleep(0.05)
    os._exit(4)  # the terminal is gone and the app cannot draw its way out


def exit_code(app, code: object = 0) -> int:
    """The exit code (README, "Commands") for the last sweep the app owned (as `pnbench run`
    gives it), or the app's own code when it ran none."""
    live = app.live
    if live is not None:
        outcome = getattr(live.launch, "outcome", None)
        if outcome is not None:
            if outcome.exit_code == 0 and getattr(app, "stopped_by_signal", None):
                return 4  # SIGHUP or SIGTERM came while the run folder was finished
            return int(outcome.exit_code)
        error = getattr(live.launch, "error", None)
        if isinstance(error, PnbenchError):
            return int(error.exit_code)
        if error is not None:
            return 1
    if app.state.status in (RunStatus.ABORTED, RunStatus.SAFETY_STOP, RunStatus.INTERRUPTED,
                            RunStatus.FAILED):
        return int(exit_code_for(app.state.status))
    return int(code or 0) if isinstance(code, int) else int(ExitCode.OK)


def finish_end_work(app) -> None:
    """After the app has ended: its last sweep's end work (final fit, model, card and the
    report, which the engine writes before the status, `sweeps.ending`) is waited for, so
    the folder is complete before the process ends. Called while the signal handlers are
    still in place."""
    live = app.live
    if live is not None:
        live.wait(HANGUP_REPORT_WAIT_S)
