"""The report of a real run: the runner on the simulated bench writes the folder.

The plan is the shipped demo plan (an invented varactor of an invented lab), run at
time scale 0 so it takes a few seconds; the report must draw every figure from it and
say only what the run itself left out (the reverse sweep stops at the breakdown guard).
"""

from __future__ import annotations

import base64
import json

import pytest
from report_runs import check_png, scan

from pnbench.tui.report import build_report
from pnbench.tui.report.figures import FIGURE_NAMES

launch = pytest.importorskip("pnbench.sweeps.launch")


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    from importlib import resources

    from pnbench.sweeps.plan import load_plan

    plan_file = resources.files("pnbench.sim_configs") / "plans" / "lh-vc510.toml"
    plan = load_plan(str(plan_file))
    run = launch.Launch.new(plan.on_simulated_bench("lh-vc510@pnsim:time_scale=0"),
                            out_dir=tmp_path_factory.mktemp("demo"))
    outcome = run.run()
    assert outcome.status == "completed", outcome
    return run.run_dir, build_report(run.run_dir)


def test_a_simulated_demo_run_gets_every_figure(demo_report):
    run_dir, report = demo_report
    page = scan(report.path)
    assert {a["id"] for t, a in page.tags if t == "figure"} == \
        {f"fig-{n}" for n in FIGURE_NAMES}
    for t, a in page.tags:
        if t == "img":
            check_png(base64.b64decode(a["src"].partition(",")[2]))
    for tag, attribute, value in page.urls:
        assert value.startswith(("data:", "#")), (tag, attribute, value)


def test_the_demo_report_states_the_runs_own_facts(demo_report):
    run_dir, report = demo_report
    run = json.loads((run_dir / "run.json").read_text())
    text = " ".join(scan(report.path).text)
    for role, info in run["instruments"].items():
        assert info["identity"] in text, role
    assert run["software_version"] in text
    assert "300.15 K" in text
    model = json.loads((run_dir / "model.json").read_text())
    assert set(model["parameters"]) <= set(text.split())
    # what is missing is only what the run left out (steps that stopped early); a
    # reverse step ending at its breakdown guard did what the plan asked
    short = [s for s in run["steps"] if s["done"] < s["planned"]
             and s.get("ended_by") != "breakdown_guard"]
    assert any(s.get("ended_by") == "breakdown_guard" for s in run["steps"])
    assert len(report.missing) == len(short)
    for step in short:
        assert any(f"step {step['name']}: {step['done']} of {step['planned']}" in m
                   for m in report.missing)
