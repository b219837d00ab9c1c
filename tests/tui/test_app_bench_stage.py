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
