"""The run screen: live plot, parameters, Q-point, log, progress, and the stage of a run
over temperature; pause, resume, abort.

It reads the app's RunState (filled on the UI thread from the runner's queue or from a
folder being watched) on a timer, and redraws only what changed: tables and progress at
most four times a second, the plot at most twice. With `read_only` (watch) the run
controls are hidden and disabled.
"""

from __future__ import annotations

import time

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import Footer, RichLog, Static

from pnbench.tui.app.messages import AbortRequested, PauseToggled, StartRequested
from pnbench.tui.app.plots import VIEW_OF_KIND, VIEWS, has_dc_fit, model_params, plot_data
from pnbench.tui.app.widgets.banner import MessageStrip, ScreenBar, SourceBanner
from pnbench.tui.app.widgets.params import ParamTable
from pnbench.tui.app.widgets.plot import SweepPlot
from pnbench.tui.app.widgets.progress import RunProgress
from pnbench.tui.app.widgets.qpoint import QPointPanel
from pnbench.tui.app.widgets.stage import StagePanel
from pnbench.tui.app.widgets.text import set_text

#: Side panels in the order the panel key cycles through them on a small terminal.
PANELS = (("params", "Parameters"), ("qpoint", "Small-signal at Q-point"),
          ("log", "Compliance, limits, warnings"))

#: Columns and rows from which every panel shows at once.
WIDE_COLUMNS = 150
WIDE_ROWS = 40

#: Log lines the screen holds; older entries are counted in the panel's title (the run
#: folder's events.jsonl keeps every event).
LOG_LINES = 500

TABLE_PERIOD_S = 0.25
#: While points stream in fast (this many or more since the last redraw: a run at time
#: scale 0), tables and progress are redrawn every STREAM_PERIOD_S instead: the words
#: cannot be read any faster, and each redraw takes the interpreter from the run.
STREAM_POINTS = 100
STREAM_PERIOD_S = 0.5
PLOT_PERIOD_S = 0.5
#: The share of the UI thread a redraw of the plot may take while points stream in: a
#: redraw that costs more (a long run at time scale 0, a slow terminal) comes less often.
PLOT_SHARE = 0.04


class RunScreen(Screen):
    """Live view of one run (owned by this app, or watched through its folder)."""

    BINDINGS = [
        Binding("s", "start", "Start"),
        Binding("ctrl+r", "start_ctrl_r", "Start", show=False),
        Binding("space", "pause", "Pause"),
        Binding("space", "resume", "Resume"),
        Binding("x", "abort", "Abort"),
        Binding("v", "next_view", "View"),
        Binding("V", "previous_view", "Prev view", show=False),
        Binding("p", "next_panel", "Panel"),
        Binding("b", "pick_qpoint", "Q-point"),
    ] + [Binding(str(n + 1), f"view({n})", title, show=False)
         for n, (_, title) in enumerate(VIEWS)]

    def __init__(self, read_only: bool = False):
        super().__init__()
        self.read_only = read_only
        self.view_index = 0
        #: the plot follows the running step's kind until the user picks a view
        self.follow_step = True
        self.panel_index = 0
        self._drawn_version = -1
        self._drawn_points = 0
        self._drawn_at = 0.0
        self._plot_version = -1
        self._plot_drawn_at = 0.0
        #: seconds the last plot took: its data on the worker, and drawing it
        self._plot_cost_s = 0.0
        self._log_count = 0

    def compose(self) -> ComposeResult:
        yield SourceBanner()
        yield ScreenBar("run", "Watch (read-only)" if self.read_only else "Run")
        yield MessageStrip()
        with Horizontal(id="run-body"):
            yield SweepPlot(id="run-plot")
            with Vertical(id="run-side"):
                yield StagePanel(id="stage")
                yield Static("", id="panel-title", markup=False)
                yield ParamTable(id="params")
                yield QPointPanel(id="qpoint")
                yield RichLog(id="log", max_lines=LOG_LINES, auto_scroll=True, wrap=True)
        yield RunProgress(id="run-progress")
        yield Static("", id="run-last", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        for widget_id in ("params", "qpoint", "log"):
            self.query_one(f"#{widget_id}").add_class("panel")
        self._layout(self.size.width, self.size.height)
        self._show_panel()
        self.set_interval(TABLE_PERIOD_S, self.refresh_view)
        self.refresh_view(force=True)

    def on_resize(self, event) -> None:
        self._layout(event.size.width, event.size.height)

    def _layout(self, width: int, height: int) -> None:
        wide = width >= WIDE_COLUMNS and height >= WIDE_ROWS
        self.set_class(wide, "-wide")
        self.set_class(not wide, "-narrow")
        self.refresh_bindings()
        table = self.query_one(ParamTable)
        if table.detailed != wide:
            table.detailed = wide
            table.show(self.state.parameters) if table.row_count else None
        self._show_panel()

    # ------------------------------------------------------------------ drawing
    @property
    def state(self):
        return self.app.state

    def refresh_view(self, force: bool = False) -> None:
        """Redraw what changed since the last call (timer and explicit calls)."""
        state = self.state
        if not force and state.version == self._drawn_version:
            self._tick_progress()
            return
        now = time.monotonic()
        if not force and not state.finished \
                and state.point_count - self._drawn_points >= STREAM_POINTS \
                and now - self._drawn_at < STREAM_PERIOD_S:
            return  # a run that has ended is drawn at once, however fast it ended
        self._drawn_version, self._drawn_points, self._drawn_at = (
            state.version, state.point_count, now)
        if self.follow_step:
            self._follow(state)
        params = model_params(state.parameters)
        self.query_one(ParamTable).show(state.parameters)
        self.query_one(QPointPanel).show(params, state.temperature_K,
                                         has_dc_fit(state.parameters),
                                         set(state.parameters))
        self.query_one(RunProgress).show(state)
        self.query_one(StagePanel).show(state)
        self._append_log()
        self._show_hint()
        if force or self._plot_due(now):
            self._draw_plot()

    def _follow(self, state) -> None:
        kind = state.step_kind(state.current_step or "")
        key = VIEW_OF_KIND.get(kind)
        keys = [k for k, _ in VIEWS]
        if key in keys and keys.index(key) != self.view_index:
            self.view_index = keys.index(key)
            self._plot_drawn_at = 0.0  # draw the new view now

    def _tick_progress(self) -> None:
        """Elapsed time moves while nothing arrives; the plot catches up if it lagged."""
        self.query_one(RunProgress).show(self.state)
        if self._plot_version != self.state.version and self._plot_due(time.monotonic()):
            self._draw_plot()

    def _plot_due(self, now: float) -> bool:
        """Throttled: at most every PLOT_PERIOD_S, and less often when a redraw costs
        more than PLOT_SHARE of the time between two."""
        period = max(PLOT_PERIOD_S, self._plot_cost_s / PLOT_SHARE)
        return now - self._plot_drawn_at >= period

    def _draw_plot(self) -> None:
        """Copy the state here (cheap), compute the view on a worker thread (the costly
        part on a long run), and draw the result back on the UI thread."""
        key = VIEWS[self.view_index][0]
        position = f"{self.view_index + 1}/{len(VIEWS)}"
        snapshot = self.state.snapshot()
        self._plot_version = snapshot.version
        self._plot_drawn_at = time.monotonic()

        def work() -> None:
            start = time.thread_time()  # this thread's CPU: what it held the lock for
            data = plot_data(key, snapshot)
            self.app.call_from_thread(self._show_plot, data, position,
                                      time.thread_time() - start)

        self.run_worker(work, thread=True, exclusive=True, group="plot")

    def _show_plot(self, data, position: str, compute_s: float = 0.0) -> None:
        plot = self.query_one(SweepPlot)
        drawn_s = plot.draw_s  # the drawing of the view shown until now
        plot.show(data, position)
        self._plot_cost_s = compute_s + drawn_s

    def _append_log(self) -> None:
        fresh = self.state.new_log_entries(self._log_count)
        self._log_count = self.state.log_total
        if not fresh:
            return
        log = self.query_one(RichLog)
        for entry in fresh[-LOG_LINES:]:  # a burst longer than the log: its newest
            log.write(Text(entry.line()))
        if self.state.log_total > LOG_LINES:
            self._show_panel()  # the count of earlier entries in the title
        important = [e for e in fresh if e.tag in ("COMPL", "LIMIT", "WARN", "ERROR")]
        if important:
            set_text(self.query_one("#run-last", Static), "last: " + important[-1].line())

    def _show_hint(self) -> None:
        """Before any sweep: what s would start, or where to get a plan."""
        app = self.app
        if self.read_only or app.live is not None:
            return
        if app.plan is None:
            text = "no plan to run: F3 opens the Plan screen (open, or start from an example)"
        else:
            plan = app.plan
            where = (f"the simulated bench ({app.simulate})" if app.simulate
                     else "the plan's instruments")
            name = plan.title or plan.device.name
            text = (f"ready: s starts '{name}' ({len(plan.steps)} steps, "
                    f"{plan.total_points} points) on {where}")
        set_text(self.query_one("#run-last", Static), text)

    def _show_panel(self) -> None:
        key, title = PANELS[self.panel_index]
        self.set_class(key == "log", "-log-panel")
        for panel_key, _ in PANELS:
            self.query_one(f"#{panel_key}").set_class(panel_key == key, "-current")
        wide = self.has_class("-wide")
        earlier = self.state.log_total - LOG_LINES
        more = f" (+{earlier} earlier in events.jsonl)" if earlier > 0 else ""
        if wide:
            text = "Parameters | Q-point | Log" + more
        elif key == "log":
            text = (f"{title}{more}" if more else f"{title}  (p: next panel)")
        else:
            text = f"{title}  (p: next panel)"
        set_text(self.query_one("#panel-title", Static), text)

    # ------------------------------------------------------------------ actions
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "start_ctrl_r":
            action = "start"
        if action in ("start", "pause", "resume", "abort"):
            if self.read_only:
                return False  # watching: no control over the acquisition, not shown
            paused = self.state.status == "paused"
            if (action == "pause" and paused) or (action == "resume" and not paused):
                return False  # one space key: Pause while running, Resume when paused
            return True if self.app.can_run_action(action) else None
        if action == "next_panel":
            return not self.has_class("-wide")  # every panel is on show already
        return True

    def action_start(self) -> None:
        self.post_message(StartRequested("s"))

    def action_start_ctrl_r(self) -> None:
        """Ctrl+R runs the plan here as on the Plan screen."""
        self.post_message(StartRequested("ctrl+r"))

    def action_pause(self) -> None:
        self.post_message(PauseToggled())

    def action_resume(self) -> None:
        self.post_message(PauseToggled())

    def action_abort(self) -> None:
        self.post_message(AbortRequested())

    def action_next_view(self) -> None:
        self.action_view((self.view_index + 1) % len(VIEWS))

    def action_previous_view(self) -> None:
        self.action_view((self.view_index - 1) % len(VIEWS))

    def action_view(self, index: int) -> None:
        self.follow_step = False
        self.view_index = int(index) % len(VIEWS)
        self._draw_plot()

    def action_next_panel(self) -> None:
        self.panel_index = (self.panel_index + 1) % len(PANELS)
        self._show_panel()

    def action_pick_qpoint(self) -> None:
        from pnbench.tui.app.screens.dialogs import QPointDialog

        panel = self.query_one(QPointPanel)

        def chosen(choice) -> None:
            if choice is not None:
                panel.choice = choice
                self.refresh_view(force=True)

        self.app.push_screen(QPointDialog(panel.choice), chosen)
