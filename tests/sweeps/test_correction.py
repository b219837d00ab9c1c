"""The LCR meter's open/short correction asked by a plan's [lcr_correction]: read and
checked, run by the runner with every output off before the first LCR step, the operator
asked (or refused without a terminal), recorded, and stated by the fit."""

from __future__ import annotations

import io
import json
import threading
from importlib import resources

import pytest
from plantext import cv, forward, plan_text, table

from pnbench.errors import BadInput, PlanError
from pnbench.sweeps import events as ev
from pnbench.sweeps.fitmodel import OPEN_CORRECTED
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.store import read_run
from pnbench.tui import cli
from pnbench.tui.operator import TerminalOperator, refuse_without_terminal

SIM = "lh-vc510@pnsim:time_scale=0"


def _plan(correction: dict | None, *steps):
    text = plan_text(*(steps or (forward(points=5), cv(bias_points=3))))
    if correction is not None:
        text += "\n" + table("lcr_correction", correction)
    return parse_plan(text, "corr.toml")


def test_the_plan_reads_the_correction_and_keeps_it_on_the_simulated_bench():
    plan = _plan({"corrections": ["short", "open"], "confirmed": True})
    assert plan.correction.which == ("open", "short")  # open always runs first
    assert plan.correction.confirmed is True
    assert plan.on_simulated_bench(SIM).correction == plan.correction
    assert _plan({"corrections": ["open"]}).correction.confirmed is False
    assert _plan(None).correction is None


@pytest.mark.parametrize("correction, words", [
    ({"corrections": ["open", "through"]}, "corrections"),
    ({"corrections": []}, "corrections"),
    ({"corrections": ["open", "open"]}, "corrections"),
    ({"corrections": "open"}, "corrections"),
    ({"confirmed": True}, "missing key 'corrections'"),
    ({"corrections": ["open"], "confirmed": "yes"}, "confirmed"),
    ({"corrections": ["open"], "confirm": True}, "confirm"),
])
def test_a_bad_correction_table_is_refused_with_its_key(correction, words):
    with pytest.raises(PlanError, match="lcr_correction") as info:
        _plan(correction)
    assert words in str(info.value)


def test_a_correction_without_any_lcr_step_is_refused():
    with pytest.raises(PlanError, match="no step on the LCR meter"):
        _plan({"corrections": ["open"]}, forward(points=5))


def test_check_shows_the_correction(tmp_path, capsys):
    path = tmp_path / "p.toml"
    path.write_text(_plan({"corrections": ["open", "short"]}).text)
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "LCR correction: open then short" in out and "operator is asked" in out
    assert cli.main(["check", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["lcr_correction"] == {"corrections": ["open", "short"], "confirmed": False,
                                     "apply": "meter", "every_set_point": False,
                                     "on_resume": "reuse"}


def _events(run_dir) -> list[dict]:
    return [json.loads(line) for line in (run_dir / "events.jsonl").read_text().splitlines()]


def test_the_runner_corrects_with_outputs_off_before_the_first_lcr_point(tmp_path):
    plan = _plan({"corrections": ["open", "short"], "confirmed": True}).on_simulated_bench(SIM)
    launch = Launch.new(plan, out_dir=tmp_path, fit=False)
    outcome = launch.run()
    assert outcome.exit_code == 0, outcome.reason
    events = _events(launch.run_dir)
    kinds = [e["kind"] for e in events]
    at = kinds.index("lcr_correction")
    cv_start = next(k for k, e in enumerate(events)
                    if e["kind"] == "step_started" and e["step"] == "cv")
    assert cv_start < at < next(k for k, e in enumerate(events)
                                if e["kind"] == "output" and e["on"] and e["step"] == "cv")
    # the last word on every output before the correction: off, confirmed
    last = {}
    for e in events[:at]:
        if e["kind"] == "output":
            last[e["role"]] = e
    assert {r: (e["on"], e["confirmed"]) for r, e in last.items()} == {
        "smu": (False, True), "lcr": (False, True)}
    assert "operator_prompt" not in kinds  # confirmed in the plan: nobody asked
    record = read_run(launch.run_dir)["lcr_correction"]
    assert record["done"] and record["corrections"] == ["open", "short"]
    assert record["values"]["open"]["frequency_Hz"] == [1e5, 1e6]
    # the simulated fixture's 0.35 pF, as the meter measured it (its residual aside)
    assert record["values"]["open"]["C_F"] == pytest.approx([0.35e-12] * 2, rel=0.01, abs=0)
    assert events[at]["values"] == record["values"]


def _answering(launch, answers):
    topics = []

    def listener(event):
        if isinstance(event, ev.OperatorPrompt):
            topics.append(event.topic)
            ok = answers.pop(0)
            threading.Thread(target=launch.answer, args=(ok,), daemon=True).start()

    return listener, topics


def test_the_operator_is_asked_for_each_fixture_state(tmp_path):
    plan = _plan({"corrections": ["open", "short"]}).on_simulated_bench(SIM)
    launch = Launch.new(plan, out_dir=tmp_path, fit=False)
    listener, topics = _answering(launch, [True, True, True])
    launch.listeners.append(listener)
    assert launch.run().exit_code == 0
    assert topics == ["open_correction", "short_correction", "device_back"]
    assert read_run(launch.run_dir)["lcr_correction"]["confirmed"] is False


def test_an_operator_who_says_no_stops_the_run_with_outputs_off(tmp_path):
    plan = _plan({"corrections": ["open", "short"]}).on_simulated_bench(SIM)
    launch = Launch.new(plan, out_dir=tmp_path, fit=False)
    listener, topics = _answering(launch, [True, False])
    launch.listeners.append(listener)
    outcome = launch.run()
    assert topics == ["open_correction", "short_correction"]
    assert outcome.status == "aborted" and outcome.exit_code == 4
    assert outcome.outputs_off_confirmed
    run = read_run(launch.run_dir)
    assert "lcr_correction" not in run
    assert [s["done"] for s in run["steps"]] == [5, 0]  # the I-V data are kept


def test_headless_refuses_to_ask_without_a_terminal(tmp_path, monkeypatch, capsys):
    plan = _plan({"corrections": ["open"]})
    path = tmp_path / "p.toml"
    path.write_text(plan.text)
    monkeypatch.setattr("sys.stdin", io.StringIO(""))
    code = cli.main(["run", str(path), "--headless", "--simulate", "lh-vc510",
                     "--time-scale", "0", "--out", str(tmp_path / "runs")])
    assert code == 2
    err = capsys.readouterr().err
    assert "[lcr_correction]" in err and "confirmed = true" in err
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").iterdir())
    refuse_without_terminal(_plan({"corrections": ["open"], "confirmed": True}),
                            io.StringIO(""))  # confirmed: nothing to ask
    with pytest.raises(BadInput, match="not a terminal"):
        refuse_without_terminal(plan, io.StringIO(""))


def test_the_terminal_operator_reads_yes_or_stops():
    answers = []

    class FakeLaunch:
        def answer(self, ok):
            answers.append(ok)

    for reply in ("y\n", "no\n", ""):
        out = io.StringIO()
        op = TerminalOperator(FakeLaunch(), threading.Event(), stdin=io.StringIO(reply),
                              stream=out)
        op._ask("open the fixture")
        assert "open the fixture" in out.getvalue()
    assert answers == [True, False, False]


def test_a_demo_run_with_correction_fits_no_fixture_capacitance(tmp_path):
    """The bundled demo plan with an unattended open/short correction: the fit states the
    correction, and any CFIX left is consistent with zero (within 3 sigma); CJO, VJ, M
    within 4 sigma + 2 % of the simulated part (the end-to-end tests' recovery rule)."""
    from pnbench.drivers.sim.device import resolve_device

    text = (resources.files("pnbench.sim_configs") / "plans" / "lh-vc510.toml").read_text()
    text += "\n" + table("lcr_correction", {"corrections": ["open", "short"],
                                            "confirmed": True})
    plan = parse_plan(text, "demo.toml").on_simulated_bench(SIM)
    launch = Launch.new(plan, out_dir=tmp_path)
    assert launch.run().exit_code == 0
    model = json.loads((launch.run_dir / "model.json").read_text())
    assert model["open_corrected"] is True
    assert OPEN_CORRECTED in model["fits"]["cv"]["message"]
    cfix = model.get("fixture_capacitance_F")
    if cfix is not None:
        assert abs(cfix["value"]) <= 3 * cfix["sigma"]
    true = resolve_device("lh-vc510").params
    for name in ("CJO", "VJ", "M"):
        fit = model["parameters"][name]
        truth = getattr(true, name)
        assert abs(fit["value"] - truth) <= 0.02 * abs(truth) + 4 * fit["sigma"], name
    from pnbench.tui.report import write_report

    report = write_report(launch.run_dir).read_text(encoding="utf-8")
    assert "LCR fixture correction: open then short" in report
    assert "open correction" in report  # the fit's statement, or the CFIX residual note
