"""The stage panel of a run over temperature: where the stage is sent, what it reads,
whether it is ramping, stable or drifting, and the set points done and left.

Fed from the run's stage events (`RunState.stage`) and its steps (a step of a run over
temperature is named ``NAME@<T>K``); shown only when the run has set points. States are
words and marks, never colour alone.
"""

from __future__ import annotations

import re

from textual.widgets import Static

from pnbench.sweeps.statuses import StepStatus
from pnbench.tui.app.state import RunState, format_duration
from pnbench.tui.app.widgets.text import set_text

ZERO_C_K = 273.15
_AT = re.compile(r"@([0-9.]+)K$")

#: How each stage state reads (drifting in capitals: it is the one to look at).
STATE_WORDS = {"ramping": "ramping", "stable": "stable \u2713", "drifting": "DRIFTING",
               "standby": "to standby"}


def _label(t: float) -> str:
    """A set point as a step name carries it (six significant digits: the runner's)."""
    return f"{t:.6g}"


def set_points(state: RunState) -> list[str]:
    """The run's set points in run order, as step names carry them: the plan's, else
    those its steps name."""
    if state.set_points_K:
        return list(dict.fromkeys(_label(t) for t in state.set_points_K))
    found = (_AT.search(name) for name in state.steps)
    return list(dict.fromkeys(_label(float(m.group(1))) for m in found if m))


def _finished(status: str) -> bool:
    try:
        return StepStatus(status).finished
    except ValueError:
        return status in ("completed", "skipped")


def set_point_counts(state: RunState, points: list[str]) -> tuple[int, int]:
    """(done, left): a set point is done when every step at it takes no more points;
    the one the stage is at now counts in neither while its steps run."""
    at: dict[str, list[str]] = {}
    for name, progress in state.steps.items():
        m = _AT.search(name)
        if m:
            at.setdefault(_label(float(m.group(1))), []).append(progress.status)
    done = {t for t in points if at.get(t) and all(_finished(s) for s in at[t])}
    now = state.stage.get("set_point_K")
    current = isinstance(now, (int, float)) and state.stage.get("state") != "standby" \
        and _label(now) in points and _label(now) not in done
    return len(done), len(points) - len(done) - int(current)


def _kelvin(t: float) -> str:
    return f"{t:.5g} K ({t - ZERO_C_K:.4g} degC)"


def stage_lines(state: RunState) -> list[str]:
    """The panel's lines; none for a run without set points."""
    points = set_points(state)
    if not points:
        return []
    stage = state.stage
    what = stage.get("state")
    head = f"Stage: {STATE_WORDS.get(what, str(what)) if what else 'not sent yet'}"
    waited, rate = stage.get("waited_s"), stage.get("ramp_K_per_min")
    if what == "stable" and isinstance(waited, (int, float)) and waited > 0:
        head += f" after {format_duration(waited)}"
    if what == "ramping" and isinstance(rate, (int, float)):
        head += f" at {rate:.3g} K/min"
    lines = [head]
    sp, now = stage.get("set_point_K"), stage.get("temperature_K")
    if what == "standby":
        sp = now = None  # sent to its standby temperature: the last set point is past
    if isinstance(sp, (int, float)):
        lines.append(f"set   {_kelvin(sp)}")
    if isinstance(now, (int, float)) and what == "ramping":
        lines.append(f"was   {now:.5g} K when sent")
    elif isinstance(now, (int, float)):
        off = f", {now - sp:+.2g} K from set" if isinstance(sp, (int, float)) else ""
        lines.append(f"reads {now:.5g} K{off}")
    done, left = set_point_counts(state, points)
    if done + left < len(points):  # at one now
        lines.append(f"set point {done + 1} of {len(points)}: {done} done, {left} left")
    else:
        lines.append(f"set points: {done} done, {left} left of {len(points)}")
    return lines


class StagePanel(Static):
    """The stage panel (hidden for a run at one temperature)."""

    DEFAULT_CSS = """
    StagePanel { height: auto; border-bottom: hkey $secondary; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__("", id=id, markup=False)

    def show(self, state: RunState) -> None:
        lines = stage_lines(state)
        self.display = bool(lines)
        if lines:
            set_text(self, "\n".join(lines))
