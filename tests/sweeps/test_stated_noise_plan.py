"""A plan or a dialect states an instrument's noise; run.json records it with its source
(the simulated bench's device file, else the plan, else the dialect). Bad figures stop
with the file and key named, exit 2 (docs/plan-format.md, docs/dialects.md; common
practice, no source)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from plantext import cv, forward, plan_text

from pnbench.drivers.dialect import default_dialect_text, load_dialect, parse_dialect_text
from pnbench.errors import DialectError, PlanError
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.statednoise import fit_noise, run_noise
from pnbench.tui import cli

EXAMPLES = Path(__file__).resolve().parents[2] / "drivers" / "dialects" / "examples"
SMU_NOISE = {"current_noise_percent": 0.02, "current_noise_floor": "50 pA",
             "voltage_noise_percent": 0.005, "voltage_noise_floor": "30 uV"}


def _plan(smu: dict | None = None, lcr: dict | None = None) -> str:
    return plan_text(forward(), cv(), instruments={
        "smu": {"resource": "TCPIP0::192.0.2.31::5025::SOCKET", **(smu or {})},
        "lcr": {"resource": "TCPIP0::192.0.2.32::5025::SOCKET", **(lcr or {})}})


def test_a_plan_states_the_noise_in_its_units():
    plan = parse_plan(_plan(SMU_NOISE, {"noise_percent": 0.05, "noise_floor": "3 fF"}))
    smu = plan.instruments["smu"].noise
    assert smu.relative == pytest.approx(2e-4) and smu.floor == pytest.approx(5e-11)
    assert smu.voltage.relative == pytest.approx(5e-5)
    assert smu.voltage.floor == pytest.approx(3e-5)
    stated = run_noise(plan)
    assert stated["cv"]["relative"] == pytest.approx(5e-4)
    assert stated["cv"]["floor"] == pytest.approx(3e-15)
    assert stated["iv"]["source"] == "plan [instruments.smu]"
    noise = fit_noise(json.loads(json.dumps(stated)))  # as read back from run.json
    assert noise["iv"] == smu


@pytest.mark.parametrize("smu, lcr, key", [
    ({"current_noise_floor": "-5 pA"}, None, "current_noise_floor"),
    ({"current_noise_percent": 80}, None, "current_noise_percent"),
    ({"voltage_noise_percent": 0.01}, None, "current_noise_percent"),
    ({"noise_floor": "2 fF"}, None, "noise_floor"),
    (None, {"current_noise_percent": 0.01}, "current_noise_percent"),
    (None, {"noise_percent": "lots"}, "noise_percent"),
])
def test_bad_noise_keys_are_named(smu, lcr, key, tmp_path, capsys):
    text = _plan(smu, lcr)
    with pytest.raises(PlanError, match=key):
        parse_plan(text)
    path = tmp_path / "plan.toml"
    path.write_text(text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert key in err
    assert "1 problem:" in err  # a refused figure is said once, not again as "missing"


def _dialect_with(table: str) -> str:
    return default_dialect_text() + "\n" + table


def test_a_dialect_states_the_noise_and_the_default_states_none():
    assert load_dialect().noise == {}
    smu = load_dialect(EXAMPLES / "harrow-lane-smu.toml").noise["smu"]
    assert smu.relative > 0 and smu.voltage is not None
    assert load_dialect(EXAMPLES / "harrow-lane-lcr.toml").noise["lcr"].floor > 0


@pytest.mark.parametrize("table, key", [
    ("[smu_noise]\ncurrent_percent = 0.01\ncurrent_floor = 1e-12\n", "current_floor"),
    ("[smu_noise]\ncurrent_percent = -1\n", "current_percent"),
    ("[lcr_noise]\nfloor_F = \"2 fF\"\n", "floor_F"),
    ("[lcr_noise]\n", "lcr_noise"),
])
def test_bad_dialect_noise_tables_are_named(table, key, tmp_path, capsys):
    with pytest.raises(DialectError, match=key):
        parse_dialect_text(_dialect_with(table), "mine.toml")
    (tmp_path / "mine.toml").write_text(_dialect_with(table), encoding="utf-8")
    path = tmp_path / "plan.toml"
    path.write_text(_plan({"dialect": "mine.toml"}), encoding="utf-8")
    assert cli.main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert key in err and "mine.toml" in err


def test_the_plan_wins_over_the_dialect(tmp_path, capsys):
    dialect = tmp_path / "mine.toml"
    dialect.write_text(_dialect_with("[smu_noise]\ncurrent_percent = 0.1\n"
                                     "[lcr_noise]\npercent = 0.2\n"), encoding="utf-8")
    path = tmp_path / "plan.toml"
    path.write_text(_plan({"dialect": "mine.toml", **SMU_NOISE}, {"dialect": "mine.toml"}),
                    encoding="utf-8")
    from pnbench.sweeps.plan import load_plan

    stated = run_noise(load_plan(path))
    assert stated["iv"]["relative"] == pytest.approx(2e-4)  # the plan's
    assert stated["cv"]["relative"] == pytest.approx(2e-3)  # the dialect's
    assert "mine.toml" in stated["cv"]["source"]
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "stated noise of the SMU: 0.02 %" in out and "stated noise of the LCR meter" in out


def test_a_simulated_run_records_the_benchs_own_noise(tmp_path, capsys):
    """run.json's stated_noise comes from the device file, and `pnbench fit RUN_DIR`
    judges against it (the options still win)."""
    plan = tmp_path / "plan.toml"
    plan.write_text(plan_text(forward(source="current", start="1 nA", stop="10 mA",
                                      points_per_decade=5, compliance="2 V",
                                      points=None)), encoding="utf-8")
    out = tmp_path / "runs"
    assert cli.main(["run", str(plan), "--simulate", "lh-vc510", "--time-scale", "0",
                     "--headless", "--out", str(out), "--no-report"]) == 0
    run_dir = next(out.iterdir())
    run = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    stated = run["stated_noise"]["iv"]
    assert "lh-vc510" in stated["source"] and stated["ranges"]
    model = json.loads((run_dir / "model.json").read_text(encoding="utf-8"))
    assert model["fits"]["iv_forward"]["noise"]["estimated"] is False
    capsys.readouterr()
    assert cli.main(["fit", str(run_dir), "--json"]) == 0
    fit = json.loads(capsys.readouterr().out)["fits"]["iv_forward"]
    assert fit["noise"]["estimated"] is False
    assert fit["noise"]["relative"] == pytest.approx(stated["relative"])
    assert "chi2_probability" in fit["lack_of_fit"]
    assert cli.main(["fit", str(run_dir), "--json", "--smu-noise", "3e-3,1pA"]) == 0
    assert json.loads(capsys.readouterr().out)["fits"]["iv_forward"]["noise"][
        "relative"] == pytest.approx(3e-3)
