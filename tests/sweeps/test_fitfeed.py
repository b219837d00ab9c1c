"""The fit worker between the runner and the fitters: what its ``fit`` events publish, what
the live admittance fit takes from the run's earlier steps, and when a step has settled.

Data: a tuning varactor (the LH-VC510 of the bundled simulated devices) computed by
pnbench's own exact DC model (checked against ngspice in tests/modeling) and, for the
LCR meter, the simulated bench's reading at the step's test level (the fundamental of
the current, `drivers.sim.physics`), with Gaussian reading noise of a fixed seed.
"""

from __future__ import annotations

import math

import numpy as np
from plantext import admittance, cv, forward, plan_text, reverse

from pnbench.drivers.sim.physics import fundamental_admittance
from pnbench.modeling import junction
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.smallsignal import parallel_from_admittance
from pnbench.sweeps.events import EventBus
from pnbench.sweeps.fitfeed import MAX_REL_SIGMA, FitWorker, estimates, settle_targets
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.store import Point

T_K = 300.15
TRUE = DiodeParams(IS=4e-15, N=1.03, RS=0.42, CJO=3.2e-11, VJ=0.72, M=0.5, TT=2e-9)
STEPS = {
    "forward": forward(stop="0.85 V", points=56),
    "cv": cv(bias_start="0 V", bias_stop="-30 V", bias_points=31),
    "reverse": reverse(stop="-36 V", points=73),
    "admittance": admittance(),
}


def iv_points(step: str, v: np.ndarray, rng, rel=1e-3) -> list[Point]:
    i = np.asarray(junction.current(v, TRUE, T_K), dtype=float)
    i = i * (1 + rel * rng.standard_normal(i.size))
    return [Point(step, k, "iv", 0.0, voltage_V=float(a), current_A=float(b))
            for k, (a, b) in enumerate(zip(v, i, strict=True))]


def lcr_points(step: str, v: np.ndarray, f: np.ndarray, rng, rel=2e-3,
               level_V: float = 0.0, rfix: float = 0.0) -> list[Point]:
    """C-V points as the meter reads them at the test level ``level_V`` (rms), through
    a fixture series resistance ``rfix`` when given."""
    vv, ff = np.repeat(v, f.size), np.tile(f, v.size)
    y = np.array([fundamental_admittance(a, b, level_V, TRUE, T_K)
                  for a, b in zip(vv, ff, strict=True)])
    y = y / (1.0 + rfix * y)
    c, g = parallel_from_admittance(y, ff)
    c = np.asarray(c) * (1 + rel * rng.standard_normal(vv.size))
    g = np.asarray(g) * (1 + rel * rng.standard_normal(vv.size))
    return [Point(step, k, "cv", 0.0, voltage_V=float(a), frequency_Hz=float(b),
                  capacitance_F=float(x), conductance_S=float(y))
            for k, (a, b, x, y) in enumerate(zip(vv, ff, c, g, strict=True))]


def step_points(name: str, rng) -> list[Point]:
    if name == "forward":
        return iv_points(name, np.linspace(0.3, 0.85, 56), rng)
    if name == "cv":  # the plan's default test levels: 20 mV for C-V, 5 mV forward
        return lcr_points(name, np.linspace(0.0, -30.0, 31), np.array([1e5, 1e6]), rng,
                          level_V=0.02)
    return lcr_points(name, np.array([0.55, 0.6, 0.63, 0.66, 0.68, 0.70, 0.72]),
                      np.array([1e5, 3e5, 1e6, 2e6]), rng, level_V=0.005)


def plan_of(names, extra: dict | None = None):
    """The plan of these STEPS, each with the ``extra`` keys."""
    return parse_plan(plan_text(*({**STEPS[n], **(extra or {})} for n in names),
                                device="LH-VC510"))


def run_steps(names, extra: dict | None = None, points=None, worker_out=None) -> list:
    """Feed each step's points through a started FitWorker as the runner does (submit,
    then step_done) and return the fit events (the worker goes into ``worker_out``)."""
    plan = plan_of(names, extra)
    bus = EventBus()
    seen = []
    bus.add_listener(seen.append)
    worker = FitWorker(plan.steps, bus, temperature_K=T_K, snapshot_interval_s=0.01)
    worker.start()
    rng = np.random.default_rng(510)
    for step in plan.steps:
        for p in (points or {}).get(step.name) or step_points(step.name, rng):
            worker.submit(step, p)
        worker.step_done(step.name)
    worker.finish()
    if worker_out is not None:
        worker_out.append(worker)
    return [e for e in seen if e.kind == "fit"]


def final(fits, step):
    return [e for e in fits if e.step == step][-1].data


def test_live_admittance_takes_cv_and_iv_values_and_gives_tt():
    """After the I-V and C-V steps, a forward-bias admittance step yields TT (within
    5 %); CJO, VJ, M and IS, N, RS are held from those steps, not refitted from forward
    points that cannot pin them."""
    fits = run_steps(["forward", "cv", "admittance"])
    adm = final(fits, "admittance")
    assert set(adm["parameters"]) == {"TT"}, adm["message"]
    tt = adm["parameters"]["TT"]
    assert abs(tt["value"] / TRUE.TT - 1) < 0.05 and tt["sigma"] < 0.05 * tt["value"]
    cv = final(fits, "cv")["parameters"]
    assert abs(cv["CJO"]["value"] / TRUE.CJO - 1) < 0.02


def test_forward_admittance_alone_publishes_no_bound_or_vague_values():
    """Without earlier steps, forward-bias points alone leave CJO, VJ, M undetermined:
    no fit event shows them as estimates (nothing at a bound of the fitter, nothing
    with a relative sigma beyond MAX_REL_SIGMA); they are listed as not determined."""
    fits = run_steps(["admittance"])
    assert fits
    for e in fits:
        for name, p in e.data["parameters"].items():
            assert p["sigma"] is None or p["sigma"] <= MAX_REL_SIGMA * abs(p["value"]), name
            assert name != "CJO" or p["value"] < 1e-6, p  # CJO's upper bound is 1 F
    last = final(fits, "admittance")
    assert "CJO" not in last["parameters"] or "VJ" not in last["parameters"]
    assert set(last["not_determined"]) & {"CJO", "VJ", "M"}


def _result(success=True, extras=None, **values):
    names = tuple(values)
    sig = {k: s for k, (_, s) in values.items()}
    return FitResult(kind="admittance", names=names,
                     values={k: v for k, (v, _) in values.items()}, sigmas=sig,
                     covariance=np.diag([s * s for s in sig.values()]),
                     correlation=np.eye(len(names)), used=np.ones(4, bool), n_points=4,
                     reduced_chi2=1.0, success=success, message="by hand",
                     extras=extras or {})


def test_estimates_leave_out_bound_vague_and_failed_values():
    r = _result(extras={"at_bound": ["CJO"]}, CJO=(1.0, 1e-3), VJ=(5.0, 25.0),
                M=(0.5, 0.4), BV=(34.0, math.inf))
    shown, dropped = estimates(r)
    assert shown == ["M", "BV"]
    assert "edge" in dropped["CJO"] and "500%" in dropped["VJ"]
    shown, dropped = estimates(_result(False, M=(0.5, 0.01)))
    assert shown == [] and dropped == {"M": "the fit failed"}


def test_a_marginal_shunt_does_not_hold_up_a_settled_forward_step():
    """A shunt of 100 GOhm shows in the forward points just past the 3-sigma mark (kept,
    with a relative sigma near 15 %): the step settles to 5 % on IS, N and RS, what an
    iv_forward step is for, and the shunt does not keep it going."""
    p = DiodeParams(IS=1e-13, N=1.3, RS=0.5, RSH=1e11)
    rng = np.random.default_rng(3)
    v = np.linspace(0.05, 0.8, 60)
    i = np.asarray(junction.current(v, p, T_K), dtype=float)
    i = i * (1 + 1e-3 * rng.standard_normal(i.size)) + 1e-12 * rng.standard_normal(i.size)
    points = [Point("forward", k, "iv", 0.0, voltage_V=float(a), current_A=float(b))
              for k, (a, b) in enumerate(zip(v, i, strict=True))]
    box = []
    fits = run_steps(["forward"], extra={"end_when_settled": 0.05, "min_points": 20},
                     points={"forward": points}, worker_out=box)
    last = final(fits, "forward")["parameters"]
    assert last["RSH"]["sigma"] > 0.05 * last["RSH"]["value"]  # the shunt is marginal
    assert all(last[n]["sigma"] < 0.05 * last[n]["value"] for n in ("IS", "N", "RS"))
    assert box[0].is_settled("forward")


def test_settle_targets_by_step_kind():
    assert settle_targets("iv_forward", ["IS", "N", "RS", "RSH"]) == ("IS", "N", "RS")
    assert settle_targets("iv_forward", ["IS", "N"]) == ("IS", "N")
    assert settle_targets("cv", ["CJO", "VJ", "M", "CFIX"]) == ("CJO", "VJ", "M")
    assert settle_targets("admittance", ["IS", "N", "TT"]) == ("TT",)
    assert settle_targets("admittance", ["IS", "N"]) == ("TT",)  # TT unknown: not settled
    assert settle_targets("iv_reverse", ["BV"]) == ()


def test_a_reverse_step_runs_to_its_end():
    """A reverse step's figures are known only at its end: end_when_settled never ends
    it early, however well its BV is read."""
    p = DiodeParams(IS=4e-15, N=1.03, BV=34.0, IBV=1e-8)
    v = np.concatenate([np.linspace(0.0, -33.0, 23), np.linspace(-33.02, -34.25, 50)])
    i = np.asarray(junction.current(v, p, T_K), dtype=float)
    points = [Point("reverse", k, "iv", 0.0, voltage_V=float(a), current_A=float(b))
              for k, (a, b) in enumerate(zip(v, i, strict=True))]
    box = []
    fits = run_steps(["reverse"], extra={"end_when_settled": 0.5, "min_points": 4},
                     points={"reverse": points}, worker_out=box)
    bv = final(fits, "reverse")["parameters"]["BV"]
    assert bv["sigma"] < 0.01 * bv["value"]  # read over several points through the knee
    assert not box[0].is_settled("reverse")


def test_the_last_steps_end_decides_its_fixture_resistance_from_all_its_points():
    """Fixture leads of 0.5 ohm show only in the admittance sweep's highest-bias points,
    which arrive last, and the run ends with that step (its model follows at once). The
    step's final fit event still weighs every point (TT, RFIX and CFIX stand in for each
    other until then): RFIX and TT within two standard errors of the truth, with the
    points arriving a few at a time."""
    from pnbench.sweeps.fitfeed import _STOP

    plan = plan_of(["forward", "cv", "admittance"])
    bus = EventBus()
    seen = []
    bus.add_listener(seen.append)
    worker = FitWorker(plan.steps, bus, temperature_K=T_K)
    rng = np.random.default_rng(510)
    for step in plan.steps[:2]:
        worker.preload(step, step_points(step.name, rng))
    points = lcr_points("admittance", np.array([0.55, 0.6, 0.63, 0.66, 0.68, 0.70, 0.72]),
                        np.array([1e5, 3e5, 1e6, 2e6]), rng, level_V=0.005, rfix=0.5)
    for k in range(0, len(points), 2):  # two at a time: the last full refit comes early
        worker.preload(plan.steps[2], points[k:k + 2])
    worker._handle([("admittance", None), _STOP])
    adm = final([e for e in seen if e.kind == "fit"], "admittance")
    par = adm["parameters"]
    assert "RFIX" in par, adm["message"]
    assert abs(par["RFIX"]["value"] - 0.5) < 2 * par["RFIX"]["sigma"], par
    assert abs(par["TT"]["value"] - TRUE.TT) < 2 * par["TT"]["sigma"], par
