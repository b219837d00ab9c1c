"""The pnbench terminal app: bench, plan, run and review screens over one RunState.

`run_app(...)` opens it for `pnbench ui`, `pnbench run` and `pnbench demo` in a terminal;
`run_watch(run_dir)` opens the read-only run screen for `pnbench watch`. The sweep runs on
the engine's threads (app_live); its events cross to the UI thread through a queue that a
timer drains every 0.1 s, so keys are answered while points stream in. Whatever way the
app ends, `run_app` aborts a sweep it owns (the runner ramps down and turns outputs off)
and waits for that before returning.
"""

from __future__ import annotations

import signal
from pathlib import Path

from rich.segment import Segment
from textual.app import App
from textual.binding import Binding
from textual.filter import Monochrome, monochrome_style
from textual.reactive import reactive

from pnbench.errors import PnbenchError
from pnbench.tui.app.control import RunControl
from pnbench.tui.app.exit import exit_code, finish_end_work, safe_exit_on_signals
from pnbench.tui.app.feed import RunFeed
from pnbench.tui.app.folder import FolderTail, check_run_folder
from pnbench.tui.app.live import LiveRun
from pnbench.tui.app.messages import (
    AbortRequested,
    PauseToggled,
    PlanChanged,
    PlanCheck,
    PlanExample,
    PlanOpen,
    PlanSave,
    StartRequested,
)
from pnbench.tui.app.plandoc import PlanDocument
from pnbench.tui.app.state import RunState
from pnbench.tui.app.words import OVERNIGHT_ADVICE, SHORT_ADVICE

DRAIN_PERIOD_S = 0.1
WATCH_PERIOD_S = 0.5


class _Monochrome(Monochrome):
    """Textual's monochrome filter (used under NO_COLOR) fails on a segment without a
    style, which the plot canvas produces; this one passes such segments through."""

    def apply(self, segments: list[Segment], background) -> list[Segment]:
        return [Segment(text, None if style is None else monochrome_style(style), None)
                for text, style, _ in segments]


_MONOCHROME = _Monochrome()


class PnbenchApp(RunFeed, App):
    """Bench, plan, run and review screens (or only the watch screen).

    The app holds three things and navigation: the plan (`PlanDocument`), the sweep
    (`RunControl`) and the run's state (`RunState`). Screens post messages
    (`tui.app.messages`) to change the first two and draw from all three."""

    CSS_PATH = "app.tcss"
    TITLE = "pnbench"
    ENABLE_COMMAND_PALETTE = False

    #: Quit and the key list come first: on an 80-column footer the screen keys after
    #: them may not fit, and the screen bar at the top shows those anyway.
    BINDINGS = [
        Binding("ctrl+q", "quit", "Quit", priority=True),
        Binding("f1", "keys", "Keys", key_display="F1"),
        Binding("f2", "goto('bench')", "Bench", priority=True, key_display="F2"),
        Binding("f3", "goto('plan')", "Plan", priority=True, key_display="F3"),
        Binding("f4", "goto('run')", "Run", priority=True, key_display="F4"),
        Binding("f5", "goto('review')", "Review", priority=True, key_display="F5"),
    ]

    output_text = reactive("outputs: no sweep started in this app")
    source_on = reactive(False)
    status_text = reactive("idle")

    def __init__(self, plan_path: str | Path | None = None, *, bench: str | None = None,
                 out_dir: str | Path = "runs", autostart: bool = False,
                 watch_dir: str | Path | None = None, live_factory=LiveRun,
                 report: bool = True):
        """``bench`` is the simulated bench as a backend string (``DUT@pnsim[:...]``,
        what --simulate and --time-scale make), or None for the plan's instruments."""
        super().__init__()
        self.autostart = autostart
        self.watch_dir = Path(watch_dir) if watch_dir is not None else None
        self.control = RunControl(live_factory, bench=bench, out_dir=out_dir, report=report)
        self.doc = PlanDocument()
        self.state = RunState()
        self.tail: FolderTail | None = None
        self.last_run_dir: Path | None = None
        #: the last message shown (the message strip or a toast), for the keys list
        self.last_message = ""
        self._was_active = False
        self._shown_status = ""
        self._closing = False
        if plan_path is not None:
            self.doc.load(plan_path)
        elif self.watch_dir is None:
            self.doc.load_example(self.simulate)  # the README's promise: an example
        self._plan_state()
        self.available_modes = ["run"] if self.watch_dir else ["bench", "plan", "run",
                                                               "review"]

    # -- what screens read (kept as attributes of the app for them and for tests) ------
    simulate = property(lambda self: self.control.simulate)
    time_scale = property(lambda self: self.control.time_scale)
    out_dir = property(lambda self: self.control.out_dir)
    live = property(lambda self: self.control.live)
    plan = property(lambda self: self.doc.plan)
    plan_path = property(lambda self: self.doc.path)
    plan_text = property(lambda self: self.doc.text)
    plan_error = property(lambda self: self.doc.error)

    def get_line_filters(self):
        return [_MONOCHROME if type(f) is Monochrome else f
                for f in super().get_line_filters()]

    def notify(self, message: str, *, title: str = "", severity="information",
               timeout: float | None = None, markup: bool = True) -> None:
        """Messages go to the strip under the screen bar, which pushes the screen down
        instead of covering the plot; a dialog on top gets Textual's toast."""
        from pnbench.tui.app.widgets.banner import MessageStrip

        text = f"{title}: {message}" if title else str(message)
        self.last_message = text
        strips = list(self.screen.query(MessageStrip)) if self.screen else []
        if not strips:
            super().notify(message, title=title, severity=severity, timeout=timeout,
                           markup=markup)
            return
        strips[0].say(text, error=severity == "error", timeout=timeout or 6.0)

    # ------------------------------------------------------------------ setup
    def on_mount(self) -> None:
        from pnbench.tui.app.screens.bench import BenchScreen
        from pnbench.tui.app.screens.plan import PlanScreen
        from pnbench.tui.app.screens.review import ReviewScreen
        from pnbench.tui.app.screens.run import RunScreen

        if self.watch_dir is not None:
            self.tail = FolderTail(self.watch_dir)
            self.add_mode("run", lambda: RunScreen(read_only=True))
            self.poll_folder()
            self.set_interval(WATCH_PERIOD_S, self.poll_folder)
            self.switch_mode("run")
            return
        self.add_mode("bench", BenchScreen)
        self.add_mode("plan", PlanScreen)
        self.add_mode("run", RunScreen)
        self.add_mode("review", ReviewScreen)
        self.set_interval(DRAIN_PERIOD_S, self.drain_live)
        if self.autostart and self.plan is not None:
            self.switch_mode("run")
            self.start_run()
        elif self.plan is not None and self.plan_path is not None:
            self.switch_mode("run")
        else:  # a plan with problems, or the bundled example to look at first
            self.switch_mode("plan")

    # ------------------------------------------------------------------ plan messages
    def _plan_state(self) -> None:
        """A fresh RunState with the plan's steps (unless a sweep is running)."""
        plan = self.plan
        if plan is not None and not self.live_active:
            self.state = RunState()
            self.state.set_plan_steps([(s.name, s.kind, s.planned) for s in plan.steps])
            self.state.device = plan.device.to_json_dict()
            self.state.temperature_K = plan.device.temperature_K
            if plan.temperature is not None:
                self.state.set_points_K = tuple(plan.temperature.set_points_K)

    def _plan_changed(self, checked: bool = False) -> None:
        self._plan_state()
        self.screen.post_message(PlanChanged(checked))
        self.refresh_bindings()

    def load_plan_file(self, path: Path) -> None:
        """Read a plan file into the app (text and validation result)."""
        self.doc.load(path)
        self._plan_state()

    def check_plan_text(self, text: str) -> bool:
        """Validate editor text with the engine; keeps the Plan or the engine's message."""
        ok = self.doc.check(text)
        self._plan_state()
        return ok

    def on_plan_open(self, message: PlanOpen) -> None:
        self.doc.load(message.path)
        self._plan_changed()

    def on_plan_check(self, message: PlanCheck) -> None:
        ok = self.doc.check(message.text)
        self._plan_changed(checked=True)
        self.notify("Plan checked: it can run." if ok else "Plan has problems; see the "
                    "messages.", severity="information" if ok else "error", timeout=4)

    def on_plan_example(self, _message: PlanExample) -> None:
        if not self.doc.load_example(self.simulate):
            self.notify("No bundled example plan is installed.", severity="error")
            return
        self._plan_changed()

    def on_plan_save(self, message: PlanSave) -> None:
        try:
            self.doc.save(message.path, message.text)
        except OSError as exc:
            self.notify(f"Cannot write {message.path}: {exc.strerror or exc}",
                        severity="error", timeout=8)
            return
        self._plan_changed()
        self.notify(f"Saved {self.doc.path}", timeout=4)

    # ------------------------------------------------------------------ run messages
    @property
    def live_active(self) -> bool:
        return self.control.active

    def can_run_action(self, action: str) -> bool:
        if action == "start":
            return not self.live_active and self.plan is not None
        return self.live_active

    def on_start_requested(self, message: StartRequested) -> None:
        if message.text is not None and not self.doc.check(message.text):
            self._plan_changed(checked=True)
            self.notify("The plan does not check; fix the problems first.",
                        severity="error")
            return
        if message.text is not None:
            self._plan_changed()
        self.ask_start(message.key)

    def on_pause_toggled(self, _message: PauseToggled) -> None:
        self.toggle_pause()

    def on_abort_requested(self, _message: AbortRequested) -> None:
        self.ask_abort()

    def ask_start(self, key: str = "s") -> None:
        """Ask before switching a source on: a stray key must not energize the DUT."""
        from pnbench.tui.app.screens.dialogs import ConfirmDialog

        if self.plan is None or self.live_active:
            self.start_run()  # says why it cannot
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self.switch_mode("run")
                self.start_run()

        self.push_screen(ConfirmDialog("Start the sweep?",
                                       self.control.start_question(self.plan),
                                       yes_key=key), answered)

    def start_run(self) -> None:
        if self.live_active:
            self.notify("A sweep is already running.", severity="warning")
            return
        if self.plan is None:
            self.notify("No valid plan: open or fix one on the Plan screen (F3).\n"
                        + self.plan_error, severity="error", timeout=8)
            self.switch_mode("plan")
            return
        self.check_plan_text(self.plan_text)  # a fresh state with the plan's steps
        self.state.status = "starting"
        self.last_run_dir = None
        try:
            self.control.start(self.plan)  # connects and runs on the engine's thread
        except PnbenchError as exc:
            self._start_failed(str(exc))
            return
        self.status_text = "connecting"
        self.notify(SHORT_ADVICE, title="This app owns the sweep", timeout=6)
        self.refresh_bindings()

    def _start_failed(self, message: str) -> None:
        self.state.status = "failed"
        self.state.reason = message
        self.state.version += 1
        self.status_text = "failed"
        self.notify(message, title="The sweep could not run", severity="error", timeout=20)
        self.refresh_bindings()

    def toggle_pause(self) -> None:
        if self.live_active:
            paused = self.state.status == "paused"
            self.run_worker(lambda: self.control.toggle_pause(paused), thread=True,
                            group="control")

    def ask_abort(self) -> None:
        from pnbench.tui.app.screens.dialogs import ConfirmDialog

        if not self.live_active:
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self.abort_run()

        self.push_screen(ConfirmDialog(
            "Abort the sweep?",
            "The source ramps down to zero and every output is turned off. Points taken "
            "so far stay in the run folder.", yes_key="x"), answered)

    def abort_run(self) -> None:
        if self.live is not None:
            self.status_text = "aborting"
            self.run_worker(self.control.abort, thread=True, group="control")

    # ------------------------------------------------------------------ navigation
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "goto" and parameters and (
                parameters[0] not in self.available_modes
                or parameters[0] == self.current_mode):
            return False
        return True

    def switch_mode(self, mode: str):
        result = super().switch_mode(mode)
        self.refresh_bindings()  # the key of the screen shown drops out of the footer
        return result

    def action_goto(self, mode: str) -> None:
        if mode not in self.available_modes:
            self.notify(f"No {mode} screen here.", timeout=3)
            return
        self.switch_mode(mode)

    def action_keys(self) -> None:
        from pnbench.tui.app.screens.keys import KeysScreen

        if isinstance(self.screen, KeysScreen):
            self.screen.dismiss()
        else:
            self.push_screen(KeysScreen(self.screen))

    async def action_quit(self) -> None:
        from pnbench.tui.app.screens.dialogs import ConfirmDialog

        if self.watch_dir is not None or not self.live_active:
            self.exit(0)
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self.status_text = "aborting, then quitting"
                self.run_worker(self._close_and_exit, thread=True, group="close")

        self.push_screen(ConfirmDialog(
            "A sweep is running: abort it and quit?",
            "Quitting aborts the sweep this app owns: the source ramps to zero and "
            "outputs are turned off before the app ends; the points so far stay in the "
            "run folder.\n\n" + OVERNIGHT_ADVICE), answered)

    def _close_and_exit(self) -> None:
        self.control.close()
        self.call_from_thread(self.exit, 0)


def run_app(plan_path: str | Path | None = None, bench: str | None = None,
            out_dir: str | Path = "runs", autostart: bool = False,
            report: bool = True) -> int:
    """Open the app (bench, plan, run, review). Returns the exit code: 0, or 4 when
    a sweep this app owned ended in an abort or a safety stop. Every sweep it runs ends
    by writing its report.html unless `report` is False (--no-report)."""
    app = PnbenchApp(plan_path, bench=bench, out_dir=out_dir, autostart=autostart,
                     report=report)
    previous = safe_exit_on_signals(app)
    try:
        code = app.run()
    finally:
        try:
            app.control.close()
            finish_end_work(app)  # the report, under the same signal handlers
        finally:
            for sig, handler in previous.items():
                signal.signal(sig, handler)
    return exit_code(app, code)


def run_watch(run_dir: str | Path) -> int:
    """Follow a run folder read-only until the user quits (Ctrl+Q)."""
    check_run_folder(run_dir)
    app = PnbenchApp(watch_dir=run_dir)
    return int(app.run() or 0)
