"""Progress per step with ETA: a bar for the whole run and one line per step."""

from __future__ import annotations

import math

from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import ProgressBar, Static

from pnbench.tui.app.state import RunState, StepProgress, format_duration
from pnbench.tui.app.widgets.text import set_text

#: Step status words as shown (status words of run.json map onto these).
_STATUS = {"pending": "waiting", "running": "running", "completed": "done",
           "finished": "done", "done": "done", "aborted": "aborted",
           "skipped": "skipped", "safety_stop": "stopped", "failed": "failed",
           "ended_early": "settled"}


def step_line(progress: StepProgress, current: bool) -> str:
    planned = f"/{progress.planned}" if progress.planned else ""
    status = _STATUS.get(progress.status, progress.status)
    mark = ">" if current else " "
    kind = f" ({progress.kind})" if progress.kind else ""
    return f"{mark} {progress.name}{kind}: {progress.done}{planned} {status}"


def summary_line(state: RunState) -> str:
    """ETAs first (what matters most), then where the run is."""
    steps = list(state.steps.values())
    step_eta, run_eta = state.eta_s()
    index = next((n for n, p in enumerate(steps) if p.name == state.current_step), None)
    where = (f"step {index + 1}/{len(steps)} {state.current_step}" if index is not None
             else f"{len(steps)} steps")
    current = state.steps.get(state.current_step or "")
    if current is not None:
        where += f" {current.done}/{current.planned or '?'}"
    return (f"ETA run {format_duration(run_eta)}, step {format_duration(step_eta)} | "
            f"{where} | {format_duration(state.elapsed_s())} elapsed | "
            f"{state.point_count} pts" + stage_text(state.stage))


def stage_text(stage: dict) -> str:
    """A run over temperature: ' | stage 398.15 K: stable (324 s), reads 398.12 K'."""
    if not stage:
        return ""
    sp, now, what = stage.get("set_point_K"), stage.get("temperature_K"), stage.get("state")
    mark = {"stable": "stable \u2713", "drifting": "DRIFTING", "ramping": "ramping",
            "standby": "to standby"}.get(what, str(what))
    waited = stage.get("waited_s")
    took = f" after {format_duration(waited)}" if what == "stable" and waited else ""
    reads = f", reads {now:.5g} K" if isinstance(now, (int, float)) and what != "standby" \
        else ""
    at = f" {sp:.5g} K" if isinstance(sp, (int, float)) else ""
    return f" | stage{at}: {mark}{took}{reads}"


class RunProgress(Vertical):
    """Run bar and summary line; the step list shows when there is room (CSS)."""

    DEFAULT_CSS = """
    RunProgress { height: auto; }
    RunProgress > Horizontal { height: 1; }
    RunProgress ProgressBar { width: 20; }
    RunProgress ProgressBar > Bar { width: 12; }
    RunProgress #progress-summary { width: 1fr; }
    RunProgress #progress-steps { height: auto; }
    """

    def compose(self) -> ComposeResult:
        with Horizontal():
            yield ProgressBar(total=100, show_eta=False, id="progress-bar")
            yield Static("", id="progress-summary", markup=False)
        yield Static("", id="progress-steps", markup=False)

    def show(self, state: RunState) -> None:
        fraction = state.progress_fraction()
        bar = self.query_one(ProgressBar)
        if math.isfinite(fraction):
            bar.update(total=100, progress=round(100 * fraction, 1))
        else:
            bar.update(total=None)
        set_text(self.query_one("#progress-summary", Static), summary_line(state))
        lines = [step_line(p, p.name == state.current_step) for p in state.steps.values()]
        set_text(self.query_one("#progress-steps", Static), "\n".join(lines))
