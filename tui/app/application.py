"""The pnbench terminal app: bench, plan, run and review screens over one RunState.

`run_app(...)` opens it for `pnbench ui`, `pnbench run` and `pnbench demo` in a terminal;
`run_watch(run_dir)` opens the read-only run screen for `pnbench watch`. The sweep runs on
the engine's threads (app_live); its events cross to the UI thread through a queue that a
timer drains every 0.1 s, so keys are answered while points stream in. Whatever way the
app ends, `run_app` aborts a sweep it owns (the runner ramps down and turns outputs off)
and waits for that before returning.
"""

from __future__ import annotations

import math
import signal
from pathlib import Path

from rich.segment import Segment
from textual.app import App
from textual.binding import Binding
from textual.filter import Monochrome, monochrome_style
from textual.reactive import reactive

from pnbench.errors import PnbenchError
from pnbench.tui.app.bench import output_name
from pnbench.tui.app.exit import exit_code, safe_exit_on_signals
from pnbench.tui.app.folder import FolderTail, apply_batch, check_run_folder
from pnbench.tui.app.live import LiveRun
from pnbench.tui.app.state import RunState

SHORT_ADVICE = ("Quitting the app aborts it. For overnight runs use `pnbench run PLAN "
                "--headless` and look in with `pnbench watch RUN_DIR`.")

DRAIN_PERIOD_S = 0.1
WATCH_PERIOD_S = 0.5

OVERNIGHT_ADVICE = (
    "Overnight and other long runs belong in headless mode: start them with "
    "`pnbench run PLAN --headless` (in tmux or with nohup) and look in with "
    "`pnbench watch RUN_DIR`, which you can open and quit at any time without "
    "touching the acquisition."
)


class _Monochrome(Monochrome):
    """Textual's monochrome filter (used under NO_COLOR) fails on a segment without a
    style, which the plot canvas produces; this one passes such segments through."""

    def apply(self, segments: list[Segment], background) -> list[Segment]:
        return [Segment(text, None if style is None else monochrome_style(style), None)
                for text, style, _ in segments]


_MONOCHROME = _Monochrome()


class PnbenchApp(App):
    """Bench, plan, run and review screens (or only the watch screen)."""

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

    def __init__(self, plan_path: str | Path | None = None, *, simulate: str | None = None,
                 time_scale: float = 1.0, out_dir: str | Path = "runs",
                 autostart: bool = False, watch_dir: str | Path | None = None,
                 live_factory=LiveRun):
        super().__init__()
        self.simulate = simulate
        self.time_scale = time_scale
        self.out_dir = Path(out_dir)
        self.autostart = autostart
        self.watch_dir = Path(watch_dir) if watch_dir is not None else None
        self.live_factory = live_factory
        self.state = RunState()
        self.live: LiveRun | None = None
        self.tail: FolderTail | None = None
        self.last_run_dir: Path | None = None
        self.plan_path = Path(plan_path) if plan_path else None
        self.plan_text = ""
        self.plan = None
        self.plan_error = ""
        self._was_active = False
        self._shown_status = ""
        self._closing = False
        if self.plan_path is not None:
            self.load_plan_file(self.plan_path)
        self.available_modes = ["run"] if self.watch_dir else ["bench", "plan", "run",
                                                               "review"]

    def get_line_filters(self):
        return [_MONOCHROME if type(f) is Monochrome else f
                for f in super().get_line_filters()]

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
        elif self.plan is not None or self.plan_error:
            self.switch_mode("plan" if self.plan_error else "run")
        else:
            self.switch_mode("plan")

    # ------------------------------------------------------------------ plan
    def load_plan_file(self, path: Path) -> None:
        """Read a plan file into the app (text and validation result)."""
        self.plan_path = Path(path)
        try:
            self.plan_text = self.plan_path.read_text(encoding="utf-8")
        except OSError as exc:
            self.plan_text, self.plan = "", None
            self.plan_error = f"plan {path}: cannot read it ({exc.strerror or exc})"
            return
        self.check_plan_text(self.plan_text)

    def check_plan_text(self, text: str) -> bool:
        """Validate editor text with the engine; keeps the Plan or the engine's message."""
        from pnbench.sweeps.plan import parse_plan

        self.plan_text = text
        name = str(self.plan_path) if self.plan_path else "<unsaved plan>"
        base = self.plan_path.parent if self.plan_path else Path.cwd()
        try:
            self.plan = parse_plan(text, name, base_dir=base)
            self.plan_error = ""
        except PnbenchError as exc:
            self.plan, self.plan_error = None, str(exc)
        if self.plan is not None and not self.live_active:
            self.state = RunState()
            self.state.set_plan_steps([(s.name, s.kind, s.planned) for s in self.plan.steps])
            self.state.device = self.plan.device.to_json_dict()
            self.state.temperature_K = self.plan.device.temperature_K
        return self.plan is not None

    # ------------------------------------------------------------------ the run
    @property
    def live_active(self) -> bool:
        return self.live is not None and self.live.running

    def can_run_action(self, action: str) -> bool:
        if action == "start":
            return not self.live_active and self.plan is not None
        return self.live_active

    def ask_start(self, key: str = "s") -> None:
        """Ask before switching a source on: a stray key must not energize the DUT."""
        from pnbench.tui.app.screens.dialogs import ConfirmDialog

        if self.plan is None or self.live_active:
            self.start_run()  # says why it cannot
            return
        plan = self.plan
        where = (f"the simulated bench ({self.simulate})" if self.simulate
                 else ", ".join(f"{role.upper()} at {inst.resource}"
                                for role, inst in sorted(self.plan.instruments.items())))
        text = (f"'{plan.title or plan.device.name}': {len(plan.steps)} steps, "
                f"{plan.total_points} points on {where}. Sources switch on at the "
                f"device's terminals; limits: {plan.limits.max_voltage_V:g} V forward, "
                f"{plan.limits.max_reverse_voltage_V:g} V reverse, "
                f"{plan.limits.max_current_A:g} A.")

        def answered(yes: bool | None) -> None:
            if yes:
                self.switch_mode("run")
                self.start_run()

        self.push_screen(ConfirmDialog("Start the sweep?", text, yes_key=key), answered)

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
            self.live = self.live_factory(self.plan, simulate=self.simulate,
                                          time_scale=self.time_scale, out_dir=self.out_dir)
            self.live.start()  # connects and runs on the engine's own thread
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
        live = self.live
        if live is None or not live.running:
            return
        if self.state.status == "paused":
            self.run_worker(live.resume, thread=True, group="control")
        else:
            self.run_worker(live.pause, thread=True, group="control")

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
        live = self.live
        if live is not None:
            self.status_text = "aborting"
            self.run_worker(live.abort, thread=True, group="control")

    # ------------------------------------------------------------------ timers
    def drain_live(self) -> None:
        live = self.live
        if live is None:
            return
        was_active = self._was_active
        for doc in live.drain():
            self.state.apply_event(doc)
        if live.run_dir is not None:
            self.last_run_dir = Path(live.run_dir)
        problem = live.failure()
        if problem is not None:
            self._start_failed(problem)
        self._was_active = live.running
        self.poll_outputs()
        if was_active and not self._was_active:
            self.refresh_bindings()
            if live.run_dir is not None:
                self._apply_model(FolderTail(live.run_dir))
            if self.state.finished:
                self.notify(f"Run {self.state.status}. F5 reviews it: refit, card, report.",
                            timeout=8)
        self._update_status()

    def poll_folder(self) -> None:
        if self.tail is None:
            return
        batch = self.tail.poll()
        if batch:
            apply_batch(self.state, batch)
        if self.state.finished:  # the final model of every point, once written
            self._apply_model(self.tail)
        self._update_outputs(self.state.outputs)
        self._update_status()

    def _apply_model(self, tail: FolderTail) -> None:
        try:
            doc = tail.read_model()
        except PnbenchError:
            return  # being replaced right now: the next poll reads it
        if doc is not None:
            self.state.apply_model_json(doc)

    def poll_outputs(self) -> None:
        live = self.live
        truth = live.outputs() if live is not None else None
        self._update_outputs(truth if truth is not None else self.state.outputs,
                             simulated=truth is not None)

    def _update_outputs(self, outputs: dict[str, bool], simulated: bool = False) -> None:
        on = sorted(output_name(role) for role, state in outputs.items() if state)
        self.source_on = bool(on)
        if on:
            where = "simulated " if simulated else ""
            self.output_text = (f"SOURCE OUTPUT ON: {', '.join(on)} ({where}DUT terminals "
                                "are live)")
        elif outputs or self.state.point_count:
            confirmed = " (confirmed by the runner)" if self.state.outputs_off_confirmed else ""
            self.output_text = f"outputs off{confirmed}"
        elif self.watch_dir is not None:
            self.output_text = "outputs: no output event seen in this run folder yet"

    def _update_status(self) -> None:
        state = self.state
        fraction = state.progress_fraction()
        percent = f" {fraction:.0%}" if math.isfinite(fraction) else ""
        self.status_text = f"{state.status}{percent}"
        if state.status != self._shown_status:  # Pause becomes Resume, Start comes back
            self._shown_status = state.status
            self.refresh_bindings()

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
        if self.screen.query("HelpPanel"):
            self.action_hide_help_panel()
        else:
            self.action_show_help_panel()

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
        if self.live is not None:
            self.live.close()
        self.call_from_thread(self.exit, 0)


def run_app(plan_path: str | Path | None = None, simulate: str | None = None,
            time_scale: float = 1.0, out_dir: str | Path = "runs",
            autostart: bool = False) -> int:
    """Open the app (bench, plan, run, review). Returns the exit code: 0, or 4 when
    a sweep this app owned ended in an abort or a safety stop."""
    app = PnbenchApp(plan_path, simulate=simulate, time_scale=time_scale, out_dir=out_dir,
                     autostart=autostart)
    previous = safe_exit_on_signals(app)
    try:
        code = app.run()
    finally:
        if app.live is not None:
            app.live.close()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    return exit_code(app, code)


def run_watch(run_dir: str | Path) -> int:
    """Follow a run folder read-only until the user quits (Ctrl+Q)."""
    check_run_folder(run_dir)
    app = PnbenchApp(watch_dir=run_dir)
    return int(app.run() or 0)
