"""The ramp to zero: the source comes down at the plan's rate (V/s) with a dwell between
steps, on every way out: the end of a step, the bench's switch-off, and the guardian's
rescue after the run process died. On the simulated bench the dwells follow its time
scale (0: the same steps, no waiting)."""

from __future__ import annotations

import pytest
from plantext import Raw, limits, plan_text, reverse

from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import RAMP_DWELL_S, RAMP_MAX_STEPS, RAMP_RATE_V_PER_S, Smu
from pnbench.drivers.sim.bench import SimBench
from pnbench.errors import PlanError
from pnbench.sweeps import guardian
from pnbench.sweeps.bench import open_bench
from pnbench.sweeps.limits import RAMP_RATE_V_PER_S as PLAN_DEFAULT
from pnbench.sweeps.plan import parse_plan


def plan_with(ramp: str | None = None):
    """A reverse-step plan; ``ramp`` is the TOML value of [limits] ramp_rate (line 9)."""
    text = plan_text(reverse(stop="-30 V", points=7, breakdown_guard="100 uA"),
                     device="LH-QT16",
                     limits=limits(max_voltage="1 V", max_current="50 mA", max_power="50 mW",
                                   ramp_rate=None if ramp is None else Raw(ramp)))
    return parse_plan(text, "p.toml")


@pytest.fixture
def sim():
    with SimBench.start("lh-qt16", time_scale=0.0, off_on_disconnect=False) as bench:
        yield bench


def levels_and_dwells(smu: Smu, start: float) -> tuple[list[float], list[float]]:
    smu.configure(source="voltage", limit=1e-3)
    smu.output(True)
    smu.apply_and_read(start)
    levels, dwells = [], []
    original = smu._set_command

    def spy(level):
        levels.append(level)
        return original(level)

    smu._set_command = spy
    smu.ramp_to_zero(sleep=dwells.append)
    return levels, dwells


@pytest.mark.parametrize("start, rate", [(-32.9, 10.0), (-32.9, 100.0), (5.0, 10.0),
                                         (0.4, 10.0), (-200.0, 10.0)])
def test_the_ramp_keeps_to_the_rate_with_dwells(sim, start, rate):
    with open_session(sim.smu_resource, timeout_ms=1000) as session:
        smu = Smu(session)
        smu.ramp_rate_V_per_s = rate
        levels, dwells = levels_and_dwells(smu, start)
    assert levels[-1] == 0.0 and len(levels) >= 10
    assert all(abs(a) > abs(b) for a, b in zip(levels, levels[1:], strict=False))
    assert len(levels) <= RAMP_MAX_STEPS and len(dwells) == len(levels) - 1
    # time from the first step to zero is |V| / rate (the last dwell follows no step)
    steps = [abs(start)] + [abs(x) for x in levels]
    slopes = [(a - b) / d for a, b, d in zip(steps[1:], steps[2:], dwells, strict=False)]
    assert max(slopes) == pytest.approx(rate, rel=1e-9)
    assert sum(dwells) + dwells[0] == pytest.approx(abs(start) / rate, rel=1e-9)
    assert max(dwells) <= RAMP_DWELL_S or len(levels) == RAMP_MAX_STEPS


def test_the_default_rate_is_one_number():
    """The role's and the plan's default rate are the same number."""
    assert RAMP_RATE_V_PER_S == PLAN_DEFAULT
    assert plan_with().limits.ramp_rate_V_per_s == RAMP_RATE_V_PER_S


def test_plan_key_reads_units_and_refuses_absurd_rates():
    assert plan_with('"2 kV/s"').limits.ramp_rate_V_per_s == 2000.0
    assert plan_with("0.5").limits.ramp_rate_V_per_s == 0.5
    for bad, words in (('"1e-9 V/s"', "outside"), ('"1e9"', "outside"), ('"5 V"', "V/s"),
                       ("-1", "ramp_rate")):
        with pytest.raises(PlanError, match=words) as error:
            plan_with(bad)
        assert "line 9, limits.ramp_rate" in str(error.value)


def test_the_bench_ramps_at_the_plans_rate_and_the_sims_time_scale():
    plan = plan_with('"25 V/s"')
    with open_bench(plan.on_simulated_bench("lh-qt16@pnsim:time_scale=0")) as bench:
        assert bench.smu.ramp_rate_V_per_s == 25.0 and bench.smu.ramp_time_scale == 0.0
        bench.smu.configure(source="voltage", limit=1e-3)
        bench.smu.output(True)
        bench.smu.apply_and_read(-30.0)
        steps, dwell = bench.smu.ramp_plan()
        assert steps == 60 and dwell == 0.0  # 30 V at 25 V/s in 20 ms steps, no waiting
        bench._reconnect("smu")  # a dropped session is reopened with the same ramp
        assert bench.smu.ramp_rate_V_per_s == 25.0 and bench.smu.level == -30.0
        bench.safe_off()
        assert bench.smu.level == 0.0


def test_the_guardian_ramps_at_the_plans_rate(sim, monkeypatch, tmp_path):
    seen = []

    def record(self, sleep=None):
        seen.append((self.source, self.level, self.ramp_rate_V_per_s, self.ramp_plan()))

    monkeypatch.setattr(Smu, "ramp_to_zero", record)
    info = {"resource": sim.smu_resource, "backend": "@py", "dialect": None}
    ok, text = guardian._off("smu", info, ("voltage", -30.0), (25.0, 40.0))
    assert ok, text
    assert seen == [("voltage", -30.0, 25.0, (60, pytest.approx(0.02)))]
    seen.clear()
    ok, _ = guardian._off("smu", info, ("current", -1e-4), (25.0, 40.0))
    assert ok
    # forced current: the terminal voltage is unknown, so the ramp assumes the highest
    # voltage the plan allows
    assert seen == [("current", -1e-4, 25.0, (80, pytest.approx(0.02)))]
