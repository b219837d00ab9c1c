"""Keeping the app's RunState fresh: the live sweep's queue drained on a UI timer, a
watched folder polled, the banner and status words updated, and the report written on a
worker when a sweep this app ran has ended. A mixin of the app class (it uses the app's
`control`, `state`, `notify` and workers); no screen calls it."""

from __future__ import annotations

import math
import threading
from pathlib import Path

from pnbench.errors import PnbenchError
from pnbench.tui.app.folder import FolderTail, apply_batch
from pnbench.tui.app.widgets.banner import banner_text
from pnbench.tui.app.words import status_words


class RunFeed:
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
                self._write_report(Path(live.run_dir))
            if self.state.finished:
                self.notify(f"Run {status_words(self.state.status)}. F5 reviews it: refit, "
                            "card, report.", timeout=8)
        self._update_status()

    def _write_report(self, run_dir: Path) -> None:
        """The report of a finished sweep, on a worker (every run ends with one, as
        headless runs do), unless --no-report said otherwise."""
        if not self.control.report:
            return
        done = self.report_done = threading.Event()  # the end work waits for it
        self.report_dir = run_dir

        def work() -> None:
            from pnbench.tui.report import write_report

            try:
                path = write_report(run_dir)
            except Exception as exc:  # noqa: BLE001 - never lose a run over its report
                self._tell(f"the report could not be written ({exc}); try "
                           f"`pnbench report {run_dir}`", severity="error", timeout=12)
                return
            finally:
                done.set()
            self._tell(f"report written: {path}", timeout=8)

        self.run_worker(work, thread=True, group="report")

    def _tell(self, message: str, **options) -> None:
        """A notice from a worker; nothing when the app has already ended."""
        try:
            self.call_from_thread(self.notify, message, **options)
        except Exception:  # noqa: BLE001 - the app is gone (a signal ended it)
            pass

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

