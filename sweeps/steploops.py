"""How a step runs on each instrument: the SMU's levels and the LCR meter's bias and
frequency pairs, each point checked, read, recorded and judged in the order the runner's
docstring gives.

`StepLoops` is mixed into `runner.Runner`, whose state it uses (``plan``, ``bench``,
``bus``, ``state``, ``stage``, ``time_scale``, ``current_step``) with its per-point and
pause methods (``_checkpoint``, ``_record``, ``_judgeable``, ``_settled``, ``_ended``,
``_sleep``).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from pnbench.errors import SafetyStop
from pnbench.modeling.smallsignal import parallel_from_admittance
from pnbench.sweeps import events as ev
from pnbench.sweeps.limits import Reading, StepGuard, Verdict
from pnbench.sweeps.planstep import Step
from pnbench.sweeps.record import Point
from pnbench.sweeps.statuses import StepStatus

if TYPE_CHECKING:
    from pnbench.drivers.roles import SmuReading


class StepLoops:
    """The SMU and LCR step loops of `runner.Runner` (a mixin)."""

    def _smu_step(self, step: Step, start: int) -> tuple[str, Verdict | None]:
        guard = StepGuard(self.plan.limits, step.source, step.compliance,
                          step.breakdown_guard_A)
        if self.state is not None:
            for p in self.state.tails.get(step.name, []):
                guard.after(step.points[p.index].level, _reading_of(p))
        self._arm_smu(step)
        clean = False
        try:
            verdict = self._approach(step, start, guard) if start > 0 else None
            # (index, level) straight from the step's lazy levels: no planned-point
            # object a point (an SMU step's point k is its level k)
            for index, level in enumerate(step.levels[start:], start):
                level = float(level)
                if verdict is not None:
                    break
                if self._checkpoint(step):
                    self._arm_smu(step)
                    verdict = self._approach(step, index, guard)
                    if verdict is not None:
                        break
                verdict = guard.before(level)
                if verdict is not None:
                    break
                reading = self._read_smu(step, level)
                v, i = reading.voltage_V, reading.current_A
                if not (math.isfinite(v) and math.isfinite(i)):
                    self._judgeable(step, index, level, v, i)
                self._record(step, Point(step.name, index, "iv", self.bus.elapsed_s(), v, i,
                                         compliance=bool(reading.compliance),
                                         temperature_K=self.stage.temperature_K(step.name)))
                verdict = guard.after(level, reading)
                if verdict is None and step.end_when_settled is not None and \
                        self._settled(step):
                    clean = True
                    return StepStatus.SETTLED, None
            if verdict is not None and verdict.ends == "run":
                self.bus.emit(ev.Limit, step.name, guard=verdict.kind,
                              message=verdict.message, level=verdict.level)
                raise SafetyStop(f"step {step.name}: {verdict.message}")
            clean = True
            return (StepStatus.DONE, None) if verdict is None else self._ended(step, verdict)
        finally:
            if clean:  # after a fault the shutdown's safe_off (which reconnects) does it
                self._disarm_smu()

    def _arm_smu(self, step: Step) -> None:
        smu = self.bench.smu
        smu.configure(source=step.source, limit=step.compliance, nplc=step.nplc,
                      four_wire=step.four_wire)
        smu.output(True)
        self.bus.emit(ev.Output, step.name, role="smu", on=True)

    def _disarm_smu(self) -> None:
        smu = self.bench.smu
        smu.ramp_to_zero()
        smu.output(False)
        self.bus.emit(ev.Output, self.current_step, role="smu", on=False)

    def _approach(self, step: Step, index: int, guard: StepGuard) -> Verdict | None:
        """Bring the source back to the level before ``index`` through at most ten of the
        step's earlier levels (after a pause or a resume), each checked by the guards
        before and after like any level; the readings are not kept."""
        earlier = step.levels[:index]
        stride = max(1, len(earlier) // 10)
        for level in earlier[stride - 1::stride]:
            verdict = guard.before(level)
            if verdict is None:
                r = self.bench.smu.apply_and_read(level)
                self._judgeable(step, None, level, r.voltage_V, r.current_A)
                verdict = guard.after(level, Reading(r.voltage_V, r.current_A,
                                                     bool(r.compliance)))
            if verdict is not None:
                return verdict
        return None

    def _read_smu(self, step: Step, level: float) -> Reading | SmuReading:
        """The reading at ``level`` (settled, averaged); either kind carries the three
        fields the guards and the point take (no copy of a single reading)."""
        smu = self.bench.smu
        r = smu.apply_and_read(level)
        if step.settle_s > 0 and self.time_scale > 0:
            self._sleep(step.settle_s)
            r = smu.apply_and_read(level)
        if step.average == 1:
            return r
        readings = [r] + [smu.apply_and_read(level) for _ in range(step.average - 1)]
        n = len(readings)
        return Reading(sum(x.voltage_V for x in readings) / n,
                       sum(x.current_A for x in readings) / n,
                       any(x.compliance for x in readings))

    def _lcr_step(self, step: Step, start: int) -> tuple[str, Verdict | None]:
        lcr = self.bench.lcr
        self._arm_lcr(step)
        last_bias = None
        clean = False
        try:
            for planned in step.points[start:]:
                if self._checkpoint(step):
                    self._arm_lcr(step)
                    last_bias = None
                bias, f = planned.level, planned.frequency_Hz
                if not self.plan.limits.voltage_allowed(bias):
                    clean = True
                    return self._ended(step, Verdict("voltage", f"bias {bias:g} V is outside "
                                                     "the voltage limits", level=bias))
                if bias != last_bias and step.settle_s > 0 and self.time_scale > 0:
                    lcr.apply_and_read(bias, f)
                    self._sleep(step.settle_s)
                last_bias = bias
                readings = [lcr.apply_and_read(bias, f) for _ in range(step.average)]
                y = sum(r.admittance_S for r in readings) / len(readings)
                cp, gp = parallel_from_admittance(y, f)
                self._judgeable(step, planned.index, bias, cp, gp, frequency_Hz=f)
                point = Point(step.name, planned.index, "cv", self.bus.elapsed_s(),
                              float(readings[-1].bias_V), None, float(f), float(cp), float(gp),
                              temperature_K=self.stage.temperature_K(step.name))
                self._record(step, point)
                if self._settled(step):
                    clean = True
                    return StepStatus.SETTLED, None
            clean = True
            return StepStatus.DONE, None
        finally:
            if clean:
                lcr.bias(False)
                self.bus.emit(ev.Output, step.name, role="lcr", on=False)

    def _arm_lcr(self, step: Step) -> None:
        lcr = self.bench.lcr
        lcr.configure(ac_level_V=step.ac_level_V)
        lcr.bias(True)
        self.bus.emit(ev.Output, step.name, role="lcr", on=True)


def _reading_of(point: Point) -> Reading:
    return Reading(point.voltage_V or 0.0, point.current_A or 0.0, point.compliance)
