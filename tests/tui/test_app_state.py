"""The app's pure parts: run state from events and points, the folder tail, plot data,
decade axes, the parameter table and the Q-point panel."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import constants
from test_app_synth import TRUE, SyntheticRun

from pnbench.errors import BadInput, DataFileError
from pnbench.modeling.params import DiodeParams
from pnbench.tui.app.folder import FolderTail, apply_batch, read_run_folder
from pnbench.tui.app.plots import (
    OVER_TEMPERATURE_VIEWS,
    VIEWS,
    iv_residuals,
    model_params,
    plot_data,
)
from pnbench.tui.app.state import Estimate, RunState, describe, format_duration
from pnbench.tui.app.widgets.params import rows
from pnbench.tui.app.widgets.plot import DecadeFormatter
from pnbench.tui.app.widgets.qpoint import QChoice, parse_choice, qpoint_rows


def test_events_drive_status_outputs_parameters_and_log():
    state = RunState()
    state.apply_event({"seq": 1, "time_s": 0.0, "kind": "run_started", "step": None})
    state.apply_event({"seq": 2, "time_s": 0.1, "kind": "step_started", "step": "fwd",
                       "step_kind": "iv_forward", "planned": 10})
    state.apply_event({"seq": 3, "time_s": 0.1, "kind": "output", "step": "fwd",
                       "role": "smu", "on": True})
    assert state.status == "running" and state.source_on
    for k in range(4):
        state.apply_event({"seq": 3, "time_s": 0.2 + k, "kind": "point", "step": "fwd",
                           "point_kind": "iv", "voltage_V": 0.1 * k, "current_A": 1e-9 * k,
                           "compliance": False})
    state.apply_event({"seq": 4, "time_s": 4.0, "kind": "fit", "step": "fwd",
                       "parameters": {"IS": {"value": 1e-14, "sigma": 1e-16,
                                             "settled": True}}})
    state.apply_event({"seq": 5, "time_s": 4.0, "kind": "compliance", "step": "fwd",
                       "voltage_V": 0.7, "current_A": 0.02})
    state.apply_event({"seq": 6, "time_s": 4.5, "kind": "paused", "step": "fwd", "done": 4})
    assert state.status == "paused"
    assert len(state.iv) == 4 and len(state.cv) == 0
    assert state.parameters["IS"] == Estimate(1e-14, 1e-16, True)
    assert state.steps["fwd"].done == 4 and state.steps["fwd"].kind == "iv_forward"
    tags = [e.tag for e in state.log]
    assert "COMPL" in tags and "PAUSE" in tags and "OUTPUT" in tags
    # one second per point over 4 points, 6 left: 6 s in the step and in the run
    step_eta, run_eta = state.eta_s()
    assert step_eta == pytest.approx(6.0) and run_eta == pytest.approx(6.0)
    state.apply_event({"seq": 7, "time_s": 5.0, "kind": "output", "role": "smu", "on": False})
    state.apply_event({"seq": 8, "time_s": 5.0, "kind": "run_finished", "status": "aborted",
                       "outputs_off_confirmed": True})
    assert not state.source_on and state.finished and state.outputs_off_confirmed
    assert state.eta_s() == (0.0, 0.0)


def test_eta_borrows_the_rate_of_a_finished_step_of_the_same_family():
    state = RunState()
    state.set_plan_steps([("a", "iv_forward", 3), ("b", "iv_reverse", 5), ("c", "cv", 2)])
    for k in range(3):
        state.add_point({"step": "a", "kind": "iv", "time_s": 2.0 * k, "voltage_V": k,
                         "current_A": 1.0})
    state.apply_event({"kind": "step_finished", "step": "a", "status": "done"})
    state.apply_event({"kind": "step_started", "step": "b", "planned": 5})
    _, run_eta = state.eta_s()
    # b: 5 points x 2 s (rate of a, same I-V family); c: 2 points x 2 s (overall rate)
    assert run_eta == pytest.approx(14.0)


def test_log_keeps_counting_after_it_rolls_over():
    state = RunState()
    for k in range(2500):
        state.apply_event({"kind": "warning", "time_s": k, "message": f"w{k}"})
    assert len(state.log) == 2000 and state.log_total == 2500
    fresh = state.new_log_entries(2490)
    assert [e.text for e in fresh] == [f"w{k}" for k in range(2490, 2500)]


def test_describe_names_what_happened():
    assert describe({"kind": "output", "role": "smu", "on": True}) == "SMU output ON"
    text = describe({"kind": "step_finished", "status": "limit", "done": 35, "planned": 40,
                     "ended_by": "compliance_storm"})
    assert "35/40" in text and "repeated compliance" in text
    assert describe({"kind": "warning", "message": "AC level large"}) == "AC level large"
    assert format_duration(3725) == "1:02:05" and format_duration(math.nan) == "--"


def test_folder_tail_reads_only_complete_lines_and_follows_growth(tmp_path):
    run = SyntheticRun(tmp_path / "r")
    tail = FolderTail(tmp_path / "r")
    state = RunState()
    apply_batch(state, tail.poll())
    assert state.point_count == 0 and state.status == "running"
    run.advance(7)
    with open(tmp_path / "r" / "points.csv", "a", encoding="utf-8") as f:
        f.write("forward,99,iv,1.0,0.5")  # a row still being written: no newline yet
    apply_batch(state, tail.poll())
    assert state.point_count == 7
    with open(tmp_path / "r" / "points.csv", "a", encoding="utf-8") as f:
        f.write(",1e-3,,,,0\n")
    apply_batch(state, tail.poll())
    assert state.point_count == 8
    run.advance(1000)
    apply_batch(state, tail.poll())
    assert state.point_count == run.total + 1
    assert state.status == "completed" and state.outputs_off_confirmed
    assert not state.source_on
    assert {"IS", "N", "CJO", "TT"} <= set(state.parameters)


def test_folder_tail_reports_bad_rows_and_lines_without_failing(tmp_path):
    run = SyntheticRun(tmp_path / "r")
    run.advance(2)
    with open(tmp_path / "r" / "points.csv", "a", encoding="utf-8") as f:
        f.write("forward,2,iv\n")
    with open(tmp_path / "r" / "events.jsonl", "a", encoding="utf-8") as f:
        f.write("{not json\n")
    batch = FolderTail(tmp_path / "r").poll()
    assert len(batch.points) == 2
    assert any("3 cells" in p for p in batch.problems)
    assert any("unreadable" in p for p in batch.problems)


def test_reading_something_that_is_no_run_folder_says_so(tmp_path):
    with pytest.raises(DataFileError, match="not a folder"):
        FolderTail(tmp_path / "nowhere")
    with pytest.raises(DataFileError, match="run.json"):
        read_run_folder(tmp_path)


@pytest.fixture
def finished_state(tmp_path):
    SyntheticRun(tmp_path / "r").advance(1000)
    state, _ = read_run_folder(tmp_path / "r")
    state.parameters = {name: Estimate(getattr(TRUE, name), None, True)
                        for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT")}
    return state


def test_every_view_has_data_for_a_full_run(finished_state):
    for key, _ in VIEWS:
        if key in OVER_TEMPERATURE_VIEWS:  # a run at one temperature: said, not drawn
            assert "over two temperatures" in plot_data(key, finished_state).note
            continue
        data = plot_data(key, finished_state)
        assert not data.empty, key


def test_fit_curve_through_true_parameters_has_zero_residual(finished_state):
    """Points made by the exact model and a fit with the same parameters: the residual
    is zero to rounding (the residual compares against modeling.junction.current)."""
    params = model_params(finished_state.parameters)
    v, r = iv_residuals(finished_state, params)
    assert len(v) > 10
    assert np.max(np.abs(r)) < 1e-9


def test_semilog_view_holds_log10_of_current_and_the_admittance_view_splits_biases(
        finished_state):
    data = plot_data("fwd", finished_state)
    measured = data.series[0]
    v = finished_state.iv.column("voltage_V")
    i = np.abs(finished_state.iv.column("current_A"))
    forward = finished_state.iv.step_mask(lambda step: step == "forward")
    assert np.array_equal(measured.x, v[forward])
    assert np.allclose(10 ** measured.y, i[forward])
    reverse = plot_data("rev", finished_state).series[0]
    assert np.array_equal(reverse.x, v[~forward]) and (reverse.x <= 0).all()
    adm = plot_data("yc", finished_state)
    labels = {s.label for s in adm.series if not s.line}
    assert labels == {"+0.5 V", "+0.6 V"}
    assert adm.x_log and adm.y_log


def test_mott_schottky_view_has_the_textbook_slope_and_intercept():
    """One-sided abrupt junction (Sze & Ng, Physics of Semiconductor Devices, 3rd ed.,
    ch. 2): 1/C^2 = 2*(Vbi - V - kT/q)/(q*eps*A^2*N), a line of slope -2/(q*eps*A^2*N)
    crossing zero at Vbi - kT/q. Slope and intercept are computed here from N, Vbi and A
    with scipy.constants (eps_r(Si) = 11.7, Sze & Ng appendix, from memory), not from the
    card values the view is given."""
    q, k, t = constants.e, constants.k, 300.0
    eps = 11.7 * constants.epsilon_0
    area, doping, vbi = 1e-6, 1e22, 0.80          # 1 mm^2, 1e16 cm^-3
    vj = vbi - k * t / q
    cjo = area * np.sqrt(q * eps * doping / (2 * vj))
    state = RunState()
    v = np.linspace(-5, 0, 11)
    for vv in v:
        state.add_point({"step": "cv", "kind": "cv", "voltage_V": vv, "frequency_Hz": 1e5,
                         "capacitance_F": area * np.sqrt(q * eps * doping / (2 * (vj - vv))),
                         "conductance_S": 0.0})
    state.parameters = {"IS": Estimate(1e-14, None, True), "N": Estimate(1, None, True),
                        "CJO": Estimate(cjo, None, True), "VJ": Estimate(vj, None, True),
                        "M": Estimate(0.5, None, True)}
    series = plot_data("mott", state).series
    measured = next(s for s in series if not s.line)
    line = next(s for s in series if s.line)
    slope, intercept = np.polyfit(line.x, line.y, 1)
    assert slope == pytest.approx(-2 / (q * eps * area**2 * doping), rel=1e-9)
    assert -intercept / slope == pytest.approx(vbi - k * t / q, rel=1e-9)
    # The measured points lie on the same line.
    assert np.allclose(measured.y, slope * measured.x + intercept, rtol=1e-9)


def test_decade_ticks_sit_on_whole_decades_with_si_labels():
    f = DecadeFormatter("A")
    ticks = f.get_ticks(-12.3, -2.2, max_ticks=12)
    assert ticks == [float(d) for d in range(-12, -2)]
    labels = f.get_labels_for_ticks([-12.0, -9.0, -6.0, -3.0, 0.0])
    assert labels == ["1p", "1n", "1u", "1m", "1"]
    assert len(f.get_ticks(-15, 0, max_ticks=5)) <= 6  # thinned on a short axis
    inside = f.get_ticks(3.1, 3.9)  # less than one decade: 1-2-5 steps
    assert [round(10 ** t) for t in inside] == [2000, 5000]


def test_parameter_rows_show_value_sigma_and_settled_mark():
    table = rows({"N": Estimate(1.05, 0.021, False), "IS": Estimate(2e-14, 4e-16, True)})
    # the value down to the sigma's second significant digit, zeros kept
    assert table[0] == ("IS", "20.00 fA", "2.0%", "ok")
    assert table[1] == ("N", "1.050", "2.0%", "..")
    detailed = rows({"IS": Estimate(2e-14, 4e-16, True)}, detailed=True)
    assert detailed[0][2] == "400 aA (2.0%)"


def test_qpoint_rule_of_thumb_rd_is_26_ohm_at_1_mA():
    """rd = N*Vt/I: about 26 ohm at 1 mA and room temperature for N = 1 (common
    practice, no source); Vt from scipy.constants k*T/q."""
    from scipy import constants

    p = DiodeParams(IS=1e-14, N=1.0, RS=2.0, CJO=5e-12, TT=1e-9)
    choice = parse_choice("1mA", "1k 1M")
    lines = dict(qpoint_rows(p, choice, 300.15))
    vt = constants.k * 300.15 / constants.e
    rd_ohm = float(lines["rd"].split()[0])
    assert rd_ohm == pytest.approx(vt / 1e-3, rel=1e-3)  # N*Vt/I, shown to 4 digits
    assert 25.0 < rd_ohm < 27.0  # the trade's "26 ohm at 1 mA"
    assert lines["RS"] == "2 ohm"  # one spelling of the ohm everywhere
    assert "|Z| 1 kHz" in lines and "|Z| 1 MHz" in lines
    partial = dict(qpoint_rows(p, choice, 300.15, known={"IS", "N", "RS"}))
    assert partial["Cd"] == "-- (TT not extracted yet)" and partial["RS"] == "2 ohm"


def test_qpoint_choice_rejects_bad_input_with_a_message():
    assert parse_choice("-5 V", "10k").kind == "voltage"
    assert parse_choice("10uA", "1k,2k").frequencies_Hz == (1e3, 2e3)
    with pytest.raises(BadInput, match="bias"):
        parse_choice("", "1k")
    with pytest.raises(BadInput, match="frequency"):
        parse_choice("0.6V", "fast")
    with pytest.raises(BadInput, match="above 0"):
        parse_choice("0.6V", "-1k")
    assert QChoice().describe() == "600 mV at 1 kHz 100 kHz 1 MHz"


def test_run_json_steps_fill_planned_counts(tmp_path):
    run = SyntheticRun(tmp_path / "r")
    run.advance(3)
    run.write_run()
    doc = json.loads((tmp_path / "r" / "run.json").read_text())
    state = RunState()
    state.apply_run_json(doc)
    assert state.steps["forward"].planned == 25 and state.steps["forward"].done == 0
    apply_batch(state, FolderTail(tmp_path / "r").poll())  # run.json, then 3 points
    assert state.steps["forward"].done == 3  # counted once, from points.csv
    assert state.progress_fraction() == pytest.approx(3 / run.total)


def test_card_names_are_ones_a_simulator_accepts():
    from pnbench.tui.app.review import card_name

    assert card_name("LH-QT16 sample 3") == "LH-QT16_sample_3"
    assert card_name("3rd part") == "D3rd_part"
    assert card_name("  ") == "device"


def test_model_json_replaces_live_estimates_and_drops_what_it_leaves_out():
    """A live estimate of RS from early points must not outlive a model.json whose fit of
    every point found no series resistance."""
    state = RunState()
    state.apply_event({"seq": 1, "time_s": 1.0, "kind": "fit", "step": "fwd",
                       "parameters": {"IS": {"value": 1e-14, "sigma": 1e-16},
                                      "RS": {"value": 0.4, "sigma": 0.3}}})
    assert "RS" in state.parameters
    state.apply_model_json({"parameters": {"IS": {"value": 1.1e-14, "sigma": 2e-17,
                                                  "unit": "A"}}, "temperature_K": 300.15})
    assert set(state.parameters) == {"IS"}
    assert state.parameters["IS"] == Estimate(1.1e-14, 2e-17, True)


def test_model_json_shows_the_fixture_as_the_benchs_and_logs_a_misfit_once():
    """CFIX and RFIX come in from model.json's fixture entries (the table marks them the
    bench's), and a fit whose model does not describe the data is logged as a warning,
    once."""
    from pnbench.tui.app.widgets.params import FIXTURE_LABEL, rows

    state = RunState()
    doc = {"parameters": {"CJO": {"value": 3.2e-11, "sigma": 1e-14, "unit": "F"}},
           "fixture_capacitance_F": {"value": 3.4e-13, "sigma": 6e-15},
           "fixture_resistance_ohm": {"value": 0.49, "sigma": 0.06},
           "fits": {"cv": {"message": "CJO VJ M; the model does not describe the data",
                           "lack_of_fit": {"misfit": True}}}}
    state.apply_model_json(doc)
    state.apply_model_json(doc)
    assert state.parameters["CFIX"].value == 3.4e-13
    assert any(r[0] == FIXTURE_LABEL and "fF" in r[1] for r in rows(state.parameters))
    assert any(r[0] == "RFIX bench" and "ohm" in r[1] for r in rows(state.parameters))
    warned = [e for e in state.log if "does not describe" in e.text]
    assert len(warned) == 1 and warned[0].tag == "WARN"
