"""Stage temperatures in plans, and bringing the simulated stage to them.

The simulated stage is a first-order lag behind a ramp (drivers/sim/stage.py) on a
simulated clock, so waits of minutes take no wall time.
"""

from __future__ import annotations

import math

import pytest

from pnbench.drivers.opening import open_session
from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.device import parse_device
from pnbench.drivers.sim.stage import SimClock
from pnbench.drivers.stage import StageLimits, ThermalStage
from pnbench.errors import BadInput, InstrumentError
from pnbench.sweeps.planread import Problems, TableReader
from pnbench.sweeps.thermal import Watch, settle
from pnbench.sweeps.thermalplan import TemperaturePlan, kelvin, ramp_rate, read_temperature

STAGE = "[stage]\ntime_constant_s = 20.0\nreading_noise_K = 0.02\nreach_high_K = 420.0\n"


def _read(table: dict, ratings=None, steps=("iv", "cv")):
    problems = Problems("plan.toml", {})
    warnings: list[str] = []
    plan = read_temperature(TableReader(table, ("temperature",), problems), set(steps),
                            ratings, warnings)
    return plan, problems.items, warnings


def test_units_of_temperatures_and_ramp_rates():
    assert kelvin("25 degC") == pytest.approx(298.15)
    assert kelvin("300 K") == 300.0 and kelvin(77) == 77.0
    assert ramp_rate("10 K/min") == 10.0 and ramp_rate(2.5) == 2.5
    for bad in ("hot", -5, "2000 K", True):
        with pytest.raises(BadInput):
            kelvin(bad)
    with pytest.raises(BadInput):
        ramp_rate("-1 K/min")


def test_a_complete_table_reads():
    plan, problems, warnings = _read({
        "set_points": ["-10 degC", 300, "350 K", "125 degC"], "ramp_rate": "5 K/min",
        "soak": "30 s", "stable_within": "0.2 K", "stable_for": "20 s",
        "lowest": "-40 degC", "highest": "150 degC", "device_rated_min": "-55 degC",
        "device_rated_max": "150 degC", "only": {"cv": ["350 K"]}})
    assert problems == []
    assert plan.set_points_K == pytest.approx((263.15, 300.0, 350.0, 398.15))
    assert plan.standby_K == pytest.approx(298.15)
    assert plan.runs_at("iv", 263.15) and not plan.runs_at("cv", 300.0)
    assert plan.runs_at("cv", 350.0)
    assert any("dew point" in w for w in warnings)  # -10 degC


@pytest.mark.parametrize("table, fragment", [
    ({"set_points": [300], "highest": 400}, "missing key 'lowest'"),
    ({"set_points": [300, 500], "lowest": 250, "highest": 400}, "item 2: 500 K is outside"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "standby": 200}, "standby"),
    ({"set_points": [390], "lowest": 250, "highest": 400, "device_rated_min": 230,
      "device_rated_max": 380}, "rated range"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "device_rated_min": 230},
     "both ends"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "only": {"xx": [300]}},
     "not the name of a step"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "only": {"cv": [310]}},
     "not one of the set points"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "soak": "1 min"}, "soak"),
    ({"set_points": [300], "lowest": 250, "highest": 400, "sok": "10 s"}, "did you mean"),
    ({"set_points": [], "lowest": 250, "highest": 400}, "empty"),
])
def test_problems_name_the_key(table, fragment):
    plan, problems, _ = _read(table)
    assert any(fragment in p for p in problems), problems


def test_the_stage_ratings_bound_the_plan():
    _, problems, _ = _read({"set_points": [300], "lowest": 200, "highest": 500,
                            "ramp_rate": 20},
                           ratings={"min_temperature": 220.0, "max_temperature": 470.0,
                                    "max_ramp_rate": 10.0})
    text = " ".join(problems)
    assert "below the stage's rating" in text and "above the stage's rating" in text
    assert "10 K/min" in text


@pytest.fixture
def bench():
    with SimBench.start(parse_device(STAGE), clock=SimClock(0.0, driven=True)) as b:
        yield b


def _plan(**kw) -> TemperaturePlan:
    base = {"set_points_K": (350.0,), "ramp_K_per_min": 20.0, "soak_s": 30.0,
            "stable_within_K": 0.1, "stable_for_s": 20.0, "timeout_s": 1800.0,
            "lowest_K": 220.0, "highest_K": 470.0}
    return TemperaturePlan(**{**base, **kw})


def test_settle_ramps_waits_for_stability_and_soaks(bench):
    events: list[tuple[str, dict]] = []
    with open_session(bench.stage_resource) as session:
        stage = ThermalStage(session, limits=StageLimits(220.0, 470.0, 30.0))
        done = settle(stage, bench.clock, 350.0, _plan(), lambda k, d: events.append((k, d)))
    kinds = [k for k, _ in events]
    assert kinds[0] == "stage_ramping" and kinds[-1] == "stage_stable"
    # 50 K at 20 K/min is 150 s, then a lag of 20 s to within 0.1 K, 20 s stable, 30 s soak
    assert 150.0 + 20.0 * math.log(50.0 / 0.1) * 0.5 < done.waited_s < 400.0
    assert done.temperature_K == pytest.approx(350.0, abs=0.1)
    assert bench.device_temperature_K() == pytest.approx(350.0, abs=0.01)


def test_a_stage_that_cannot_get_there_stops_with_an_instrument_error(bench):
    """reach_high_K = 420 K: a 450 K set point is accepted but never reached."""
    with open_session(bench.stage_resource) as session:
        stage = ThermalStage(session, limits=StageLimits(220.0, 470.0, 30.0))
        with pytest.raises(InstrumentError, match="did not reach and hold 450 K within 900 s"):
            settle(stage, bench.clock, 450.0, _plan(timeout_s=900.0), lambda k, d: None)


def test_an_operator_stop_ends_the_wait(bench):
    calls = []
    with open_session(bench.stage_resource) as session:
        stage = ThermalStage(session, limits=StageLimits(220.0, 470.0, 30.0))
        result = settle(stage, bench.clock, 400.0, _plan(), lambda k, d: None,
                        should_stop=lambda: calls.append(1) or len(calls) > 3)
    assert result is None and len(calls) == 4


def test_watch_reads_once_per_poll_and_warns_once_per_excursion(bench):
    events = []
    with open_session(bench.stage_resource) as session:
        stage = ThermalStage(session, limits=StageLimits(220.0, 470.0, 30.0))
        plan = _plan(poll_s=5.0)
        settle(stage, bench.clock, 320.0, plan, lambda k, d: None)
        watch = Watch(stage, bench.clock, 320.0, plan, lambda k, d: events.append((k, d)))
        first = watch.reading("iv")
        assert watch.reading("iv") == first  # same poll: no new reading
        stage.set_point(330.0)  # the stage is disturbed
        for _ in range(4):
            bench.clock.sleep(5.0)
            watch.reading("iv")
    drifts = [d for k, d in events if k == "stage_drifting"]
    assert len(drifts) == 1 and drifts[0]["during"] == "iv"
