"""Questions the runner asks the operator on a terminal (a fixture state to confirm).

The runner emits an ``operator_prompt`` event and waits for `Launch.answer`. On the
command line `TerminalOperator` asks on the terminal: its bus listener only starts a
thread, which holds the progress display, prints the question and reads the answer from
standard input. `refuse_without_terminal` is the check before a headless run: a plan
that needs the operator cannot run where nobody can be asked.
"""

from __future__ import annotations

import sys
import threading

from pnbench.errors import BadInput
from pnbench.sweeps import events as ev

YES = ("y", "yes")


def needs_operator(plan) -> bool:
    """Whether the plan's run will ask the operator to confirm something."""
    correction = getattr(plan, "correction", None)
    return correction is not None and not correction.confirmed


def refuse_without_terminal(plan, stdin=None) -> None:
    """BadInput (exit 2) when the plan needs the operator and stdin is not a terminal."""
    if not needs_operator(plan):
        return
    stdin = sys.stdin if stdin is None else stdin
    try:
        tty = stdin is not None and stdin.isatty()
    except (AttributeError, ValueError, OSError):
        tty = False
    if not tty:
        raise BadInput(
            f"plan {plan.path}: [lcr_correction] asks the operator to set and confirm each "
            "fixture state (open, short), and standard input is not a terminal, so nobody "
            "can be asked. Run it on a terminal or in the app, or, when the fixture states "
            "are prepared for an unattended run, add  confirmed = true  to [lcr_correction]")


class TerminalOperator:
    """Answers the runner's operator prompts from the terminal."""

    def __init__(self, launch, hold: threading.Event | None = None, stdin=None,
                 stream=None) -> None:
        self.launch = launch
        self.hold = hold  # set while asking: the progress display stays still
        self.stdin = stdin
        self.stream = stream

    def listener(self, event) -> None:
        if isinstance(event, ev.OperatorPrompt):
            threading.Thread(target=self._ask, args=(event.message,),
                             name="pnbench-operator", daemon=True).start()

    def _ask(self, message: str) -> None:
        stdin = self.stdin or sys.stdin
        stream = self.stream or sys.stderr
        if self.hold is not None:
            self.hold.set()
        try:
            stream.write(f"\n{message}\nContinue? [y = yes, anything else stops the run] ")
            stream.flush()
            line = stdin.readline()
        except (OSError, ValueError):
            line = ""
        finally:
            if self.hold is not None:
                self.hold.clear()
        self.launch.answer(line.strip().lower() in YES)
