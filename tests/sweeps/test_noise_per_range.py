"""An SMU's stated current floor per range (a plan's `current_noise_floor_per_range`, a
dialect's `current_floor_per_range_A`): each reading takes the floor of the range it was
read in (the smallest listed range at or above it: the autorange rule), so a fit of data
whose floor grows with the range is judged fairly, where one floor for all misjudges it.
Bad tables stop with the key named, exit 2. Percent of reading plus a floor per range is
how instrument specifications state accuracy (common practice, no source)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from plantext import Raw, cv, forward, plan_text

from pnbench.drivers.dialect import default_dialect_text, parse_dialect_text
from pnbench.errors import DialectError, PlanError
from pnbench.modeling import fit_iv, junction, misfit
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.stated import StatedNoise, floor_table
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.statednoise import fit_noise, run_noise
from pnbench.tui import cli

TABLE = ((1e-6, 2e-12), (1e-4, 1e-10), (1e-2, 5e-9))


def test_each_reading_takes_the_floor_of_its_range():
    noise = StatedNoise(1e-4, 0.0, floor_by_range=TABLE)
    floors = noise.floors(np.array([0.0, 5e-7, 1e-6, 2e-6, -3e-5, 1e-3, 0.5]))
    # 1e-6 still fits the 1 uA range; above the largest listed range its floor stays
    assert floors == pytest.approx([2e-12, 2e-12, 2e-12, 1e-10, 1e-10, 5e-9, 5e-9], abs=0)
    assert noise.smallest_floor == 2e-12
    # a flat floor and a floor per range: the larger holds
    both = StatedNoise(1e-4, 5e-11, floor_by_range=TABLE)
    assert both.floors(np.array([1e-7, 1e-5])) == pytest.approx([5e-11, 1e-10], abs=0)
    assert StatedNoise.from_json_dict(json.loads(json.dumps(noise.to_json_dict()))) == noise
    for bad in ({"1e-6": -1.0}, [(0.0, 1e-12)], [(1e-6, 1e-12), (1e-6, 2e-12)], "x",
                [(1e-6, float("nan"))]):
        with pytest.raises(ValueError, match="floor per range"):
            floor_table(bad)


def test_a_fit_is_judged_by_the_floor_of_each_points_range():
    """Forward I-V over seven decades, its noise 0.01 % + the floor of each point's
    range: stated per range, chi-square is the noise; stated as the smallest range's floor
    alone, the upper ranges' points look like a misfit."""
    p = DiodeParams(IS=1e-14, N=1.0, RS=0.5)
    v = np.linspace(0.25, 0.85, 90)
    i0 = np.asarray(junction.current(v, p))
    per_range = StatedNoise(1e-4, 0.0, floor_by_range=((1e-6, 2e-12), (1e-4, 5e-10),
                                                        (1e-2, 5e-8)))
    rng = np.random.default_rng(8)
    i = i0 + per_range.sigma(i0) * rng.standard_normal(v.size)
    fair = fit_iv.fit_forward(v, i, noise=per_range)
    lof = fair.extras["lack_of_fit"]
    assert lof["chi2_probability"] > misfit.P_MISFIT and not lof["misfit"]
    assert abs(fair.values["N"] - 1.0) < 4 * fair.sigmas["N"]
    one = fit_iv.fit_forward(v, i, noise=StatedNoise(1e-4, 2e-12))
    assert one.extras["lack_of_fit"]["chi2_probability"] < misfit.P_MISFIT
    assert "exceed the stated instrument noise" in one.message


def _inline(table: object) -> object:
    """A TOML inline table for the plan builder (other values as they are)."""
    if not isinstance(table, dict):
        return table
    return Raw("{ " + ", ".join(f"{json.dumps(k)} = {json.dumps(v)}"
                                for k, v in table.items()) + " }")


def _plan(smu: dict) -> str:
    smu = {k: _inline(v) for k, v in smu.items()}
    return plan_text(forward(), cv(), instruments={
        "smu": {"resource": "TCPIP0::192.0.2.31::5025::SOCKET", **smu},
        "lcr": {"resource": "TCPIP0::192.0.2.32::5025::SOCKET"}})


def test_a_plan_states_a_floor_per_range(tmp_path, capsys):
    text = _plan({"current_noise_percent": 0.01, "current_noise_floor_per_range":
                  {"1 uA": "2 pA", "100uA": 1e-10, "1e-2": "5 nA"}})
    plan = parse_plan(text)
    assert np.allclose(plan.instruments["smu"].noise.floor_by_range, TABLE, rtol=1e-12,
                       atol=0)
    stated = json.loads(json.dumps(run_noise(plan)))  # as run.json keeps it
    assert fit_noise(stated)["iv"] == plan.instruments["smu"].noise
    path = tmp_path / "plan.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "per range: 2 pA up to 1 uA, 100 pA up to 100 uA, 5 nA up to 10 mA" in out
    # a floor per range alone is a stated current noise
    alone = parse_plan(_plan({"current_noise_floor_per_range": {"1 uA": "2 pA"}}))
    assert alone.instruments["smu"].noise.relative == 0.0


@pytest.mark.parametrize("table, words", [
    ("lots", "expected a table of current range = noise floor"),
    ({}, "expected a table of current range = noise floor"),
    ({"1 uX": "2 pA"}, "range '1 uX'"),
    ({"-1 uA": "2 pA"}, "range '-1 uA'"),
    ({"0": "2 pA"}, "must be above zero"),
    ({"1 uA": "-2 pA"}, "the floor of range '1 uA'"),
    ({"1 uA": True}, "expected a floor in A"),
    ({"1 uA": "2 pV"}, "unit 'V'"),
    ({"1 uA": "2 pA", "1e-6": "3 pA"}, "lists a range twice"),
])
def test_a_bad_floor_per_range_is_refused_with_its_key(table, words, tmp_path, capsys):
    text = _plan({"current_noise_floor_per_range": table})
    with pytest.raises(PlanError, match="current_noise_floor_per_range") as info:
        parse_plan(text)
    assert words in str(info.value)
    path = tmp_path / "plan.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "current_noise_floor_per_range" in err and "1 problem:" in err


def test_a_dialect_states_a_floor_per_range():
    text = default_dialect_text() + (
        '\n[smu_noise]\ncurrent_percent = 0.01\n'
        'current_floor_per_range_A = { "1e-6" = 2e-12, "1e-4" = 1e-10, "1e-2" = 5e-9 }\n')
    assert parse_dialect_text(text, "d.toml").noise["smu"].floor_by_range == TABLE
    for bad, words in (('{ "1e-6" = "2 pA" }', "expected a table"),
                       ('{ "x" = 2e-12 }', "pairs of numbers"),
                       ('{ "1e-6" = 2.0 }', "above 1 A"),
                       ('{ "1e-6" = -2e-12 }', "floors of zero or more"),
                       ("3", "expected a table")):
        broken = default_dialect_text() + f"\n[smu_noise]\ncurrent_floor_per_range_A = {bad}\n"
        with pytest.raises(DialectError, match="current_floor_per_range_A") as info:
            parse_dialect_text(broken, "d.toml")
        assert words in str(info.value)
