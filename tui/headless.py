"""Headless progress: bars with ETA and live parameters on a terminal, plain lines in a log.

`Progress(plan)` offers `listener` for the event bus (it only queues the event) and a
drawing thread started by `start()`. On a terminal the block of bars is redrawn in place
four times a second, with limits, warnings and errors printed above it as they come; when
the output is not a terminal (a log file, a pipe) it writes one timestamped line per
happening and a progress line every `LINE_INTERVAL_S`. A closed terminal (SSH gone) stops
the output quietly: the run goes on and its folder keeps everything.

Done, planned and the ETA come from the shared progress model (`sweeps.progress`), the
same the app and `watch` show; events are dispatched on their class.
"""

from __future__ import annotations

import collections
import sys
import threading
import time
from pathlib import Path

from pnbench.modeling.params import UNITS
from pnbench.sweeps import events as ev
from pnbench.sweeps.progress import ProgressModel, format_duration
from pnbench.sweeps.quantities import format_estimate, format_quantity
from pnbench.tui.app.words import guard_words, status_words
from pnbench.tui.stagelines import stage_line, temperature_text

__all__ = ["Progress", "bar", "format_duration", "format_parameter", "leakage_text",
           "run_headless"]

LINE_INTERVAL_S = 15.0
REDRAW_S = 0.25
BAR = 24


def set_point_of(plan, step: str | None) -> float | None:
    """The stage set point a step of a run over temperature runs at (None otherwise)."""
    try:
        return plan.step(step).set_point_K if plan is not None and step else None
    except (KeyError, AttributeError):
        return None


def format_parameter(name: str, entry: dict) -> str:
    value, sigma = entry.get("value"), entry.get("sigma")
    if value is None:
        return f"{name} = ?"
    # CFIX, RFIX: the fixture's capacitance and series resistance (the bench's)
    unit = {"CFIX": "F", "RFIX": "ohm"}.get(name) or UNITS.get(name, "")
    text = format_estimate(value, sigma, unit)
    if sigma is not None and value:
        text += f" ±{abs(sigma / value):.1%}"
    label = f"fixture {name}" if name in ("CFIX", "RFIX") else name
    return f"{label} = {text}{' ✓' if entry.get('settled') else ''}"


def first_clause(message: str) -> str:
    """A fit message up to its first "; " outside parentheses (the short reason)."""
    depth = 0
    for k, ch in enumerate(message):
        depth += {"(": 1, ")": -1}.get(ch, 0)
        if depth == 0 and message.startswith("; ", k):
            return message[:k]
    return message


def leakage_text(leak: dict) -> str:
    """'leakage 1.2 pA ±3.0% at -5 V', or an upper bound when the reading is within two
    standard errors of zero (the current is below what the instrument resolves)."""
    value, sigma, volts = leak.get("current_A"), leak.get("sigma_A"), leak.get("voltage_V")
    at = f" at {format_quantity(volts, 'V', 3)}" if volts is not None else ""
    if value is None:
        return "leakage not determined"
    if sigma is not None and abs(value) <= 2 * sigma:
        return f"leakage below {format_quantity(abs(value) + 2 * sigma, 'A', 2)}{at}"
    text = f"leakage {format_quantity(value, 'A', 3)}"
    if sigma is not None and value:
        text += f" ±{abs(sigma / value):.1%}"
    return text + at


def misfit_text(figure: dict | None) -> str:
    """A few words when a fit's lack-of-fit checks fail ('' otherwise): against the
    stated noise (chi-square) or from the runs test on residual signs."""
    if not isinstance(figure, dict) or not figure.get("misfit"):
        return ""
    parts = []
    if figure.get("reduced_chi2") is not None:
        parts.append(f"chi2/dof {figure['reduced_chi2']:.3g} vs stated noise")
    if figure.get("runs_z") is not None:
        parts.append(f"runs z {figure['runs_z']:+.1f}")
    return "MISFIT" + (f" ({', '.join(parts)})" if parts else "")


def bar(done: int, planned: int, width: int = BAR) -> str:
    frac = 0.0 if planned <= 0 else min(1.0, done / planned)
    full = int(round(frac * width))
    return "[" + "#" * full + "-" * (width - full) + "]"


class Progress:
    def __init__(self, plan, stream=None, tty: bool | None = None) -> None:
        self.stream = stream or sys.stdout
        self.tty = self.stream.isatty() if tty is None else tty
        self.plan = plan
        self.model = ProgressModel()
        self.model.set_plan([(s.name, s.kind, s.planned) for s in plan.steps])
        self.params: dict[str, dict] = {}
        self.fits: dict[str, object] = {}  # step -> its latest fit event
        self._queue: collections.deque = collections.deque()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._drawn = 0
        self._last_line = 0.0
        self._broken = False
        self.current: str | None = None
        self.run_dir = ""
        self.hold = threading.Event()  # set while the operator is asked a question

    # -- bus side ---------------------------------------------------------------------
    def listener(self, event) -> None:
        self._queue.append(event)

    # -- drawing thread ---------------------------------------------------------------
    def start(self) -> None:
        self._thread = threading.Thread(target=self._loop, name="pnbench-progress",
                                        daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5)
        self._drain()
        if self.tty:
            self._redraw(final=True)

    def _loop(self) -> None:
        while not self._stop.wait(REDRAW_S):
            if self.hold.is_set():
                continue
            self._drain()
            if self.tty:
                self._redraw()
            elif time.monotonic() - self._last_line >= LINE_INTERVAL_S and self.current:
                self._progress_line()

    def _drain(self) -> None:
        """Apply the queued events in order; a run of points of one step goes to the
        progress model at once (one batch per step a quarter second: per point, its
        numpy bookkeeping would cost the acquisition thread the interpreter lock)."""
        times: list[float] = []
        last: ev.PointTaken | None = None
        while self._queue:
            e = self._queue.popleft()
            if isinstance(e, ev.PointTaken):
                if last is not None and e.step != last.step:
                    self.model.add_points(last.step or "", times, index=last.index)
                    times = []
                times.append(e.time_s)
                last = e
                continue
            if last is not None:
                self.model.add_points(last.step or "", times, index=last.index)
                times, last = [], None
            self._apply(e)
        if last is not None:
            self.model.add_points(last.step or "", times, index=last.index)

    @property
    def steps(self):
        """Progress per step (`sweeps.progress.StepProgress`)."""
        return self.model.steps

    def _apply(self, e: ev.Event) -> None:
        self.model.apply(e)
        step = e.step
        match e:
            case ev.PointTaken():
                return
            case ev.RunStarted():
                self.say(f"run {'resumed' if e.resumed else 'started'}: "
                         f"{e.planned} points in {len(self.steps)} steps"
                         + (f", {e.done} already on disk" if e.done else ""))
            case ev.StepStarted():
                self.current = step
                at = set_point_of(self.plan, step)
                self.say(f"step {step} ({e.step_kind}): {e.planned} points"
                         + (f" at {temperature_text(at)}" if at is not None else "")
                         + (f", continuing at point {e.done}" if e.done else ""))
            case ev.StepFinished():
                why = f", ended by {guard_words(e.ended_by)}" if e.ended_by else ""
                self.say(f"step {step} finished ({e.status}{why}): {e.done}/{e.planned} "
                         "points")
            case ev.Fit():
                self.params[step] = e.parameters or {}
                self.fits[step] = e
                if e.final:  # the step's last fit comes after its step_finished
                    self.say(f"fit {step}: " + self.param_text(step))
            case ev.Limit() | ev.WarningEvent() | ev.ErrorEvent():
                self.say(f"{e.kind}{' in ' + step if step else ''}: {e.message}")
            case ev.Correction():
                self.say(correction_line(e))
            case ev.Compliance():
                self.say(f"compliance in {step} at point {e.index} ({e.count} so far in "
                         "this step)")
            case ev.StageRamping() | ev.StageStable() | ev.StageDrifting():
                self.say(stage_line(e.kind, e.payload()))
            case ev.Paused() | ev.Resumed():
                self.say(f"{e.kind} in step {step}"
                         + (" (outputs off)" if isinstance(e, ev.Paused) else ""))
            case ev.RunFinished():
                self.current = None
                if e.connected is False:
                    off = "the instruments were never connected, so no output was switched on"
                else:
                    off = f"outputs off confirmed: {'yes' if e.outputs_off_confirmed else 'NO'}"
                self.say(f"run finished: {status_words(e.status)} ({e.reason}); {off}")

    # -- text -----------------------------------------------------------------------------
    def total_done(self) -> int:
        return self.model.total_done()

    def total_planned(self) -> int:
        """Planned points, counting a step that ended early (limit, settled) as done."""
        return self.model.total_planned()

    def eta_s(self) -> float:
        return self.model.eta_s()[1]

    def param_text(self, step: str) -> str:
        """The step's latest fit in one line: its estimates, then what else it found or
        why it found nothing (a reverse step: leakage, and BV's current or no breakdown)."""
        e = self.fits.get(step)
        params = self.params.get(step, {})
        reverse = e is not None and e.fit_kind == "iv_reverse"
        ibv = e.ibv_A if reverse else None
        ibv_text = f"IBV = {format_quantity(ibv, 'A', 3)}" if ibv else ""
        shown = [format_parameter(n, p) + (f" at {ibv_text}" if n == "BV" and ibv else "")
                 for n, p in params.items()]
        notes = []
        if reverse and "BV" not in params:
            notes.append("no breakdown" + (f" ({ibv_text} not reached)" if ibv else ""))
        if reverse and e.leakage:
            notes.append(leakage_text(e.leakage))
        if e is not None and e.not_determined:
            notes.append(f"{', '.join(e.not_determined)} not determined")
        if e is not None and misfit_text(e.misfit):
            notes.append(misfit_text(e.misfit))
        if e is not None and not shown and not notes:
            notes.append(first_clause(str(e.message or "nothing determined yet")))
        return "; ".join(filter(None, ["  ".join(shown), *notes]))

    def say(self, text: str) -> None:
        stamp = time.strftime("%H:%M:%S")
        if self.tty:
            self._write(self._clear() + f"{stamp} {text}\n")
            self._drawn = 0
        else:
            self._write(f"{stamp} {text}\n")
            self._last_line = time.monotonic()

    def _progress_line(self) -> None:
        step = self.steps[self.current]
        self.say(f"{self.current}: {step.done}/{step.planned} points; total "
                 f"{self.total_done()}/{self.total_planned()}; ETA {format_duration(self.eta_s())}")

    def block(self) -> list[str]:
        width = max(len(n) for n in self.steps)
        lines = []
        for name, info in self.steps.items():
            mark = {"running": ">", "done": " ", "limit": "!", "settled": "~"}.get(
                info.status, " ")
            lines.append(f"{mark}{name:<{width}} {bar(info.done, info.planned)} "
                         f"{info.done:>6}/{info.planned:<6} {info.status}")
        total, planned = self.total_done(), self.total_planned()
        lines.append(f" {'total':<{width}} {bar(total, planned)} {total:>6}/{planned:<6} "
                     f"ETA {format_duration(self.eta_s())}")
        if self.current in self.params:
            lines.append(" " + self.param_text(self.current))
        return lines

    def _clear(self) -> str:
        return f"\x1b[{self._drawn}F\x1b[J" if self._drawn else ""

    def _redraw(self, final: bool = False) -> None:
        lines = self.block()
        self._write(self._clear() + "\n".join(lines) + "\n")
        self._drawn = 0 if final else len(lines)

    def _write(self, text: str) -> None:
        if self._broken:
            return
        try:
            self.stream.write(text)
            self.stream.flush()
        except (OSError, ValueError):
            self._broken = True  # the terminal is gone; the run folder has it all


def finish_report(run_dir, stream=None) -> Path | None:
    """Write the report of a run folder when the report module is there; a failure is a
    warning (the run's data are already safe). The engine calls this at the end of a
    run, before the status that says completed (`sweeps.ending`)."""
    stream = stream or sys.stderr
    try:
        from pnbench.tui.report import write_report
    except ImportError:
        return None
    try:
        return write_report(run_dir)
    except Exception as exc:  # noqa: BLE001 - never lose a run over its report
        print(f"warning: the report could not be written ({type(exc).__name__}: {exc}); "
              f"the run folder is complete, try `pnbench report {run_dir}`", file=stream)
        return None


def print_part_check(run_dir, stream) -> None:
    """After a rehearsal on the simulated bench: the fitted values against the part's
    (`sweeps.rehearsal`); nothing for a run on real instruments."""
    from pnbench.sweeps.rehearsal import folder_summary

    line = folder_summary(run_dir)
    if line:
        print(line, file=stream)


def run_headless(launch, plan, *, stream=None, tty: bool | None = None,
                 report: bool = True) -> int:
    """Run `launch` on this thread with progress output; signals stop it gracefully.
    The report is part of the run's end work (`sweeps.ending`), under the same signal
    handlers: a SIGTERM or SIGHUP in the end work is reported, the folder is finished,
    and the exit code is 4. Returns the exit code; connection errors before the first
    point propagate."""
    from pnbench.sweeps.stopsignals import stop_on_signals
    from pnbench.tui import operator

    operator.refuse_without_terminal(launch.plan)  # before any folder or instrument
    progress = Progress(plan, stream=stream, tty=tty)
    launch.listeners.append(progress.listener)
    if operator.needs_operator(launch.plan):
        launch.listeners.append(operator.TerminalOperator(launch, progress.hold).listener)
    written: list[Path] = []
    if report:
        def write(run_dir: Path) -> Path | None:
            path = finish_report(run_dir)
            if path is not None:
                written.append(path)
            return path

        launch.write_report = write
    progress.start()
    outcome = None
    with stop_on_signals(launch) as signals:
        try:
            outcome = launch.run()
        finally:
            signals.end_work()
            progress.stop()
            if launch.run_dir is not None:
                print(f"run folder: {launch.run_dir}", file=progress.stream)
    for path in written:
        print(f"report: {path}", file=sys.stdout)
    if launch.run_dir is not None and outcome is not None:
        print_part_check(launch.run_dir, progress.stream)
    if outcome.exit_code != 0:
        print(f"pnbench: run {outcome.status}: {outcome.reason}"
              + ("" if outcome.outputs_off_confirmed else
                 "; OUTPUTS NOT CONFIRMED OFF: check the instruments"), file=sys.stderr)
    elif signals.late:
        print(f"pnbench: the run had ended when {', '.join(signals.late)} came; its folder "
              "is complete", file=sys.stderr)
    return int(signals.exit_code(outcome.exit_code))


def app_available() -> bool:
    try:
        from pnbench.tui.app.application import run_app  # noqa: F401
    except ImportError:
        return False
    return True


def correction_line(e) -> str:
    """One line on the LCR correction a run ran or reused."""
    which = " and ".join(e.corrections) or "LCR"
    at = f" at {e.set_point_K:g} K" if isinstance(e.set_point_K, (int, float)) else ""
    how = ("compensated in software from its recorded values" if e.applied_by == "software"
           else "applied by the meter")
    if any(isinstance(v, dict) and v.get("measured_by") == "pnbench"
           for v in (e.values or {}).values()):
        how = "the fixture read by pnbench, " + how
    if e.reused:
        return f"LCR {which} correction recorded{at} reused ({how})"
    return f"LCR {which} correction done{at} ({how})"
