"""Bias-point generation and the guards, as pure functions."""

from __future__ import annotations

import math

import pytest

from pnbench.modeling.junction import current
from pnbench.modeling.params import DiodeParams
from pnbench.sweeps import points as pts
from pnbench.sweeps.limits import Limits, Reading, StepGuard

LIM = Limits(max_voltage_V=2.0, max_reverse_voltage_V=30.0, max_current_A=0.1,
             max_power_W=0.05)


def test_linear_log_and_decades():
    assert pts.linear(0, 1, 5) == [0.0, 0.25, 0.5, 0.75, 1.0]
    assert pts.linear(0.3, 9, 1) == [0.3]
    lg = pts.logarithmic(-1e-3, -1, 4)
    assert lg == pytest.approx([-1e-3, -1e-2, -1e-1, -1])
    assert len(pts.decades(1e-9, 1e-3, 5)) == 31
    assert len(pts.decades(1e-9, 3e-3, 10)) == 66  # 6.48 decades, rounded
    with pytest.raises(ValueError):
        pts.logarithmic(0, 1, 3)


def test_lcr_points_bias_outer_frequency_inner():
    got = pts.lcr_points([0, -1], [1e5, 1e6, 2e6])
    assert [(p.index, p.level, p.frequency_Hz) for p in got][:4] == [
        (0, 0, 1e5), (1, 0, 1e6), (2, 0, 2e6), (3, -1, 1e5)]


def test_ramp_levels_step_at_most_max():
    ramp = pts.ramp_levels(-25.0, 0.0, 2.0)
    assert ramp[-1] == 0.0 and len(ramp) == 13
    assert max(abs(b - a) for a, b in zip([-25.0, *ramp], ramp, strict=False)) <= 2.0


def test_power_prediction_follows_the_exponential():
    """Forward current of a junction grows e-fold per N*Vt (Shockley 1949; docs/physics.md §2): the
    guard extrapolates log I linearly, so it stops before the level that would exceed
    max_power, where a straight-line extrapolation would not."""
    p = DiodeParams(IS=1e-14, N=1.0)
    guard = StepGuard(LIM, "voltage", compliance=0.1)
    levels = [0.5 + 0.01 * k for k in range(40)]
    stopped = None
    for v in levels:
        verdict = guard.before(v)
        if verdict is not None:
            stopped = v
            assert verdict.kind == "power"
            break
        i = float(current(v, p))
        assert v * i <= LIM.max_power_W
        assert guard.after(v, Reading(v, i)) is None
    assert stopped is not None
    true_power = stopped * float(current(stopped, p))
    assert true_power > LIM.max_power_W * 0.5  # it did not stop absurdly early


def test_voltage_limits_checked_before():
    guard = StepGuard(LIM, "voltage", compliance=1e-3)
    assert guard.before(-31.0).kind == "voltage"
    assert guard.before(2.5).kind == "voltage"
    assert guard.before(-29.0) is None
    cur = StepGuard(LIM, "current", compliance=2.0)
    assert cur.before(0.2).kind == "current"


def test_breakdown_guard_and_compliance_storm():
    guard = StepGuard(LIM, "voltage", compliance=1e-3, breakdown_guard_A=1e-4)
    assert guard.after(-10, Reading(-10, -1e-9)) is None
    assert guard.after(-20, Reading(-20, -2e-4)).kind == "breakdown_guard"
    storm = StepGuard(LIM, "voltage", compliance=1e-3)
    verdicts = [storm.after(v, Reading(v, 1e-3, True)) for v in (0.7, 0.71, 0.72)]
    assert verdicts[:2] == [None, None] and verdicts[2].kind == "compliance_storm"
    reset = StepGuard(LIM, "voltage", compliance=1e-3)
    for k, comp in enumerate([True, True, False, True, True]):
        assert reset.after(0.7 + k / 100, Reading(0.7, 1e-3 if comp else 5e-4, comp)) is None


def test_overshoot_beyond_compliance_ends_the_run():
    guard = StepGuard(LIM, "voltage", compliance=1e-3)
    verdict = guard.after(0.8, Reading(0.8, 5e-3, True))
    assert verdict.kind == "overshoot" and verdict.ends == "run"
    forced = StepGuard(LIM, "current", compliance=1.0)
    assert forced.after(1e-3, Reading(1.3, 1e-3, True)).ends == "run"


def test_current_forced_prediction_follows_the_junction_law():
    """V = N Vt ln(I/IS) + I RS for a forced current (docs/physics.md §2, RS in series): three
    readings determine the next voltage exactly, two give the ideal-diode estimate."""
    p = DiodeParams(IS=1e-14, N=1.05, RS=2.0)
    vt = 0.025865 * p.N

    def v_of(i):
        return vt * math.log(i / p.IS + 1) + i * p.RS

    guard = StepGuard(LIM, "current", compliance=2.0)
    for i in (1e-6, 1e-5):
        guard.after(i, Reading(v_of(i), i))
    assert guard.predicted_power_W(1e-4) == pytest.approx(1e-4 * v_of(1e-4), rel=1e-3)
    guard.after(1e-4, Reading(v_of(1e-4), 1e-4))
    assert guard.predicted_power_W(0.03) == pytest.approx(0.03 * v_of(0.03), rel=1e-3)
