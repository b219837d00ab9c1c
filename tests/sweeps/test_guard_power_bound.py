"""The power guard skips its extrapolation where no prediction can reach max_power.

`StepGuard.before` predicts the power at the next level as |level| times the measured
quantity extrapolated from the last readings, capped at the compliance. Where
|level| x compliance is at most max_power no prediction can exceed it, so the guard
returns without extrapolating; these tests check that the verdicts are the ones the
full prediction gives. Common practice, no source.
"""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st

from pnbench.sweeps.limits import Limits, Reading, StepGuard

values = st.floats(min_value=-5.0, max_value=5.0, allow_nan=False)
currents = st.floats(min_value=-2.0, max_value=2.0, allow_nan=False)


def _by_prediction(guard: StepGuard, level: float) -> bool:
    """Whether the full prediction stops ``level`` for its power."""
    return guard.predicted_power_W(level) > guard.limits.max_power_W


@given(st.sampled_from(["voltage", "current"]), st.floats(1e-6, 3.0),
       st.floats(1e-6, 2.0), st.lists(st.tuples(values, currents), max_size=3), values)
def test_verdicts_are_those_of_the_full_prediction(source, compliance, max_power, history,
                                                   level):
    limits = Limits(max_voltage_V=10.0, max_reverse_voltage_V=10.0, max_current_A=10.0,
                    max_power_W=max_power)
    guard = StepGuard(limits, source, compliance)
    for lv, measured in history:
        guard.history.append((lv, measured))
    verdict = guard.before(level)
    assert (verdict is not None and verdict.kind == "power") == _by_prediction(guard, level)


def test_no_extrapolation_below_the_bound(monkeypatch):
    limits = Limits(max_voltage_V=2.0, max_reverse_voltage_V=2.0, max_current_A=0.1,
                    max_power_W=1.0)
    guard = StepGuard(limits, "voltage", compliance=0.1)  # 2 V x 0.1 A < 1 W
    guard.after(0.5, Reading(0.5, 1e-3))
    guard.after(0.6, Reading(0.6, 1e-2))
    calls = []
    monkeypatch.setattr(guard, "predicted_power_W", lambda level: calls.append(level) or 0.0)
    assert guard.before(0.7) is None and calls == []
    guard.compliance = 2.0  # now 0.7 V x 2 A could exceed 1 W: the prediction decides
    assert guard.before(0.7) is None and calls == [0.7]
