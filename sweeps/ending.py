"""The end of a run, in the one order that leaves an honest folder at any instant.

    outputs off (the runner's finally) -> final fit -> model.json and the card ->
    report -> run.json's status -> the run_finished event

While the end work runs, run.json keeps its live status and says what it will end with
under ``finishing`` ({"status", "reason"}); only when model, card and report are written
does the status turn to that final word. A process killed during the end work therefore
leaves a run that is not completed, and `pnbench resume` finishes its end work from the
folder alone (`Launch` sees every step finished and never opens the instruments).

Each file is replaced atomically by the run record. A failing fit or report is a warning:
the run's data are safe already, and `pnbench report RUN_DIR` makes the report later.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from pnbench.sweeps.events import EventBus, RunFinished, WarningEvent
from pnbench.sweeps.record import RunFolder, iso, utc_now

#: What the front end passes to write the report: run folder -> report path (or None).
ReportWriter = Callable[[Path], object]


def begin_end_work(folder: RunFolder, status: str, reason: str, **changes) -> None:
    """Record what the run will end with, before the end work starts."""
    folder.update_run(finishing={"status": str(status), "reason": reason}, **changes)


def finish_run(folder: RunFolder, bus: EventBus, *, status: str, reason: str,
               outputs_off_confirmed: bool, fit=None,
               write_report: ReportWriter | None = None, done: int | None = None,
               planned: int | None = None) -> None:
    """Final fit, model and card (through ``fit.finish()``), report, then the status and
    the run_finished event."""
    if fit is not None:
        try:
            fit.finish()
        except Exception as exc:  # noqa: BLE001 - the run's data are safe already
            folder.log(f"final fit failed: {exc!r}")
            bus.emit(WarningEvent, None, message=f"the final fit failed: {exc}")
    if write_report is not None:
        try:
            path = write_report(folder.path)
        except Exception as exc:  # noqa: BLE001 - never lose a run over its report
            bus.emit(WarningEvent, None, message=f"the report could not be written "
                     f"({type(exc).__name__}: {exc}); the run folder is complete, try "
                     f"`pnbench report {folder.path}`")
        else:
            if path is not None:
                folder.log(f"report written: {path}")
    folder.update_run(status=str(status), reason=reason, ended=iso(utc_now()),
                      outputs_off_confirmed=outputs_off_confirmed, finishing=None)
    folder.log(f"{status}: {reason}; outputs off confirmed: {outputs_off_confirmed}")
    bus.emit(RunFinished, None, status=str(status), reason=reason,
             outputs_off_confirmed=outputs_off_confirmed, done=done, planned=planned)
    folder.sync()
