"""The app's Bench screen rows for a plan over temperature: the thermal stage is listed
and identified like the SMU and the LCR meter."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from pnbench.sweeps.plan import load_plan
from pnbench.tui.app.bench import identify_rows, plan_rows

PLAN = Path(str(resources.files("pnbench.sim_configs") / "plans" / "over_temperature.toml"))


def test_the_stage_is_a_row_and_answers():
    plan = load_plan(PLAN)
    rows = plan_rows(plan, "lh-vc510")
    assert [r.role for r in rows] == ["lcr", "smu", "stage"]
    answered = identify_rows(rows, plan, "lh-vc510")
    stage = next(r for r in answered if r.role == "stage")
    assert stage.state == "answered" and "thermal stage" in stage.identity


def test_stage_events_read_in_the_app_log():
    from pnbench.sweeps import events as ev
    from pnbench.tui.app.events import LOG_TAGS, describe

    ramp = ev.StageRamping(set_point_K=398.15, temperature_K=300.1, ramp_K_per_min=20.0)
    drift = ev.StageDrifting(set_point_K=398.15, temperature_K=398.4, band_K=0.1,
                             during="forward@398.15K")
    assert LOG_TAGS["stage_ramping"] == "STAGE" and LOG_TAGS["stage_drifting"] == "DRIFT"
    assert describe(ramp) == "stage: to 398.15 K (125 degC) at 20 K/min, now 300.1 K (26.95 degC)"
    assert "drifting during forward@398.15K" in describe(drift)
    off = ev.Output(role="stage", on=False, confirmed=True)
    assert describe(off) == "stage to its standby temperature (set point confirmed)"


def test_the_run_screen_summary_shows_the_stage():
    """The stage's set point, state, time to stable and reading in the progress line."""
    from pnbench.sweeps import events as ev
    from pnbench.tui.app.state import RunState
    from pnbench.tui.app.widgets.progress import stage_text, summary_line

    state = RunState()
    assert stage_text(state.stage) == ""
    state.apply_event(ev.StageRamping(seq=1, set_point_K=398.15, temperature_K=300.1))
    assert "stage 398.15 K: ramping, reads 300.1 K" in summary_line(state)
    state.apply_event(ev.StageStable(seq=2, set_point_K=398.15, temperature_K=398.12,
                                     waited_s=324.0))
    assert "stage 398.15 K: stable \u2713 after 5:24, reads 398.12 K" in summary_line(state)
    state.apply_event(ev.Output(seq=3, role="stage", on=False, confirmed=True))
    assert state.stage["state"] == "standby" and "stage" not in state.outputs


def test_the_arrhenius_view_draws_each_temperature_and_the_fit():
    """Data from the project's temperature model (modeling.temperature, checked against
    ngspice in tests/modeling/test_temperature_ngspice.py)."""
    import numpy as np

    from pnbench.modeling import junction
    from pnbench.modeling import temperature as tm
    from pnbench.modeling.fit_temperature import fit_over_temperature
    from pnbench.modeling.params import DiodeParams
    from pnbench.tui.app.plots import plot_data
    from pnbench.tui.app.state import RunState

    card = DiodeParams(IS=1e-14, N=1.02, RS=0.8, EG=1.12, XTI=3.0)
    rng = np.random.default_rng(8)
    sets = []
    for t in (260.0, 300.0, 340.0):
        p = tm.params_at(card, t, 300.15)
        v = junction.voltage(np.logspace(-8, -2, 20), p, t)
        i = junction.current(v, p, t) * (1 + 2e-3 * rng.standard_normal(v.size))
        sets.append((t, {"iv": {"voltage_V": v, "current_A": i}}))
    state = RunState()
    state.apply_model_json(fit_over_temperature(sets).model.to_json_dict())
    data = plot_data("arr", state.snapshot())
    points, fit = data.series
    assert np.allclose(points.x, 1000.0 / np.array([260.0, 300.0, 340.0]))
    assert fit.line and "EG 1.1" in data.note
    # the fitted line passes through each temperature's IS
    assert np.interp(points.x[::-1], fit.x[::-1], fit.y[::-1]) == \
        __import__("pytest").approx(points.y[::-1], abs=0.01)
