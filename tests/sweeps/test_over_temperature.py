"""Runs over temperature on the simulated bench: the bundled plan end to end, a stage
that cannot reach its set point, and the way out (sources off, then the stage to standby).

The simulated diode follows the reference simulator's temperature equations
(modeling.temperature, checked against ngspice in tests/modeling/test_temperature_ngspice.py
and tests/drivers/test_stage.py); the bundled devices' EG and XTI are their files' own.
"""

from __future__ import annotations

import json
import math
from importlib import resources
from pathlib import Path

import pytest

from pnbench.drivers.sim.device import resolve_device
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import load_plan, parse_plan
from pnbench.sweeps.store import read_columns, read_points, read_run

PLAN = Path(str(resources.files("pnbench.sim_configs") / "plans" / "over_temperature.toml"))


def _events(run_dir: Path) -> list[dict]:
    return [json.loads(line) for line in (run_dir / "events.jsonl").read_text().splitlines()]


@pytest.mark.parametrize("device", ["lh-vc510", "lh-hm27"])
def test_the_bundled_plan_ends_with_eg_and_xti(device, tmp_path):
    plan = load_plan(PLAN)
    launch = Launch.new(plan.on_simulated_bench(f"{device}@pnsim:time_scale=0"),
                        out_dir=tmp_path)
    outcome = launch.run()
    assert outcome.status == "completed", outcome.reason
    assert outcome.outputs_off_confirmed and outcome.exit_code == 0
    run_dir = launch.run_dir
    model = json.loads((run_dir / "model.json").read_text())
    truth = resolve_device(device).card
    eg, xti = model["parameters"]["EG"], model["parameters"]["XTI"]
    # within 4 sigma plus 1 % (EG) and 5 % (XTI): the targets for clean data
    assert abs(eg["value"] - truth.EG) <= 0.01 * truth.EG + 4 * eg["sigma"]
    assert abs(xti["value"] - truth.XTI) <= 0.05 * truth.XTI + 4 * xti["sigma"]
    assert eg["unit"] == "eV"
    assert model["temperature_K"] == pytest.approx(298.15, abs=0.5)  # TNOM: nearest 27 degC
    assert len(model["temperatures"]) == 4
    card = next(run_dir.glob("*.lib")).read_text()
    assert "EG=" in card and "XTI=" in card and "TNOM=" in card
    events = _events(run_dir)
    stable = [e for e in events if e["kind"] == "stage_stable"]
    assert [round(e["set_point_K"], 2) for e in stable] == [248.15, 298.15, 348.15, 398.15]
    # Every step starts only after its set point is stable.
    for e in events:
        if e["kind"] == "step_started":
            sp = plan.step(e["step"]).set_point_K
            before = [x for x in events if x["seq"] < e["seq"] and x["kind"] == "stage_stable"]
            assert before and math.isclose(before[-1]["set_point_K"], sp)
    # every point records the stage's temperature, within the band of its set point
    header = [ln for ln in (run_dir / "points.csv").read_text().splitlines()
              if not ln.startswith("#")][0]
    assert header.endswith(",temperature_K")
    cols = read_columns(run_dir)
    for name, t in zip(cols.steps(), cols.temperature_K, strict=True):
        assert abs(t - plan.step(name).set_point_K) <= 0.1, (name, t)
    points = read_points(run_dir)
    run = read_run(run_dir)
    for step in run["steps"]:
        mine = [p.index for p in points if p.step == step["name"]]
        assert mine == list(range(step["done"])), step["name"]


def test_a_stage_that_cannot_reach_its_set_point_stops_the_run_safely(tmp_path):
    """A weak stage (reaches 360 K at most) and a 398 K set point: exit code 3, the
    sources off first, then the stage to standby."""
    device = tmp_path / "weak.toml"
    device.write_text('[device]\npart = "LH-T-WEAK"\n[diode]\nIS = 1e-14\nN = 1.02\n'
                      '[stage]\nreach_high_K = 360.0\n', encoding="utf-8")
    text = PLAN.read_text(encoding="utf-8").replace('timeout = "1800 s"', 'timeout = "900 s"')
    plan = parse_plan(text, str(PLAN))
    launch = Launch.new(plan.on_simulated_bench(f"{device}@pnsim:time_scale=0"),
                        out_dir=tmp_path / "runs")
    outcome = launch.run()
    assert outcome.status == "failed" and outcome.exit_code == 3
    assert "did not reach and hold 398.15 K within 900 s" in outcome.reason
    assert outcome.outputs_off_confirmed
    events = _events(launch.run_dir)
    offs = [e["role"] for e in events if e["kind"] == "output" and e.get("confirmed")]
    assert offs[-1] == "stage" and set(offs[-3:]) >= {"smu", "stage"}
    done = [s for s in read_run(launch.run_dir)["steps"] if s["status"] in ("done", "limit")]
    assert len(done) == 4  # the three set points it reached ran completely
