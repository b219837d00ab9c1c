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
