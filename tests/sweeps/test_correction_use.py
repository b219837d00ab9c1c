"""What a run does with its LCR correction: compensated in software from the recorded
values (points.csv stays raw), a residual judged against the open the meter measured,
repeated at each stage set point on request, and reused on resume when it still holds.

The simulated meter (drivers/sim/lcr.py) leaves OPEN_RESIDUAL of its fixture's
stray capacitance after an open correction; the compensation formula is checked against
the circuit in tests/modeling/test_compensation.py."""

from __future__ import annotations

import html
import json
import re
import threading
from importlib import resources
from pathlib import Path

import pytest
from plantext import cv, forward, plan_text, table

from pnbench.drivers.opening import open_session
from pnbench.drivers.sim.lcr import OPEN_RESIDUAL
from pnbench.errors import PlanError
from pnbench.sweeps import events as ev
from pnbench.sweeps.fitcorrection import SOFTWARE, residual_note, series_note
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.store import read_points, read_run
from pnbench.tui import cli

SIM = "lh-vc510@pnsim:time_scale=0"
STRAY = 0.35e-12  # sim_configs/lh-vc510.toml, [lcr] fixture_capacitance_F


def _plan(correction: dict, *steps, backend: str = SIM):
    text = plan_text(*(steps or (forward(points=8), cv(bias_points=8))),
                     device={"name": "LH-VC510", "area": "0.25 mm2", "material": "Si"})
    text += "\n" + table("lcr_correction", correction)
    return parse_plan(text, "corr.toml").on_simulated_bench(backend)


def _events(run_dir) -> list[dict]:
    return [json.loads(line) for line in (Path(run_dir) / "events.jsonl").read_text()
            .splitlines()]


def _model(run_dir) -> dict:
    return json.loads((Path(run_dir) / "model.json").read_text())


def _cv_points(run_dir) -> dict[tuple, float]:
    return {(p.voltage_V, p.frequency_Hz): p.capacitance_F for p in read_points(run_dir)
            if p.step == "cv"}


def test_software_compensation_keeps_raw_readings_and_fits_the_compensated(tmp_path):
    soft = Launch.new(_plan({"corrections": ["open", "short"], "confirmed": True,
                             "apply": "software"}), out_dir=tmp_path / "soft")
    assert soft.run().exit_code == 0
    meter = Launch.new(_plan({"corrections": ["open", "short"], "confirmed": True}),
                       out_dir=tmp_path / "meter")
    assert meter.run().exit_code == 0
    record = read_run(soft.run_dir)["lcr_correction"]
    assert record["apply"] == "software" and record["runs"][0]["applied_by"] == "software"
    # raw in points.csv: the whole stray, where the meter's own correction left 0.3 %
    raw, corrected = _cv_points(soft.run_dir), _cv_points(meter.run_dir)
    for key, c in raw.items():
        assert c - corrected[key] == pytest.approx(STRAY * (1 - OPEN_RESIDUAL), abs=0.02e-12)
    model = _model(soft.run_dir)
    assert model["lcr_compensated_in_software"] is True
    assert SOFTWARE in model["fits"]["cv"]["message"]
    assert "open correction applied by the meter" not in model["fits"]["cv"]["message"]
    fixture = model.get("fixture_capacitance_F")
    assert fixture is None or abs(fixture["value"]) < 0.02e-12  # only the residual left
    par, ref = model["parameters"], _model(meter.run_dir)["parameters"]
    for name in ("CJO", "VJ", "M"):
        assert abs(par[name]["value"] - ref[name]["value"]) < 3 * par[name]["sigma"], name


def test_a_refit_of_the_folder_compensates_as_the_run_did(tmp_path, capsys):
    launch = Launch.new(_plan({"corrections": ["open", "short"], "confirmed": True,
                               "apply": "software"}), out_dir=tmp_path)
    assert launch.run().exit_code == 0
    capsys.readouterr()
    assert cli.main(["fit", str(launch.run_dir), "--json"]) == 0
    refit = json.loads(capsys.readouterr().out)
    run = _model(launch.run_dir)
    assert refit["lcr_compensated_in_software"] is True
    for name in ("CJO", "VJ", "M"):
        assert refit["parameters"][name]["value"] == pytest.approx(
            run["parameters"][name]["value"], rel=1e-6, abs=0), name
    # the report draws the compensated readings: on them 1/C**2 is a straight line
    assert cli.main(["report", str(launch.run_dir)]) == 0
    page = html.unescape(re.sub(r"<[^>]+>", " ", (Path(launch.run_dir) / "report.html")
                                .read_text(encoding="utf-8")))
    assert "C\u2013V figures use the compensated ones" in page
    straight = float(re.search(r"Straightness[^%]*?([\d.]+) %", page).group(1))
    assert straight < 0.5, straight


def test_a_meter_correction_is_judged_against_the_open_it_measured(tmp_path):
    launch = Launch.new(_plan({"corrections": ["open"], "confirmed": True}),
                        out_dir=tmp_path)
    assert launch.run().exit_code == 0
    note = _model(launch.run_dir)["correction_residual"]
    assert note["stale"] is False and "the open's 0.349 pF" in note["note"]


def test_a_residual_not_small_against_the_open_says_the_correction_is_stale():
    text, stale = residual_note({"value": 30e-15, "sigma": 2e-15}, 0.35e-12)
    assert stale and "stale" in text and "8.6 %" in text
    text, stale = residual_note({"value": 1e-15, "sigma": 0.2e-15}, 0.35e-12)
    assert not stale and "small against the open" in text
    assert not residual_note({"value": 30e-15, "sigma": 20e-15}, 0.35e-12)[1]  # not firm
    assert "no residual" in residual_note(None, 0.35e-12)[0]
    assert residual_note(None, None) is None


def test_a_series_residual_is_judged_against_the_short():
    text, stale = series_note({"value": 0.2, "sigma": 0.01}, 1.0)
    assert stale and "20 %" in text and "stale" in text
    assert not series_note({"value": 0.01, "sigma": 0.001}, 1.0)[1]
    assert series_note({"value": 0.2, "sigma": 0.01}, 0.0) is None  # no short to judge by
    assert series_note(None, 1.0) is None


@pytest.mark.parametrize("correction, words", [
    ({"corrections": ["open"], "apply": "both"}, "apply"),
    ({"corrections": ["open"], "on_resume": "never"}, "on_resume"),
    ({"corrections": ["open"], "every_set_point": True}, "no [temperature] table"),
])
def test_bad_new_keys_are_refused_with_their_key(correction, words):
    text = plan_text(forward(points=5), cv(bias_points=3)) + "\n" + table(
        "lcr_correction", correction)
    with pytest.raises(PlanError, match="lcr_correction") as info:
        parse_plan(text, "corr.toml")
    assert words in str(info.value)


def _abort_in(launch, step: str):
    def listener(event):
        if isinstance(event, ev.PointTaken) and event.step == step:
            threading.Thread(target=launch.abort, daemon=True).start()
    launch.listeners.append(listener)


def _run_then_resume(tmp_path, correction: dict, hold_meter: bool = False):
    plan = _plan(correction)
    # a session on another of its instruments keeps the simulated bench (and the meter
    # with its correction) alive between the two processes of the run
    held = open_session("PNSIM::STAGE", SIM) if hold_meter else None
    try:
        first = Launch.new(plan, out_dir=tmp_path)
        _abort_in(first, "cv")
        assert first.run().status == "aborted"
        again = Launch.resume_from(first.run_dir)
        outcome = again.run()
    finally:
        if held is not None:
            held.close()
    assert outcome.exit_code == 0, outcome.reason
    events = _events(first.run_dir)
    corrections = [e for e in events if e["kind"] == "lcr_correction"]
    messages = " ".join(e.get("message", "") for e in events if e["kind"] == "warning")
    log = (Path(first.run_dir) / "run.log").read_text() if (
        Path(first.run_dir) / "run.log").exists() else ""
    return read_run(first.run_dir)["lcr_correction"], corrections, messages + log


def test_resume_reuses_a_software_correction(tmp_path):
    record, corrections, _ = _run_then_resume(
        tmp_path, {"corrections": ["open", "short"], "confirmed": True, "apply": "software"})
    assert len(record["runs"]) == 1
    assert [e.get("reused", False) for e in corrections] == [False, True]


def test_resume_reuses_what_the_meter_still_applies(tmp_path):
    record, corrections, _ = _run_then_resume(
        tmp_path, {"corrections": ["open"], "confirmed": True}, hold_meter=True)
    assert len(record["runs"]) == 1
    assert [e.get("reused", False) for e in corrections] == [False, True]


def test_resume_runs_the_correction_again_when_the_meter_lost_it(tmp_path):
    """The simulated bench is closed with the run, so the resumed run meets a meter
    switched on afresh: its state query says no correction is applied."""
    record, corrections, text = _run_then_resume(
        tmp_path, {"corrections": ["open"], "confirmed": True})
    assert len(record["runs"]) == 2
    assert [e.get("reused", False) for e in corrections] == [False, False]
    assert "no longer applies its open correction" in text


def test_resume_repeats_when_the_plan_asks(tmp_path):
    record, corrections, _ = _run_then_resume(
        tmp_path, {"corrections": ["open"], "confirmed": True, "on_resume": "repeat",
                   "apply": "software"})
    assert len(record["runs"]) == 2 and not any(e.get("reused") for e in corrections)


def test_every_set_point_corrects_again_at_each_stage_temperature(tmp_path, capsys):
    path = Path(str(resources.files("pnbench.sim_configs") / "plans"
                    / "over_temperature.toml"))
    text = path.read_text(encoding="utf-8")
    text = text.replace('set_points = ["-25 degC", "25 degC", "75 degC", "125 degC"]',
                        'set_points = ["25 degC", "75 degC"]')
    text = text.replace('[temperature.only]\ncv = ["25 degC"]', "")
    text += "\n" + table("lcr_correction", {"corrections": ["open"], "confirmed": True,
                                            "every_set_point": True,
                                            "apply": "software"})
    plan = parse_plan(text, "over.toml").on_simulated_bench("lh-vc510@pnsim:time_scale=0")
    launch = Launch.new(plan, out_dir=tmp_path)
    assert launch.run().exit_code == 0
    record = read_run(launch.run_dir)["lcr_correction"]
    assert [r["set_point_K"] for r in record["runs"]] == pytest.approx([298.15, 348.15])
    events = [e for e in _events(launch.run_dir) if e["kind"] == "lcr_correction"]
    assert [e["set_point_K"] for e in events] == pytest.approx([298.15, 348.15])
    # the refit of the folder compensates each set point with its own values, as the run
    assert cli.main(["fit", str(launch.run_dir), "--json"]) == 0
    refit = json.loads(capsys.readouterr().out)
    model = _model(launch.run_dir)
    for row, mine in zip(refit["temperatures"], model["temperatures"], strict=True):
        assert row["CJO"] == pytest.approx(mine["CJO"], rel=1e-6, abs=0)
    once = parse_plan(text.replace("every_set_point = true", "every_set_point = false"),
                      "over.toml")
    assert any("runs once, at the first set point" in w for w in once.warnings)


def test_the_app_shows_a_software_compensated_run_as_its_fits_see_it(tmp_path):
    """Live events (the correction, then raw C-V points) and the finished folder read
    anew both give the app the compensated readings the fits use."""
    from pnbench.tui.app.folder import read_run_folder
    from pnbench.tui.app.state import RunState

    launch = Launch.new(_plan({"corrections": ["open"], "confirmed": True,
                               "apply": "software"}), out_dir=tmp_path, fit=False)
    live = RunState()
    launch.listeners.append(live.apply_event)
    assert launch.run().exit_code == 0
    raw = _cv_points(launch.run_dir)
    folder, _ = read_run_folder(launch.run_dir)
    for state in (live, folder):
        shown = dict(zip(zip(state.cv.column("voltage_V"), state.cv.column("frequency_Hz"),
                             strict=True), state.cv.column("capacitance_F"), strict=True))
        assert shown.keys() == raw.keys()
        for key, c in shown.items():
            # pnbench read the open itself: the whole stray (the meter's own open
            # correction would have left OPEN_RESIDUAL of it)
            assert raw[key] - c == pytest.approx(STRAY, rel=0.005, abs=0)
