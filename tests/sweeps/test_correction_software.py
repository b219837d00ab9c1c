"""Software compensation reads the open and the short itself: ordinary readings at every
test level and frequency of the plan's LCR steps, with the fixture open, then shorted
(the simulated meter's fixture follows the confirmed states), no correction command of
the meter needed; recorded in run.json, the events and the report; points.csv raw; the
demo part's values recovered with its fixture stray removed. And a meter that cannot
report its correction state is corrected again on resume, saying why, outputs off.

The compensation formula Zdut = (Zm - Zs)/(1 - (Zm - Zs)*Yo) is checked against the
circuit in tests/modeling/test_compensation.py; the demo part's truth is its device
file, sim_configs/lh-vc510.toml."""

from __future__ import annotations

import json
import math
import threading
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from plantext import cv, forward, plan_text, table

from pnbench.drivers.dialect import default_dialect_text
from pnbench.drivers.opening import open_session
from pnbench.drivers.sim.device import resolve_device
from pnbench.drivers.sim.fixture import SHORT_BAR_OHM
from pnbench.errors import DialectError
from pnbench.modeling.compensation import compensate_parallel
from pnbench.sweeps import events as ev
from pnbench.sweeps.fitcorrection import residuals_for
from pnbench.sweeps.fixturereadings import MIN_READINGS, level_frequency_pairs
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.store import read_points, read_run
from pnbench.tui import cli
from pnbench.tui.report import write_report

SIM = "lh-vc510@pnsim:time_scale=0"
DEMO = resolve_device("lh-vc510")
STRAY = DEMO.lcr["fixture_capacitance_F"]


def _events(run_dir) -> list[dict]:
    return [json.loads(line) for line in (Path(run_dir) / "events.jsonl").read_text()
            .splitlines()]


def _demo_plan(correction: dict):
    text = (resources.files("pnbench.sim_configs") / "plans" / "lh-vc510.toml").read_text()
    text += "\n" + table("lcr_correction", correction)
    return parse_plan(text, "demo.toml").on_simulated_bench(SIM)


def test_software_compensation_reads_the_fixture_itself_and_recovers_the_demo_part(
        tmp_path, capsys):
    plan = _demo_plan({"corrections": ["open", "short"], "confirmed": True,
                       "apply": "software"})
    held = open_session("PNSIM::STAGE", SIM)  # keeps the bench (and its meter) alive
    try:
        launch = Launch.new(plan, out_dir=tmp_path)
        assert launch.run().exit_code == 0
        with open_session("PNSIM::LCR", SIM) as lcr:  # the meter's own correction:
            untouched = [lcr.query(f":SENS:CORR:{w}:DATA?") for w in ("OPEN", "SHOR")]
            fixture = lcr.query(":SIM:FIXT?")
    finally:
        held.close()
    assert all(float(v) == 0.0 for pair in untouched for v in pair.split(","))  # never run
    assert fixture == "DEV"  # the device back in the fixture after the short
    record = read_run(launch.run_dir)["lcr_correction"]
    values = record["runs"][0]["values"]
    pairs = sorted(zip(values["open"]["ac_level_V"], values["open"]["frequency_Hz"],
                       strict=True))
    assert pairs == level_frequency_pairs(plan) == sorted(
        {(0.02, 1e5), (0.02, 1e6), (0.005, 1e5), (0.005, 3e5), (0.005, 1e6), (0.005, 2e6)})
    assert values["open"]["measured_by"] == "pnbench"
    assert values["open"]["readings"] == MIN_READINGS
    # the whole stray, raw (the meter's own open correction would leave a residual)
    w = 2 * math.pi * np.array(values["open"]["frequency_Hz"])
    c_sd = np.array(values["open"]["B_sd_S"]) / w
    assert np.all(np.abs(np.array(values["open"]["C_F"]) - STRAY) < 5 * c_sd + 1e-18)
    assert values["short"]["R_ohm"] == pytest.approx([SHORT_BAR_OHM] * 6, rel=1e-3, abs=0)
    events = [e for e in _events(launch.run_dir) if e["kind"] == "lcr_correction"]
    assert len(events) == 1 and events[0]["values"] == values
    # points.csv keeps the raw readings: the stray is in them, compensation takes it out
    cv_points = [p for p in read_points(launch.run_dir) if p.step == "cv"]
    c = np.array([p.capacitance_F for p in cv_points])
    g = np.array([p.conductance_S for p in cv_points])
    f = np.array([p.frequency_Hz for p in cv_points])
    comp, _ = compensate_parallel(c, g, f, residuals_for(record, None, 0.02))
    assert np.abs(c - comp - STRAY) == pytest.approx(0.0, abs=2e-15)
    # the demo part recovered, no fixture capacitance left for the fit to find
    model = json.loads((launch.run_dir / "model.json").read_text())
    cfix = model.get("fixture_capacitance_F")
    assert cfix is None or abs(cfix["value"]) <= 3 * cfix["sigma"]
    for name in ("CJO", "VJ", "M", "TT"):
        fit, truth = model["parameters"][name], getattr(DEMO.params, name)
        assert abs(fit["value"] - truth) <= 3 * fit["sigma"], (name, fit, truth)
    report = write_report(launch.run_dir).read_text(encoding="utf-8")
    assert "pnbench read the open and the short itself" in report
    assert "Test level" in report
    # each step is compensated with the values of its own test level, by the run's fit
    # and by a refit of the folder alike
    assert record["runs"][0]["step_ac_level_V"] == {"cv": 0.02, "admittance": 0.005}
    at_5mV = [b for b, level in zip(values["open"]["B_S"], values["open"]["ac_level_V"],
                                    strict=True) if level == 0.005]
    assert residuals_for(record, None, step="admittance").open_B_S.tolist() == at_5mV
    assert cli.main(["fit", str(launch.run_dir), "--json"]) == 0
    refit = json.loads(capsys.readouterr().out)["parameters"]
    for name in ("CJO", "VJ", "M", "TT"):
        assert refit[name]["value"] == pytest.approx(model["parameters"][name]["value"],
                                                     rel=1e-6, abs=0), name


def _sim_plan(correction: dict, dialect: Path):
    """A small plan on the simulated bench with the LCR meter spoken to through
    ``dialect``."""
    text = plan_text(forward(points=5), cv(bias_points=4), instruments={
        "smu": {"resource": "PNSIM::SMU", "backend": SIM},
        "lcr": {"resource": "PNSIM::LCR", "backend": SIM, "dialect": str(dialect)}})
    return parse_plan(text + "\n" + table("lcr_correction", correction), "corr.toml")


def _dialect(tmp_path, *emptied: str) -> Path:
    text = default_dialect_text()
    for key in emptied:
        start = text.index(f"\n{key} = ")
        end = text.index("\n", start + 1)
        text = text[:start] + f'\n{key} = ""' + text[end:]
    tmp_path.mkdir(parents=True, exist_ok=True)
    path = tmp_path / "meter.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_software_compensation_needs_no_correction_command_of_the_meter(tmp_path):
    dialect = _dialect(tmp_path, "open_correction", "short_correction", "open_data_query",
                       "short_data_query")
    plan = _sim_plan({"corrections": ["open", "short"], "confirmed": True,
                      "apply": "software"}, dialect)
    launch = Launch.new(plan, out_dir=tmp_path / "runs")
    outcome = launch.run()
    assert outcome.exit_code == 0, outcome.reason
    open_ = read_run(launch.run_dir)["lcr_correction"]["runs"][0]["values"]["open"]
    assert open_["C_F"] == pytest.approx([STRAY] * 2, rel=0.02, abs=0)
    # the meter's route still needs its command: refused before any point (exit 2)
    meter = Launch.new(_sim_plan({"corrections": ["open"], "confirmed": True}, dialect),
                       out_dir=tmp_path / "meter")
    with pytest.raises(DialectError, match="no open_correction command"):
        meter.run()


def test_the_operator_is_asked_as_before_and_the_fixture_follows(tmp_path):
    plan = _demo_plan({"corrections": ["open", "short"], "apply": "software"})
    launch = Launch.new(plan, out_dir=tmp_path, fit=False)
    topics = []

    def listener(event):
        if isinstance(event, ev.OperatorPrompt):
            topics.append(event.topic)
            threading.Thread(target=launch.answer, args=(True,), daemon=True).start()

    launch.listeners.append(listener)
    assert launch.run().exit_code == 0
    assert topics == ["open_correction", "short_correction", "device_back"]
    values = read_run(launch.run_dir)["lcr_correction"]["values"]
    assert values["open"]["C_F"] == pytest.approx([STRAY] * 6, rel=0.02, abs=0)


class _NanLcr:
    def configure(self, ac_level_V):
        pass

    def apply_and_read(self, bias_V, frequency_Hz):
        from pnbench.drivers.roles import LcrReading

        return LcrReading(frequency_Hz, bias_V, complex(math.nan, 0.0), math.nan, 0.0)


def test_a_reading_of_the_fixture_that_is_not_a_number_is_an_instrument_fault():
    from pnbench.errors import InstrumentError
    from pnbench.sweeps.fixturereadings import measure

    with pytest.raises(InstrumentError, match="open fixture's reading at 100000 Hz"):
        measure(_NanLcr(), "open", [(0.02, 1e5)], 4)


def _abort_in(launch, step: str):
    def listener(event):
        if isinstance(event, ev.PointTaken) and event.step == step:
            threading.Thread(target=launch.abort, daemon=True).start()
    launch.listeners.append(listener)


def test_a_meter_that_cannot_report_its_correction_is_corrected_again_saying_why(
        tmp_path, capsys):
    dialect = _dialect(tmp_path, "open_state_query", "short_state_query")
    plan = _sim_plan({"corrections": ["open"], "confirmed": True}, dialect)
    path = tmp_path / "plan.toml"
    path.write_text(plan.text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "on resume the LCR correction runs again" in out and "open_state_query" in out
    assert cli.main(["check", str(path), "--json"]) == 0
    assert "open_state_query" in json.loads(capsys.readouterr().out)[
        "lcr_correction_on_resume"]
    held = open_session("PNSIM::STAGE", SIM)  # the meter keeps its correction between
    try:
        first = Launch.new(plan, out_dir=tmp_path / "runs")
        _abort_in(first, "cv")
        assert first.run().status == "aborted"
        again = Launch.resume_from(first.run_dir)  # its own plan.toml, with its dialect
        outcome = again.run()
    finally:
        held.close()
    assert outcome.exit_code == 0, outcome.reason
    events = _events(first.run_dir)
    corrections = [k for k, e in enumerate(events) if e["kind"] == "lcr_correction"]
    assert len(corrections) == 2
    second = events[corrections[1]]
    assert not second.get("reused") and "has no open_state_query" in second["reason"]
    # outputs off, confirmed, before the correction of the resumed process
    resumed_at = next(k for k, e in enumerate(events)
                      if e["kind"] == "run_started" and e["resumed"])
    assert corrections[0] < resumed_at < corrections[1]
    last = {}
    for e in events[resumed_at:corrections[1]]:
        if e["kind"] == "output":
            last[e["role"]] = (e["on"], e.get("confirmed"))
    assert last == {"smu": (False, True), "lcr": (False, True)}
    run = read_run(first.run_dir)["lcr_correction"]
    assert "has no open_state_query" in run["runs"][1]["reason"]
    report = write_report(first.run_dir).read_text(encoding="utf-8")
    assert "has no open_state_query" in report
    # a dialect that can say it: nothing to warn about in check
    assert "on resume" not in cli_check(tmp_path, _sim_plan(
        {"corrections": ["open"], "confirmed": True}, _dialect(tmp_path / "x")), capsys)


def cli_check(tmp_path, plan, capsys) -> str:
    path = tmp_path / "plan2.toml"
    path.write_text(plan.text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 0
    return capsys.readouterr().out


def test_the_headless_line_says_who_read_the_fixture():
    from pnbench.tui.headless import correction_line

    mine = ev.Correction(corrections=["open"], applied_by="software",
                         values={"open": {"measured_by": "pnbench"}})
    theirs = ev.Correction(corrections=["open"], applied_by="meter",
                           values={"open": {"C_F": [1e-13]}})
    assert correction_line(mine) == ("LCR open correction done (the fixture read by "
                                     "pnbench, compensated in software from its recorded "
                                     "values)")
    assert correction_line(theirs) == "LCR open correction done (applied by the meter)"


def test_check_counts_the_time_of_the_fixture_readings(tmp_path, capsys):
    """6 level/frequency pairs x 16 readings x 2 corrections at the LCR reading's
    estimated 33 ms (sweeps.check)."""
    from pnbench.sweeps.check import LCR_OVERHEAD_S, LCR_READING_S, estimate

    soft = _demo_plan({"corrections": ["open", "short"], "apply": "software"})
    meter = _demo_plan({"corrections": ["open", "short"]})
    expected = 6 * MIN_READINGS * 2 * (LCR_READING_S + LCR_OVERHEAD_S)
    assert estimate(soft).correction_s == pytest.approx(expected, rel=1e-12, abs=0)
    assert estimate(soft).total_s - estimate(meter).total_s == pytest.approx(
        expected, rel=1e-9, abs=0)
    assert estimate(meter).correction_s == 0.0
    path = tmp_path / "plan.toml"
    path.write_text(soft.text, encoding="utf-8")
    assert cli.main(["check", str(path)]) == 0
    assert "the fixture's open and short readings 0:06" in capsys.readouterr().out


def test_an_abort_stops_the_fixture_readings_between_pairs():
    from pnbench.errors import OperatorStop
    from pnbench.sweeps.control import Control
    from pnbench.sweeps.fixturereadings import measure

    control = Control()
    read = []

    class Meter(_NanLcr):
        def apply_and_read(self, bias_V, frequency_Hz):
            from pnbench.drivers.roles import LcrReading

            read.append(frequency_Hz)
            control.abort()  # the operator stops while the first pair is read
            return LcrReading(frequency_Hz, bias_V, complex(0.0, 1e-7), 0.0, 0.0)

    with pytest.raises(OperatorStop):
        measure(Meter(), "open", [(0.02, 1e5), (0.02, 1e6)], 4, check=control.check)
    assert read == [1e5] * 4  # the second pair was never read
