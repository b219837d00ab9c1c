"""Dry runs of every bundled plan on its bundled device: the simulated bench over real
loopback sockets (pyvisa-py), the runner, the run folder and the fitters, end to end.

Recovery rule: an extracted parameter passes when

    |fit - true| <= tol_rel * |true| + 4 * sigma_fit

`tol_rel` is the extraction tolerance below (what the fitting method is trusted to in the
absence of noise, with the simulator's systematic effects: fixture capacitance, lead
resistance, the forward-bias linearization of Cj above FC*VJ); `sigma_fit` is the fit's own
standard error, which carries the simulated instrument noise. Four sigma keeps a true
model inside the band with probability above 99.99 % for Gaussian noise (normal
distribution table, common practice). BV is stated by the fit at its own IBV (the
plan's breakdown guard, at most 1 mA); it is checked against the true device's reverse
voltage at that same current, computed by `pnbench.modeling.junction.voltage`.
"""

from __future__ import annotations

import json
import math
from importlib import resources
from pathlib import Path

import pytest

from pnbench.drivers.sim.device import resolve_device
from pnbench.modeling.junction import voltage
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import load_plan
from pnbench.sweeps.store import read_points, read_run

TOL_REL = {"IS": 0.10, "N": 0.02, "RS": 0.05, "RSH": 0.25, "CJO": 0.05, "VJ": 0.10,
           "M": 0.10, "TT": 0.10}
#: What each bundled plan must extract (a Schottky plan has no admittance step: TT = 0).
EXPECTED = {
    "lh-vc510": ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"),
    "lh-qt16": ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"),
    "lh-hm27": ("IS", "N", "RS", "RSH", "CJO", "VJ", "M", "BV"),
    "lh-vh720": ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"),
    "lh-zl560": ("IS", "N", "RS", "RSH", "CJO", "VJ", "M", "TT", "BV"),
}


def plan_path(name: str) -> Path:
    return Path(str(resources.files("pnbench.sim_configs") / "plans" / f"{name}.toml"))


@pytest.mark.parametrize("device", sorted(EXPECTED))
def test_bundled_plan_recovers_the_device(device, tmp_path):
    plan = load_plan(plan_path(device))
    launch = Launch.new(plan.on_simulated_bench(f"{device}@pnsim:time_scale=0"),
                        out_dir=tmp_path)
    outcome = launch.run()
    assert outcome.status == "completed", outcome.reason
    assert outcome.outputs_off_confirmed and outcome.exit_code == 0
    run = read_run(launch.run_dir)
    assert run["outputs_off_confirmed"] is True and run["status"] == "completed"
    points = read_points(launch.run_dir)
    for step in run["steps"]:
        mine = [p.index for p in points if p.step == step["name"]]
        assert mine == list(range(step["done"])), step["name"]
        assert step["status"] in ("done", "limit")
        # a bundled plan stays inside its own compliance: a step may end only at its
        # breakdown guard, as planned, never by running into the limit it set
        assert step.get("ended_by") in (None, "breakdown_guard"), (step["name"], step)
    assert not [p for p in points if p.compliance], device

    true = resolve_device(device).params
    model = json.loads((launch.run_dir / "model.json").read_text())["parameters"]
    card = (launch.run_dir / f"{plan.device.name}.lib").read_text()
    assert f".model {plan.device.name} D(" in card
    for name in EXPECTED[device]:
        assert name in model, f"{device}: {name} not extracted"
        value, sigma = model[name]["value"], model[name]["sigma"] or 0.0
        if name == "BV":
            ibv = model["IBV"]["value"]
            expected = -float(voltage(-ibv, true, resolve_device(device).temperature_K))
            assert abs(value - expected) <= 0.005 * expected + 4 * sigma, (name, value,
                                                                           expected)
            continue
        target = getattr(true, name)
        assert math.isfinite(target)
        assert abs(value - target) <= TOL_REL[name] * abs(target) + 4 * sigma, (
            f"{device} {name}: fit {value:.5g} +- {sigma:.2g}, true {target:.5g}")
    if math.isinf(true.RSH):
        # the I-V fits see no shunt, so none may come in from the admittance fit
        assert "RSH" not in model, f"{device}: RSH {model.get('RSH')} on a device without"
    check_live_fits(launch.run_dir, plan)


def check_live_fits(run_dir: Path, plan) -> None:
    """What the fit events publish while the run goes on: estimates only (none with a
    relative sigma beyond 100 %; values on a bound of their fitter come with such a
    sigma, or none), and the final fit of a forward admittance step (after the C-V and
    I-V steps) gives TT."""
    events = [json.loads(line) for line in (run_dir / "events.jsonl").read_text()
              .splitlines()]
    fits = [e for e in events if e["kind"] == "fit"]
    assert fits
    for e in fits:
        for name, p in e["parameters"].items():
            assert p["value"] is not None, (e["step"], name)
            assert p["sigma"] is None or abs(p["sigma"]) <= abs(p["value"]), (e["step"], p)
    kinds = {s.name: s.kind for s in plan.steps}
    for step in (s for s, k in kinds.items() if k == "admittance"):
        last = [e for e in fits if e["step"] == step][-1]
        assert "TT" in last["parameters"], last["message"]
