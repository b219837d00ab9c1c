"""What a plan will cost before it runs: duration and worst-case power, per step.

Duration per point = settle + readings x (integration + overhead), where a reading's
integration is NPLC / line frequency for the SMU and `LCR_READING_S` for the LCR meter,
and a step with a settle time takes one extra reading (the level is applied, the source
settles, then it is read). The overhead per reading (`SMU_OVERHEAD_S`,
`LCR_OVERHEAD_S`) covers command parsing, ranging and transfer: rough figures of
common practice (no source), which a real instrument's manual may correct.

With ``[lcr_correction] apply = "software"`` the open and the short pnbench reads itself
add their readings (`correction_seconds`).

Worst-case power is what a step could put into the device without the runner's power
guard: |V| x compliance current when forcing voltage, |I| x compliance voltage when
forcing current. Above max_power, the runner's prediction ends the step first.
"""

from __future__ import annotations

from dataclasses import dataclass

from pnbench.sweeps.plan import Plan
from pnbench.sweeps.planstep import Step

SMU_OVERHEAD_S = 0.002
LCR_READING_S = 0.03
LCR_OVERHEAD_S = 0.003


@dataclass(frozen=True)
class Estimate:
    total_s: float
    step_s: list[float]
    step_power_W: list[float | None]  # worst case without the power guard; None for LCR
    worst_power_W: float
    guarded_steps: list[str]  # steps whose worst case is above max_power
    thermal_s: float = 0.0  # a run over temperature: the stage's ramps, waits and soaks
    correction_s: float = 0.0  # pnbench's own readings of the open and the short

    def to_json_dict(self) -> dict:
        return {"total_s": self.total_s, "step_s": self.step_s,
                "step_power_W": self.step_power_W, "worst_power_W": self.worst_power_W,
                "guarded_steps": self.guarded_steps, "thermal_s": self.thermal_s,
                "correction_s": self.correction_s}


def step_seconds(step: Step, line_frequency_Hz: float = 50.0) -> float:
    if step.instrument == "smu":
        reading = step.nplc / line_frequency_Hz + SMU_OVERHEAD_S
        readings = step.average + (1 if step.settle_s > 0 else 0)
        return step.planned * (step.settle_s + readings * reading)
    biases = len(set(step.biases))
    reading = LCR_READING_S + LCR_OVERHEAD_S
    settle = biases * (step.settle_s + (reading if step.settle_s > 0 else 0.0))
    return settle + step.planned * step.average * reading


def step_worst_power_W(step: Step) -> float | None:
    if step.instrument != "smu":
        return None
    levels = step.levels  # a range: its ends are its extremes
    return max(abs(levels[0]), abs(levels[-1])) * float(step.compliance or 0.0)


def estimate(plan: Plan) -> Estimate:
    per_step = [step_seconds(s, plan.line_frequency_Hz) for s in plan.steps]
    power = [step_worst_power_W(s) for s in plan.steps]
    worst = max((p for p in power if p is not None), default=0.0)
    guarded = [s.name for s, p in zip(plan.steps, power, strict=True)
               if p is not None and p > plan.limits.max_power_W]
    thermal = 0.0
    if plan.temperature is not None:
        from pnbench.sweeps.thermalplan import thermal_seconds

        thermal = thermal_seconds(plan.temperature)
    fixture = correction_seconds(plan)
    return Estimate(total_s=sum(per_step) + thermal + fixture, step_s=per_step,
                    step_power_W=power, worst_power_W=worst, guarded_steps=guarded,
                    thermal_s=thermal, correction_s=fixture)


def correction_seconds(plan: Plan) -> float:
    """The time of pnbench's own readings of the open and the shorted fixture
    (``[lcr_correction] apply = "software"``: `sweeps.fixturereadings`), at each set
    point with ``every_set_point``; 0 otherwise (the meter's own correction takes the
    meter's time, which its manual states)."""
    correction = plan.correction
    if correction is None or correction.apply != "software":
        return 0.0
    from pnbench.sweeps.fixturereadings import level_frequency_pairs, readings_for

    once = (len(level_frequency_pairs(plan)) * readings_for(plan) * len(correction.which)
            * (LCR_READING_S + LCR_OVERHEAD_S))
    if not correction.every_set_point:
        return once
    return once * len({s.set_point_K for s in plan.steps if s.instrument == "lcr"})
