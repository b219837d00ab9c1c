"""Keeping the app's RunState fresh: the live sweep's queue drained on a UI timer (all
that arrived since the last tick, each run of points taken as columns in one go), a
watched folder polled, the banner and status words updated, and word of the report when a
sweep this app ran has ended (the engine writes it in its end work, before the status).
A mixin of the app class (it uses the app's `control`, `state`, `notify` and workers); no
screen calls it."""

from __future__ import annotations

import math
from pathlib import Path

from pnbench.errors import PnbenchError
from pnbench.sweeps import record
from pnbench.sweeps.events import OperatorPrompt
from pnbench.sweeps.record import PointColumns
from pnbench.tui.app.folder import FolderTail, apply_batch
from pnbench.tui.app.intake import batches
from pnbench.tui.app.widgets.banner import banner_text
from pnbench.tui.app.words import status_words


class RunFeed:
    def drain_live(self) -> None:
        live = self.live
        if live is None:
            return
        was_active = self._was_active
        for item in batches(live.drain()):  # each run of points at once, as columns
            if isinstance(item, PointColumns):
                self.state.add_points(item)
                continue
            self.state.apply_event(item)
            if isinstance(item, OperatorPrompt):
                self._ask_operator(live, item)
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
                self.notify(f"Run {status_words(self.state.status)}. F5 reviews it: refit, "
                            "card, report.", timeout=8)
            if live.run_dir is not None:
                self._report_written(Path(live.run_dir))
        self._update_status()

    def _ask_operator(self, live, event: OperatorPrompt) -> None:
        """The runner waits for the operator (a fixture state to set): ask in a dialog;
        yes goes on, no stops the run."""
        from pnbench.tui.app.screens.dialogs import ConfirmDialog

        def answered(yes: bool | None) -> None:
            live.answer(bool(yes))

        self.push_screen(ConfirmDialog("The sweep waits for you",
                                       event.message + "\n\nNo stops the run."), answered)

    def _report_written(self, run_dir: Path) -> None:
        """Say where the sweep's report is (the engine wrote it in the run's end work, as
        for headless runs), unless --no-report said otherwise."""
        from pnbench.sweeps.rehearsal import folder_summary

        check = folder_summary(run_dir)
        if not self.control.report:
            if check:
                self.notify(check, timeout=12)
            return
        path = record.report_path(run_dir)
        if path.exists():
            self.notify(f"report written: {path}" + (f"\n{check}" if check else ""),
                        timeout=12 if check else 8)
        else:
            self.notify(f"the report could not be written (see the log); try "
                        f"`pnbench report {run_dir}`", severity="error", timeout=12)


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
        on, text = banner_text(outputs, simulated=simulated, state=self.state,
                               watching=self.watch_dir is not None)
        self.source_on = on
        if text:
            self.output_text = text

    def _update_status(self) -> None:
        state = self.state
        fraction = state.progress_fraction()
        percent = f" {fraction:.0%}" if math.isfinite(fraction) else ""
        self.status_text = f"{status_words(state.status)}{percent}"
        if state.status != self._shown_status:  # Pause becomes Resume, Start comes back
            self._shown_status = state.status
            self.refresh_bindings()
