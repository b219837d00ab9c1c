"""One bias point by hand: source a level on the SMU, read once, switch off.

    result = measure_one(plan.on_simulated_bench("lh-vc510@pnsim:time_scale=0"), "0.6 V",
                         "10 mA")

For a first check of a fixture before a sweep. The plan's limits apply as in a sweep:
the level and the compliance are checked before anything is applied (voltage window,
max_current, and the worst-case power level x compliance against max_power, since one
point has no history to predict from), the reading is checked after, and the output is
ramped to zero, switched off and confirmed off on every way out.
"""

from __future__ import annotations

from dataclasses import dataclass

from pnbench.errors import BadInput, SafetyStop
from pnbench.sweeps.limits import Reading, StepGuard
from pnbench.sweeps.quantities import format_quantity, parse_quantity


@dataclass(frozen=True)
class OnePoint:
    source: str  # "voltage" or "current"
    level: float
    compliance: float
    voltage_V: float
    current_A: float
    in_compliance: bool
    outputs_off_confirmed: bool
    identity: str = ""

    def line(self) -> str:
        unit = "V" if self.source == "voltage" else "A"
        flag = "  IN COMPLIANCE" if self.in_compliance else ""
        off = "output off, confirmed" if self.outputs_off_confirmed else (
            "output NOT confirmed off: check the instrument")
        return (f"sourced {format_quantity(self.level, unit, 4)}: "
                f"{format_quantity(self.voltage_V, 'V', 5)}, "
                f"{format_quantity(self.current_A, 'A', 5)}{flag}; {off}")


def parse_request(level_text: str, compliance_text: str) -> tuple[str, float, float]:
    """(source, level, compliance) from '0.6 V' / '1 mA' and the other quantity."""
    text = str(level_text).strip()
    if text.endswith("A"):
        source, unit, other = "current", "A", "V"
    elif text.endswith("V"):
        source, unit, other = "voltage", "V", "A"
    else:
        raise BadInput(f"level {text!r}: give a unit, V to source a voltage (0.6 V) or A "
                       "to source a current (1 mA)")
    level = parse_quantity(text, unit, what="level")
    compliance = parse_quantity(str(compliance_text).strip(), other, what="compliance")
    if compliance <= 0:
        raise BadInput(f"compliance {compliance_text!r}: must be above zero")
    return source, level, compliance


def check_request(plan, source: str, level: float, compliance: float) -> StepGuard:
    """The step guard for this point, or SafetyStop naming the limit it breaks."""
    lim = plan.limits
    if source == "voltage" and compliance > lim.max_current_A:
        raise SafetyStop(f"compliance {format_quantity(compliance, 'A', 3)} is above the "
                         f"plan's max_current {format_quantity(lim.max_current_A, 'A', 3)}")
    if source == "current":
        window = lim.max_voltage_V if level >= 0 else lim.max_reverse_voltage_V
        if compliance > window:
            raise SafetyStop(f"compliance {format_quantity(compliance, 'V', 3)} is beyond "
                             f"the plan's voltage limit {format_quantity(window, 'V', 3)} "
                             "in that direction")
    guard = StepGuard(lim, source, compliance)
    verdict = guard.before(level)
    if verdict is not None:
        raise SafetyStop(verdict.message)
    worst = abs(level) * compliance
    if worst > lim.max_power_W:
        unit, other = ("V", "A") if source == "voltage" else ("A", "V")
        raise SafetyStop(f"{format_quantity(abs(level), unit, 3)} at a compliance of "
                         f"{format_quantity(compliance, other, 3)} could dissipate "
                         f"{format_quantity(worst, 'W', 3)}, above the plan's max_power "
                         f"{format_quantity(lim.max_power_W, 'W', 3)}; lower the compliance")
    return guard


def measure_one(plan, level_text: str, compliance_text: str, *,
                nplc: float = 1.0) -> OnePoint:
    """Check, connect the SMU (the plan's, or the simulated bench its backend names),
    source one level, read, switch off (always)."""
    from pnbench.sweeps.bench import Bench, _open_role, connections_for

    source, level, compliance = parse_request(level_text, compliance_text)
    guard = check_request(plan, source, level, compliance)
    bench = Bench()
    try:
        bench.connections = connections_for(plan, {"smu"})
        smu = bench.roles["smu"] = _open_role(bench.connections["smu"])
        identity = smu.identity
        smu.configure(source, compliance, nplc=nplc)
        smu.output(True)
        reading = smu.apply_and_read(level)
        verdict = guard.after(level, Reading(reading.voltage_V, reading.current_A,
                                             reading.compliance))
    finally:
        off = bench.safe_off() if bench.roles else {}
        bench.close()
    result = OnePoint(source, level, compliance, reading.voltage_V, reading.current_A,
                      reading.compliance, all(off.values()), identity)
    if verdict is not None and verdict.kind != "breakdown_guard":
        raise SafetyStop(f"{verdict.message} ({result.line()})")
    return result
