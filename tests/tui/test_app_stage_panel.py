"""The run screen's stage panel of a run over temperature: set point, reading, state and
the set points done and left, from the stage events; absent for a run at one temperature.
The simulated stage and the bundled over_temperature.toml plan are the project's own."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from pnbench.sweeps import events as ev
from pnbench.tui.app.state import RunState
from pnbench.tui.app.widgets.stage import stage_lines

PLAN = Path(str(resources.files("pnbench.sim_configs") / "plans" / "over_temperature.toml"))


def state_over(*set_points: float) -> RunState:
    state = RunState()
    state.set_points_K = set_points
    steps = [(f"{name}@{t:.6g}K", kind, 10) for t in set_points
             for name, kind in (("forward", "iv_forward"), ("cv", "cv"))]
    state.set_plan_steps(steps)
    return state


def test_no_set_points_no_panel():
    assert stage_lines(RunState()) == []


def test_the_panel_follows_the_stage_through_its_set_points():
    # -25 degC as the plan reads it: 273.15 - 25 is not exactly 248.15 in binary
    first, second = -25 + 273.15, 298.15
    state = state_over(first, second)
    assert stage_lines(state) == ["Stage: not sent yet", "set points: 0 done, 2 left of 2"]
    state.apply_event(ev.StageRamping(seq=1, set_point_K=first, temperature_K=299.6,
                                      ramp_K_per_min=20.0))
    assert stage_lines(state) == ["Stage: ramping at 20 K/min", "set   248.15 K (-25 degC)",
                                  "was   299.6 K when sent", "set point 1 of 2: 0 done, 1 left"]
    state.apply_event(ev.StageStable(seq=2, set_point_K=first, temperature_K=248.12,
                                     waited_s=324.0))
    lines = stage_lines(state)
    assert lines[0] == "Stage: stable \u2713 after 5:24"
    assert lines[2] == "reads 248.12 K, -0.03 K from set"
    state.apply_event(ev.StageDrifting(seq=3, set_point_K=first, temperature_K=248.4,
                                       band_K=0.1, during="forward@248.15K"))
    assert stage_lines(state)[0] == "Stage: DRIFTING"
    for name in ("forward@248.15K", "cv@248.15K"):
        state.apply_event(ev.StepFinished(seq=4, step=name, status="done", done=10,
                                          planned=10))
    state.apply_event(ev.StageRamping(seq=5, set_point_K=second, temperature_K=248.2))
    assert stage_lines(state)[-1] == "set point 2 of 2: 1 done, 0 left"
    for name in ("forward@298.15K", "cv@298.15K"):
        state.apply_event(ev.StepFinished(seq=6, step=name, status="done", done=10,
                                          planned=10))
    state.apply_event(ev.Output(seq=7, role="stage", on=False, confirmed=True))
    assert stage_lines(state) == ["Stage: to standby", "set points: 2 done, 0 left of 2"]


def test_a_watched_run_takes_its_set_points_from_its_step_names():
    state = RunState()
    state.set_plan_steps([("forward@248.15K", "iv_forward", 5), ("forward@398.15K",
                                                                 "iv_forward", 5)])
    assert stage_lines(state)[-1] == "set points: 0 done, 2 left of 2"


async def test_the_run_screen_shows_the_stage_of_the_bundled_plan_at_80x24(tmp_path):
    from textual.widgets import Static

    from pnbench.tui.app.application import PnbenchApp
    from pnbench.tui.app.widgets.stage import StagePanel

    app = PnbenchApp(PLAN, bench="lh-hm27@pnsim:time_scale=0", out_dir=tmp_path / "runs",
                     autostart=True, report=False)
    async with app.run_test(size=(80, 24)) as pilot:
        panel = app.screen.query_one(StagePanel)
        for _ in range(1200):
            if app.state.finished and not app.live.running:
                break
            await pilot.pause(0.05)
        await pilot.pause(0.5)
        text = str(panel.render())
        assert panel.display and panel.region.width > 0
        assert text.splitlines() == ["Stage: to standby", "set points: 4 done, 0 left of 4"]
        summary = str(app.screen.query_one("#progress-summary", Static).render())
        assert "stage" in summary  # the progress line still says it too


async def test_a_plan_at_one_temperature_has_no_stage_panel(tmp_path):
    from plantext import sweep_plan

    from pnbench.tui.app.application import PnbenchApp
    from pnbench.tui.app.widgets.stage import StagePanel

    plan = tmp_path / "plan.toml"
    plan.write_text(sweep_plan("LH-QT16-one", 5, 0), encoding="utf-8")
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=tmp_path / "runs")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.3)
        assert not app.screen.query_one(StagePanel).display
