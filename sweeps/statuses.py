"""Statuses of a run and of its steps, and the exit codes they end in: the one place.

Both are string enums, so they compare equal to the words run.json and events.jsonl hold
(``RunStatus.COMPLETED == "completed"``) and serialise as those words.

How a signal ends a run is decided here too (`status_for_signal`), so the headless
command, the app and `resume` record the same status for the same signal:

- Ctrl-C (SIGINT) is the operator at the keyboard: ``aborted``;
- SIGTERM and SIGHUP come from outside the program (a closed terminal or SSH session,
  a service manager, ``kill``): ``interrupted``.

Both end in exit code 4 (stopped by the operator or a safety stop).
"""

from __future__ import annotations

import enum
import signal


class RunStatus(enum.StrEnum):
    """``run.json``'s ``status`` and the ``run_finished`` event's."""

    RUNNING = "running"
    PAUSED = "paused"
    COMPLETED = "completed"
    ABORTED = "aborted"
    SAFETY_STOP = "safety_stop"
    FAILED = "failed"
    INTERRUPTED = "interrupted"

    @property
    def final(self) -> bool:
        """Nothing more will happen in the run (it may still be resumed)."""
        return self not in (RunStatus.RUNNING, RunStatus.PAUSED)


class StepStatus(enum.StrEnum):
    """A step's status in run.json and its ``step_finished`` event."""

    PENDING = "pending"
    RUNNING = "running"
    DONE = "done"  # every planned point taken
    LIMIT = "limit"  # ended early by a guard (breakdown, power, compliance storm)
    SETTLED = "settled"  # ended early: its fit had settled
    INTERRUPTED = "interrupted"  # the run stopped in it; a resume continues it
    FAILED = "failed"  # an instrument fault ended it (and the run)

    @property
    def finished(self) -> bool:
        """The step takes no more points (done, or ended early as designed)."""
        return self in STEP_FINISHED


#: Step statuses after which a step takes no more points.
STEP_FINISHED = frozenset({StepStatus.DONE, StepStatus.LIMIT, StepStatus.SETTLED})

#: Run statuses after which nothing more will happen in this process.
RUN_FINAL = frozenset(s for s in RunStatus if s.final)


class ExitCode(enum.IntEnum):
    """Exit codes of every pnbench command (the `pnbench.errors` family carries the
    same numbers as ``exit_code``)."""

    OK = 0
    INTERNAL = 1
    BAD_INPUT = 2
    INSTRUMENT = 3
    STOPPED = 4  # by the operator, a signal or a safety limit


def step_finished(status: object) -> bool:
    """Whether a step status (an enum or the word from a file) means no more points."""
    return str(status) in STEP_FINISHED


def run_status(value: object, default: RunStatus = RunStatus.FAILED) -> RunStatus:
    """A run status from a file's word; `default` for a word this version does not know."""
    try:
        return RunStatus(str(value))
    except ValueError:
        return default


def exit_code_for(status: object, outputs_off_confirmed: bool = True) -> ExitCode:
    """The exit code of a run that ended with `status`. A completed run whose outputs
    could not be confirmed off is an instrument problem (3)."""
    match run_status(status, RunStatus.FAILED):
        case RunStatus.COMPLETED:
            return ExitCode.OK if outputs_off_confirmed else ExitCode.INSTRUMENT
        case RunStatus.FAILED:
            return ExitCode.INSTRUMENT
        case RunStatus.SAFETY_STOP | RunStatus.ABORTED | RunStatus.INTERRUPTED:
            return ExitCode.STOPPED
        case _:
            return ExitCode.INTERNAL


#: How each stopping signal names itself in a run's reason.
SIGNAL_NAMES = {signal.SIGTERM: "SIGTERM", signal.SIGINT: "Ctrl-C (SIGINT)"}
if hasattr(signal, "SIGHUP"):
    SIGNAL_NAMES[signal.SIGHUP] = "SIGHUP (terminal or SSH session closed)"


def status_for_signal(signum: int) -> RunStatus:
    """The run status a stopping signal records, whichever front end ran the sweep."""
    return RunStatus.ABORTED if signum == signal.SIGINT else RunStatus.INTERRUPTED


def reason_for_signal(signum: int) -> str:
    """The run's ``reason`` for a stopping signal."""
    name = SIGNAL_NAMES.get(signum, f"signal {signum}")
    if signum == signal.SIGINT:
        return f"stopped by the operator ({name})"
    return f"stopped by {name}"
