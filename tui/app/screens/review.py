"""The review screen: a finished run folder, its points (choose which to use), a refit,
and exports of the model card and the report."""

from __future__ import annotations

from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static

from pnbench.errors import PnbenchError
from pnbench.tui.app.plots import VIEWS, plot_data
from pnbench.tui.app.review import (
    Review,
    export_card,
    load_review,
    misfits,
    point_row,
    refit,
    review_state,
    set_step,
    toggle,
)
from pnbench.tui.app.screens.dialogs import PathDialog
from pnbench.tui.app.widgets.banner import ScreenBar, SourceBanner
from pnbench.tui.app.widgets.params import ParamTable
from pnbench.tui.app.widgets.plot import SweepPlot

REDRAW_S = 0.3
#: The point table fills this many rows per tick of FILL_PERIOD_S.
FILL_ROWS = 400
FILL_PERIOD_S = 0.03
COLUMNS = ("#", "use", "step", "kind", "V", "reading", "f [Hz]", "compl")


class ReviewScreen(Screen):
    """Open a run folder, choose points, refit, export."""

    BINDINGS = [
        Binding("o", "open", "Open"),
        Binding("space", "toggle", "Use"),
        Binding("t", "toggle_step", "Step"),
        Binding("a", "use_all", "All"),
        Binding("r", "refit", "Refit"),
        Binding("c", "card", "Card"),
        Binding("e", "report", "Report"),
        Binding("v", "next_view", "View"),
    ]

    def __init__(self):
        super().__init__()
        self.review: Review | None = None
        self.view_index = 0
        self._dirty = False
        self._busy = ""
        self._filled = 0
        self._fill_timer = None
        self._pending_cursor: int | None = None

    def compose(self) -> ComposeResult:
        yield SourceBanner()
        yield ScreenBar("review", "Review")
        yield Static("", id="review-head", markup=False)
        with Horizontal(id="review-body"):
            yield SweepPlot(id="review-plot")
            with Vertical(id="review-side"):
                yield ParamTable(id="review-params")
        yield DataTable(id="review-points", cursor_type="row", zebra_stripes=True)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one("#review-points", DataTable)
        for name in COLUMNS:
            table.add_column(name, key=name)
        self.set_interval(REDRAW_S, self._redraw_if_dirty)
        self._show_head()

    def on_screen_resume(self) -> None:
        """Coming here after a run: open that run's folder unless one is open."""
        last = getattr(self.app, "last_run_dir", None)
        if self.review is None and last is not None and not self.app.live_active:
            self.open_folder(Path(last))

    # ------------------------------------------------------------------ display
    def _show_head(self) -> None:
        review = self.review
        if review is None:
            text = ("No run folder open. o opens one (the folder of a run, with run.json, "
                    "points.csv and events.jsonl).")
        else:
            used = int(review.used.sum())
            source = "refit of the points in use" if review.refit_doc else "the run's own fit"
            status = review.run_doc.get("status", "?")
            text = (f"{review.run_dir}  [{status}]  {used}/{len(review.points)} points in "
                    f"use; parameters: {source}")
            bad = misfits(review.refit_doc or review.model_doc)
            if bad:
                text += (f"; MISFIT in {', '.join(bad)}: the model does not describe those "
                         "data (sigmas are lower bounds)")
        if self._busy:
            text += f"\n{self._busy}"
        self.query_one("#review-head", Static).update(text)

    def _fill_table(self) -> None:
        """Refill the point table a chunk at a time, so a long run never holds the keys."""
        table = self.query_one("#review-points", DataTable)
        table.clear()
        self._filled = 0
        if self.review is not None and self._fill_timer is None:
            self._fill_timer = self.set_interval(FILL_PERIOD_S, self._fill_chunk)

    def _fill_chunk(self) -> None:
        review = self.review
        table = self.query_one("#review-points", DataTable)
        if review is None or self._filled >= len(review.points):
            if self._fill_timer is not None:
                self._fill_timer.stop()
                self._fill_timer = None
            return
        start, stop = self._filled, min(self._filled + FILL_ROWS, len(review.points))
        for n in range(start, stop):
            table.add_row(*point_row(n, review.points[n], bool(review.used[n])), key=str(n))
        self._filled = stop
        if self._pending_cursor is not None and self._pending_cursor < stop:
            table.move_cursor(row=self._pending_cursor)  # back where the user was
            self._pending_cursor = None

    def _redraw_if_dirty(self) -> None:
        if self._dirty and self.review is not None:
            self._dirty = False
            self._redraw()

    def _redraw(self) -> None:
        """Rebuild the plot and table from the points in use, off the UI thread."""
        review, key = self.review, VIEWS[self.view_index][0]
        position = f"{self.view_index + 1}/{len(VIEWS)}"

        def work() -> None:
            state = review_state(review, only_used=True)
            data = plot_data(key, state)
            self.app.call_from_thread(self._show_drawn, review, state.parameters, data,
                                      position)

        self.run_worker(work, thread=True, exclusive=True, group="review-draw")

    def _show_drawn(self, review, parameters, data, position: str) -> None:
        if review is not self.review:
            return  # another folder was opened meanwhile
        self.query_one(ParamTable).show(parameters)
        self.query_one(SweepPlot).show(data, position)
        self._show_head()

    # ------------------------------------------------------------------ actions
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action in ("toggle", "toggle_step", "use_all", "refit", "card", "report",
                      "next_view"):
            return self.review is not None
        return True

    def open_folder(self, path: Path) -> None:
        """Read the folder on a worker thread (a night's run is large), then show it."""
        self._busy = f"reading {path}..."
        self._show_head()

        def work() -> None:
            try:
                review = load_review(path)
            except PnbenchError as exc:
                self.app.call_from_thread(self._open_failed, str(exc))
                return
            self.app.call_from_thread(self._opened, review)

        self.run_worker(work, thread=True, exclusive=True, group="review-open")

    def _open_failed(self, message: str) -> None:
        self._busy = ""
        self._show_head()
        self.notify(message, title="Cannot open the run folder", severity="error",
                    timeout=10)

    def _opened(self, review: Review) -> None:
        self.review = review
        self._busy = ""
        self._fill_table()
        self._redraw()
        self.refresh_bindings()

    def action_open(self) -> None:
        last = self.review.run_dir if self.review else self.app.last_run_dir
        default = str(last) if last else str(self.app.out_dir) + "/"
        self.app.push_screen(PathDialog("Open a run folder", "Folder of a finished run:",
                                        default),
                             lambda path: path and self.open_folder(Path(path)))

    def _cursor_index(self) -> int | None:
        table = self.query_one("#review-points", DataTable)
        if not table.row_count:
            return None
        return table.cursor_row

    def _mark_rows(self, indices) -> None:
        indices = list(indices)
        self._dirty = True
        if len(indices) > FILL_ROWS:  # many rows: refilling in chunks is quicker
            self._pending_cursor = self._cursor_index() or 0
            self._fill_table()
            return
        table = self.query_one("#review-points", DataTable)
        for n in indices:
            if n < self._filled:
                table.update_cell(str(n), "use", "yes" if self.review.used[n] else "no")



    def action_toggle(self) -> None:
        n = self._cursor_index()
        if n is None:
            return
        toggle(self.review, n)
        self._mark_rows([n])
        table = self.query_one("#review-points", DataTable)
        table.move_cursor(row=min(n + 1, table.row_count - 1))

    def action_toggle_step(self) -> None:
        n = self._cursor_index()
        if n is None:
            return
        step = self.review.points[n].step
        indices = [k for k, p in enumerate(self.review.points) if p.step == step]
        keep = not all(self.review.used[k] for k in indices)
        set_step(self.review, step, keep)
        self._mark_rows(indices)

    def action_use_all(self) -> None:
        self.review.used[:] = True
        self._mark_rows(range(len(self.review.points)))

    def action_next_view(self) -> None:
        self.view_index = (self.view_index + 1) % len(VIEWS)
        self._redraw()

    def action_refit(self) -> None:
        review = self.review
        self._busy = "refitting the points in use..."
        self._show_head()

        def work() -> None:
            try:
                refit(review)
            except PnbenchError as exc:
                self.app.call_from_thread(self._refit_done, str(exc))
            except Exception as exc:  # noqa: BLE001 - shown, the app stays up
                self.app.call_from_thread(self._refit_done, f"refit failed: {exc!r}")
            else:
                self.app.call_from_thread(self._refit_done, "")

        self.run_worker(work, thread=True, exclusive=True, group="refit")

    def _refit_done(self, problem: str) -> None:
        self._busy = problem or "refit done: c writes its card"
        if problem:
            self.notify(problem, severity="error", timeout=10)
        self._redraw()

    def action_card(self) -> None:
        review = self.review
        suffix = "-refit" if review.refit_doc else ""
        default = review.run_dir / f"{review.device_name}{suffix}.lib"

        def chosen(path: str | None) -> None:
            if not path:
                return
            try:
                written = export_card(review, path)
            except (PnbenchError, OSError, ValueError) as exc:
                self.notify(str(exc), title="Card not written", severity="error", timeout=10)
                return
            self.notify(f"Model card written: {written}", timeout=6)

        self.app.push_screen(PathDialog("Export the model card", "Card file to write:",
                                        str(default)), chosen)

    def action_report(self) -> None:
        review = self.review
        self._busy = "writing the report..."
        self._show_head()

        def work() -> None:
            from pnbench.tui.report import write_report

            try:
                path = write_report(review.run_dir)
            except (PnbenchError, OSError) as exc:
                self.app.call_from_thread(self._report_done, f"report failed: {exc}")
            else:
                self.app.call_from_thread(self._report_done, f"report written: {path}")

        self.run_worker(work, thread=True, exclusive=True, group="report")

    def _report_done(self, message: str) -> None:
        self._busy = message
        self.notify(message, timeout=8)
        self._show_head()
