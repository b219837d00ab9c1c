"""The runner's side of a run over temperature: the stage before each step, its reading
with each point.

    stage = StageRun(plan, bench, emit, should_stop, log)
    stage.before_step(step)          # settles the stage when the step's set point differs
    stage.temperature_K(step.name)   # the stage temperature recorded with a point

A step planned at a set point (thermalplan.expand_steps) starts only once the stage is
stable there (thermal.settle: ramp, stable within the band for the window, soak); the
first such step of a run, and of a resumed run, always waits, so a resumed run
re-stabilizes at the interrupted temperature before its next point. While the steps run,
`Watch` reads the stage at most once per poll and warns once per excursion beyond the
band. The way out (sources off, then the stage to standby) is the bench's `safe_off`.
"""

from __future__ import annotations

from collections.abc import Callable

from pnbench.sweeps.thermal import Watch, settle
from pnbench.sweeps.thermalplan import ZERO_C_K

Emit = Callable[[str, str | None, dict], None]


class StageRun:
    def __init__(self, plan, bench, emit: Emit, should_stop: Callable[[], bool],
                 log: Callable[[str], None]) -> None:
        self.plan = plan.temperature
        self.stage = getattr(bench, "stage", None)
        self.clock = getattr(bench, "clock", None)
        self.emit, self.should_stop, self.log = emit, should_stop, log
        self.at_K: float | None = None
        self.watch: Watch | None = None

    @property
    def active(self) -> bool:
        return self.plan is not None and self.stage is not None

    def before_step(self, step) -> bool:
        """Settle at the step's set point if the stage is not there yet; False when a
        stop request ended the wait (the caller's next check raises it)."""
        sp = getattr(step, "set_point_K", None)
        if not self.active or sp is None:
            return True
        if self.at_K is not None and abs(self.at_K - sp) < 1e-9:
            return True
        self.watch = None
        self.log(f"stage to {sp:.6g} K ({sp - ZERO_C_K:.4g} degC) before step {step.name}")

        def emit(kind: str, data: dict) -> None:
            self.emit(kind, step.name, data)
            if kind != "stage_ramping":
                self.log(f"{kind.removeprefix('stage_')}: {data}")

        done = settle(self.stage, self.clock, sp, self.plan, emit, self.should_stop)
        if done is None:
            return False
        self.at_K = sp
        self.watch = Watch(self.stage, self.clock, sp, self.plan,
                           lambda kind, data: self.emit(kind, data.get("during"), data), done)
        return True

    def temperature_K(self, step_name: str | None = None) -> float | None:
        """The stage temperature for the next point, None outside a run over temperature."""
        if self.watch is None:
            return None
        return self.watch.reading(step_name)
