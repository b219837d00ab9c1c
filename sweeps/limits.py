"""Safety limits: the plan's ceilings and the checks made before and after every level.

Pure logic, no I/O. The runner asks `StepGuard.before(level)` before it applies a level and
`StepGuard.after(reading)` once the reading is in; either may return a `Verdict` that ends
the step (a limit reached, breakdown found, a storm of compliance readings) or the run (a
reading the instrument should never have produced).

The power limit is checked before a level is applied by predicting the next reading from
the last ones: the current of a forward-biased junction grows exponentially with voltage,
so the prediction extrapolates log|I| linearly in V (an upper bound once series
resistance bends the curve), never below a straight line; for a forced current it passes
V = a + b ln I + R I through the last three readings. Neither goes above what the
compliance setting allows. A prediction is an estimate; the reading is checked again afterwards.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import asdict, dataclass

#: Voltage above which a plan must carry an explicit acknowledgment. IEC 61010-1 treats
#: DC voltages above 60 V as hazardous-live in dry locations in its older editions (from
#: memory; thresholds differ between editions and with conditions: 30 V rms, 42.4 V peak
#: and 60 V DC are the commonly quoted values). Local codes and the lab's rules come first.
HAZARDOUS_VOLTAGE_V = 60.0

#: Consecutive compliance readings after which a step ends (a "compliance storm").
COMPLIANCE_STORM_COUNT = 3

#: Rate at which the source comes down to zero on every way out (V/s; [limits]
#: ramp_rate), and the rates a plan may set. The default is the SMU role's
#: (drivers.roles.RAMP_RATE_V_PER_S), whose comment gives the reasoning.
RAMP_RATE_V_PER_S = 10.0
RAMP_RATE_RANGE = (0.1, 1e4)

#: Margin before a reading over the current limit counts as the instrument failing to
#: hold its compliance (a reading at the limit is normal: that is what compliance does).
OVERSHOOT_MARGIN = 0.05


@dataclass(frozen=True)
class Limits:
    """The plan's ceilings. Voltages are magnitudes; the reverse one applies below 0 V."""

    max_voltage_V: float
    max_reverse_voltage_V: float
    max_current_A: float
    max_power_W: float
    hazardous_ack_V: float | None = None
    ramp_rate_V_per_s: float = RAMP_RATE_V_PER_S

    def to_json_dict(self) -> dict:
        return asdict(self)

    def voltage_allowed(self, v: float) -> bool:
        return -self.max_reverse_voltage_V <= v <= self.max_voltage_V

    def highest_voltage_V(self) -> float:
        return max(self.max_voltage_V, self.max_reverse_voltage_V)


@dataclass(frozen=True)
class Verdict:
    """Why a step (or the run) has to end. ``kind`` names the guard that fired:
    ``voltage``, ``current``, ``power``, ``breakdown_guard``, ``compliance_storm``,
    ``overflow`` (a reading that is not a finite number: the SCPI overflow or
    not-a-number marker, which no guard can judge) or ``overshoot``; ``ends`` is
    ``"step"`` or ``"run"``."""

    kind: str
    message: str
    ends: str = "step"
    level: float | None = None


@dataclass(frozen=True)
class Reading:
    """What the guards need from a reading: terminal voltage, current, compliance flag."""

    voltage_V: float
    current_A: float
    compliance: bool = False


def _extrapolate_current(history: deque, v_next: float) -> float:
    (v1, i1), (v2, i2) = history[-2], history[-1]
    linear = abs(i2) + abs((i2 - i1) / (v2 - v1) * (v_next - v2)) if v2 != v1 else abs(i2)
    exponential = abs(i2)
    if i1 != 0 and i2 != 0 and (i1 > 0) == (i2 > 0) and v2 != v1:
        slope = math.log(abs(i2) / abs(i1)) / (v2 - v1)
        exponent = slope * (v_next - v2)
        if slope > 0 and exponent > 0:
            exponential = abs(i2) * math.exp(min(exponent, 50.0))
    return max(linear, exponential)


def _extrapolate_voltage(history: deque, i_next: float) -> float:
    """|V| at a forced current from the last readings, with the junction law with series
    resistance V = a + b ln I + R I (b, R >= 0): solved exactly through three readings,
    through two without R; with mixed signs, a straight line."""
    pts = [(i, v) for i, v in history if i > 0]
    if i_next > 0 and len(pts) >= 2:
        last_i, last_v = pts[-1]
        if len(pts) >= 3:
            import numpy as np  # here, so that reading a plan does not load numpy

            rows = np.array([[1.0, math.log(i), i] for i, _ in pts[-3:]])
            try:
                a, b, r = np.linalg.solve(rows, np.array([v for _, v in pts[-3:]]))
            except np.linalg.LinAlgError:
                a = None
            if a is not None and b >= 0 and r >= 0:
                return abs(a + b * math.log(i_next) + r * i_next)
        (i1, v1), (i2, v2) = pts[-2], pts[-1]
        if i1 != i2:
            per_ln = max((v2 - v1) / math.log(i2 / i1), 0.0)
            return abs(last_v + per_ln * math.log(i_next / last_i))
    (i1, v1), (i2, v2) = history[-2], history[-1]
    return abs(v2) + abs((v2 - v1) / (i2 - i1) * (i_next - i2)) if i2 != i1 else abs(v2)


class StepGuard:
    """The guards of one SMU step.

    ``source`` is ``"voltage"`` or ``"current"``; ``compliance`` the limit set on the other
    quantity (A when sourcing voltage, V when sourcing current); ``breakdown_guard_A`` ends
    a reverse step when |I| reaches it.
    """

    def __init__(self, limits: Limits, source: str, compliance: float,
                 breakdown_guard_A: float | None = None) -> None:
        self.limits = limits
        self.source = source
        self.compliance = abs(compliance)
        self.breakdown_guard_A = breakdown_guard_A
        self.history: deque = deque(maxlen=3)  # (source level, measured other quantity)
        self.consecutive_compliance = 0

    def predicted_power_W(self, level: float) -> float:
        """Power the device would take at ``level``, from the last two readings."""
        if self.source == "voltage":
            if len(self.history) < 2:
                current = abs(self.history[-1][1]) if self.history else 0.0
            else:
                current = _extrapolate_current(self.history, level)
            return abs(level) * min(current, self.compliance)
        if len(self.history) < 2:
            volts = abs(self.history[-1][1]) if self.history else 0.0
        else:
            volts = _extrapolate_voltage(self.history, level)
        return abs(level) * min(volts, self.compliance)

    def before(self, level: float) -> Verdict | None:
        """A verdict if ``level`` must not be applied."""
        lim = self.limits
        if self.source == "voltage" and not lim.voltage_allowed(level):
            return Verdict("voltage", f"level {level:g} V is outside the voltage limits "
                           f"(-{lim.max_reverse_voltage_V:g} V to {lim.max_voltage_V:g} V)",
                           level=level)
        if self.source == "current" and abs(level) > lim.max_current_A:
            return Verdict("current", f"level {level:g} A exceeds max_current "
                           f"{lim.max_current_A:g} A", level=level)
        # the measured quantity is held at the compliance, so below this bound no
        # prediction can exceed max_power: the extrapolation is skipped (same verdicts)
        if abs(level) * self.compliance <= lim.max_power_W:
            return None
        power = self.predicted_power_W(level)
        if power > lim.max_power_W:
            return Verdict("power", f"the next level {level:g} "
                           f"{'V' if self.source == 'voltage' else 'A'} would dissipate about "
                           f"{power:.3g} W, above max_power {lim.max_power_W:g} W",
                           level=level)
        return None

    def after(self, level: float, reading: Reading) -> Verdict | None:
        """A verdict if the reading ends the step or the run; updates the history."""
        lim = self.limits
        v, i = reading.voltage_V, reading.current_A
        if not (math.isfinite(v) and math.isfinite(i)):
            return Verdict("overflow", f"reading {v!r} V, {i!r} A is not a finite number: "
                           "the guards cannot judge it", "run", level)
        other = i if self.source == "voltage" else v
        self.history.append((level, other))
        i_cap, v_cap = lim.max_current_A, None
        if self.source == "voltage":
            i_cap = min(i_cap, self.compliance)
        else:
            v_cap = self.compliance
        if abs(i) > i_cap * (1 + OVERSHOOT_MARGIN) or (
            not lim.voltage_allowed(v * (1 - OVERSHOOT_MARGIN))) or (
                v_cap is not None and abs(v) > v_cap * (1 + OVERSHOOT_MARGIN)):
            return Verdict("overshoot", f"reading {v:g} V, {i:g} A is beyond the "
                           "compliance and limits set: the instrument did not hold its "
                           "compliance", "run", level)
        if self.breakdown_guard_A is not None and abs(i) >= self.breakdown_guard_A:
            return Verdict("breakdown_guard", f"|I| = {abs(i):.3g} A reached the breakdown "
                           f"guard {self.breakdown_guard_A:g} A at {v:.4g} V", level=level)
        if abs(v * i) > lim.max_power_W:
            return Verdict("power", f"measured {abs(v * i):.3g} W at {v:.4g} V, above "
                           f"max_power {lim.max_power_W:g} W", level=level)
        if reading.compliance:
            self.consecutive_compliance += 1
            if self.consecutive_compliance >= COMPLIANCE_STORM_COUNT:
                return Verdict("compliance_storm", f"{self.consecutive_compliance} readings "
                               "in a row in compliance: the rest of the step would only "
                               "push harder against the limit", level=level)
        else:
            self.consecutive_compliance = 0
        return None


def not_finite(step: str, instrument: str, where: str, values: tuple[float, ...]
               ) -> str | None:
    """Why a reading cannot be judged (None when every value is a finite number). The
    SCPI overflow (9.9E37) and not-a-number (9.91E37) markers read as inf and NaN: no
    guard can say whether the next level is safe after them, so the run must end."""
    if all(math.isfinite(x) for x in values):
        return None
    shown = ", ".join(repr(float(x)) for x in values)
    return (f"step {step}, {where}: the {instrument.upper()} answered a reading that is "
            f"not a finite number ({shown}; an overflow or not-a-number marker); the safety "
            "checks cannot judge it, so the source was ramped down and the run ended")
