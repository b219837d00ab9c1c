"""What a bench user meets in the first hour of the app, at 80x24 and 140x45: the
bundled example when no plan is given, F1 in pnbench's own words, messages that do not
cover the plot, Ctrl+R on the Run screen, the hazardous-voltage word in the start
question, no internal codes on screen, who switched the outputs off, the Bench screen's
identify feedback, socket note and one point by hand, and the report at the end of a
sweep run in the app (or not, with --no-report)."""

from __future__ import annotations

import numpy as np
import pytest
from plantext import sweep_plan
from test_app_run import wait_for

from pnbench.errors import PlanError, SafetyStop
from pnbench.sweeps.onepoint import measure_one
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.app.application import PnbenchApp
from pnbench.tui.app.control import RunControl
from pnbench.tui.app.events import describe
from pnbench.tui.app.state import RunState
from pnbench.tui.app.widgets.banner import MessageStrip, banner_text

SIZES = [(80, 24), (140, 45)]
SIM = "lh-qt16@pnsim:time_scale=0"  # the simulated bench, as the plan's backend


def plan_file(tmp_path, forward=10, reverse=11, **kw):
    path = tmp_path / "plan.toml"
    path.write_text(sweep_plan("LH-QT16-t1", forward, reverse, **kw), encoding="utf-8")
    return path


def screen_text(screen) -> str:
    return "\n".join(str(w.render()) for w in screen.query("Static"))


@pytest.mark.parametrize("size", SIZES)
async def test_ui_without_a_plan_opens_the_bundled_example_on_the_plan_screen(size):
    app = PnbenchApp(bench="lh-vc510@pnsim:time_scale=0")
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.2)
        assert app.current_mode == "plan"
        assert app.plan is not None and app.plan_path is None  # a copy: Save asks where
        assert "[[steps]]" in app.screen.query_one("TextArea").text
        assert "CHECK PASSED" in str(app.screen.query_one("#plan-messages").render())


@pytest.mark.parametrize("size", SIZES)
async def test_f1_leads_with_the_screens_own_keys_and_readable_view_names(tmp_path, size):
    app = PnbenchApp(plan_file(tmp_path), bench="lh-qt16@pnsim:time_scale=0")
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.2)
        assert app.current_mode == "run"
        await pilot.press("f1")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "KeysScreen", "F1")
        text = str(app.screen.query_one("#keys-text").render())
        assert text.startswith("On the Run screen:")
        first = text.splitlines()[1]
        assert "Start" in first  # pnbench's keys first, not cursor movement
        for title in ("I-V forward", "Mott-Schottky", "admittance C"):
            assert title in text
        assert "view yc" not in text and "view mott" not in text
        assert "Cursor" not in text
        assert text.index("Everywhere:") > text.index("Abort")
        await pilot.press("escape")
        await pilot.pause(0.1)
        assert type(app.screen).__name__ == "RunScreen"


@pytest.mark.parametrize("size", SIZES)
async def test_messages_push_the_screen_down_instead_of_covering_plot_or_last_line(
        tmp_path, size):
    app = PnbenchApp(plan_file(tmp_path), bench="lh-qt16@pnsim:time_scale=0")
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.2)
        app.notify("a message long enough to wrap on a small terminal " * 2, title="Note")
        await pilot.pause(0.2)
        screen = app.screen
        strip = screen.query_one(MessageStrip)
        assert strip.display and strip.region.height >= 1
        assert not list(app._notifications)  # no toast floating over the screen
        for name in ("#run-plot", "#run-last"):
            region = screen.query_one(name).region
            assert region.height >= 1 and not region.overlaps(strip.region), name
        assert screen.query_one("#run-last").region.bottom <= size[1] - 1


async def test_ctrl_r_on_the_run_screen_asks_to_start(tmp_path):
    app = PnbenchApp(plan_file(tmp_path), bench="lh-qt16@pnsim:time_scale=0")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        assert app.current_mode == "run"
        await pilot.press("ctrl+r")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "ConfirmDialog",
                       "the start question")
        await pilot.press("n")
        await pilot.pause(0.1)
        assert app.live is None


def test_the_start_question_names_a_hazardous_voltage(tmp_path):
    """Threshold of 60 V DC as the plan rules use it (IEC 61010-1, older editions)."""
    text = sweep_plan("LH-QT16-t1", 5, 5, reverse_stop="-80 V").replace(
        'max_reverse_voltage = "20 V"',
        'max_reverse_voltage = "90 V"\nacknowledge_hazardous_voltage = "90 V"')
    plan = parse_plan(text, "hv.toml")
    question = RunControl(None, bench="lh-qt16@pnsim").start_question(plan)
    assert "HAZARDOUS VOLTAGE" in question and "90 V" in question
    safe = parse_plan(sweep_plan("LH-QT16-t1", 5, 5), "safe.toml")
    assert "HAZARDOUS" not in RunControl(None).start_question(safe)


def test_internal_codes_do_not_reach_the_log():
    line = describe({"kind": "step_finished", "status": "ended_early", "done": 12,
                     "planned": 40, "ended_by": "compliance_storm"})
    assert "compliance_storm" not in line and "repeated compliance" in line
    assert "_" not in describe({"kind": "run_finished", "status": "safety_stop"})


def test_the_banner_says_who_switched_the_outputs_off_and_when_nothing_was_connected():
    state = RunState()
    state.apply_run_json({"status": "interrupted", "outputs_off_confirmed": True,
                          "guardian": {"at": "x", "outputs_off_confirmed": True}})
    state.outputs = {"smu": False}
    assert banner_text(state.outputs, state=state) == (
        False, "outputs off (confirmed by the guardian)")
    state.apply_run_json({"status": "completed", "outputs_off_confirmed": True,
                          "guardian": None})
    assert banner_text(state.outputs, state=state)[1].endswith("(confirmed by the runner)")
    never = RunState()
    never.apply_event({"kind": "run_finished", "status": "failed", "connected": False,
                       "outputs_off_confirmed": False})
    assert "never connected" in banner_text({}, state=never)[1]


def test_one_point_by_hand_keeps_to_the_plans_limits_and_ends_off(tmp_path):
    plan = parse_plan(sweep_plan("LH-QT16-t1", 5, 5), "p.toml")
    result = measure_one(plan.on_simulated_bench(SIM), "0.6 V", "10 mA")
    assert result.source == "voltage" and result.outputs_off_confirmed
    assert 0 < result.current_A <= 10e-3 and abs(result.voltage_V - 0.6) < 0.01
    assert "off, confirmed" in result.line()
    with pytest.raises(SafetyStop, match="max_current"):
        measure_one(plan.on_simulated_bench(SIM), "0.6 V", "80 mA")  # limit 50 mA
    with pytest.raises(SafetyStop, match="voltage limits"):
        measure_one(plan.on_simulated_bench(SIM), "-30 V", "1 mA")  # limit 20 V reverse
    with pytest.raises(SafetyStop, match="max_power"):
        measure_one(plan.on_simulated_bench(SIM), "-20 V", "10 mA")  # 200 mW > 50 mW


async def test_bench_screen_identify_answers_and_one_point_is_measured(tmp_path):
    app = PnbenchApp(plan_file(tmp_path), bench="lh-qt16@pnsim:time_scale=0")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        app.switch_mode("bench")
        await pilot.pause(0.2)
        assert "cannot be discovered" in screen_text(app.screen)
        await pilot.press("i")
        await wait_for(pilot, lambda: "answered" in app.last_message, "identify")
        assert "1 of 1 instruments answered" in app.last_message  # the plan needs the SMU
        assert "answered" in screen_text(app.screen)
        await pilot.press("m")
        await wait_for(pilot, lambda: type(app.screen).__name__ == "PointDialog", "dialog")
        await pilot.press("enter")  # the offered 0.5 V at 1 mA
        await wait_for(pilot, lambda: "one point:" in app.last_message, "the point")
        assert "off, confirmed" in app.last_message


@pytest.mark.parametrize("report", [True, False])
async def test_a_sweep_in_the_app_ends_with_its_report_unless_told_not_to(tmp_path, report):
    app = PnbenchApp(plan_file(tmp_path, 8, 0), bench="lh-qt16@pnsim:time_scale=0",
                     out_dir=tmp_path / "runs", autostart=True, report=report)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: app.state.finished and not app.live.running,
                       "the end of the run")
        if report:
            await wait_for(pilot, lambda: (app.last_run_dir / "report.html").exists(),
                           "the report")
            await wait_for(pilot, lambda: "report written" in app.last_message, "word")
        else:
            await wait_for(pilot, lambda: "against the simulated part" in app.last_message,
                           "the rehearsal check")
            assert not (app.last_run_dir / "report.html").exists()
        # a rehearsal on the simulated bench also sets the fit against its part
        assert "against the simulated part LH-QT16: " in app.last_message


def test_the_hazardous_voltage_message_has_no_internal_aside():
    text = sweep_plan("LH-QT16-t1", 5, 5).replace('max_reverse_voltage = "20 V"',
                                                   'max_reverse_voltage = "80 V"')
    with pytest.raises(PlanError) as err:
        parse_plan(text, "hv.toml")
    message = str(err.value)
    assert "acknowledge_hazardous_voltage" in message and "60 V" in message
    assert "from memory" not in message and "…" not in message


def _admittance_state(biases) -> RunState:
    state = RunState()
    state.set_plan_steps([("adm", "admittance", len(biases) * 4)])
    for bias in biases:
        for f in (1e5, 3e5, 1e6, 2e6):
            state.add_point({"step": "adm", "point_kind": "cv", "voltage_V": bias,
                             "frequency_Hz": f, "capacitance_F": 1e-10 * (1 + bias),
                             "conductance_S": 1e-3 * bias, "time_s": 0.0})
    return state


@pytest.mark.parametrize("size", SIZES)
async def test_the_admittance_legend_shows_every_bias(tmp_path, size):
    from pnbench.tui.app.plots import plot_data
    from pnbench.tui.app.widgets.plot import SweepPlot

    biases = [0.50, 0.52, 0.55, 0.58, 0.60, 0.62, 0.64]  # 7, as in a bundled plan
    data = plot_data("yc", _admittance_state(biases))
    labels = [s.label for s in data.series if not s.line]
    assert labels == [f"{b:+.3g} V" for b in biases]
    assert len(set(s.marker for s in data.series if not s.line)) == 7
    app = PnbenchApp(plan_file(tmp_path), bench="lh-qt16@pnsim:time_scale=0")
    async with app.run_test(size=size) as pilot:
        await pilot.pause(0.2)
        plot = app.screen.query_one(SweepPlot)
        plot.show(data, "6/7")
        await pilot.pause(0.2)
        title = plot.query_one(".plot-title")
        shown = "\n".join(line.text for line in title.render_lines(title.region.reset_offset))
        for label in labels:
            assert label in shown.replace("\n", " "), (label, shown)
    many = plot_data("yc", _admittance_state([0.3 + 0.02 * k for k in range(13)]))
    assert "10 of 13 biases shown" in many.note


def test_the_residual_rms_leaves_out_reverse_points_at_the_noise_floor():
    """A forward fit that is good, and reverse points at a 10 pA floor that the model's
    femtoamperes cannot meet: the rms stated is the forward one."""
    from pnbench.modeling import junction
    from pnbench.modeling.params import DiodeParams
    from pnbench.tui.app.plots import plot_data
    from pnbench.tui.app.state import Estimate

    p = DiodeParams(IS=1e-14, N=1.05, RS=0.5, RSH=1e12)
    state = RunState()
    state.set_plan_steps([("fwd", "iv_forward", 30), ("rev", "iv_reverse", 30)])
    for v in np.linspace(0.3, 0.7, 30):
        i = float(junction.current(v, p, 300.15)) * 1.01
        state.add_point({"step": "fwd", "point_kind": "iv", "voltage_V": v, "current_A": i})
    for v in np.linspace(-0.1, -5, 30):
        state.add_point({"step": "rev", "point_kind": "iv", "voltage_V": v,
                         "current_A": -1e-11})
    state.parameters = {name: Estimate(getattr(p, name), None, True)
                        for name in ("IS", "N", "RS", "RSH")}
    data = plot_data("resid", state)
    assert data.note.startswith("forward rms 0.00")  # a 1 % misfit is 0.004 decades
    assert any(s.label == "reverse" for s in data.series)  # still drawn
