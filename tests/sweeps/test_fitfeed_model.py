"""The run's model written by the fit worker: provisional after each step (from the live
snapshots, no new fit), fitted once from every point at the end, from the columns the
worker kept in memory (the same model as fitting the points read back as rows).

Data: the LH-VC510 points of test_fitfeed (pnbench's exact DC and small-signal models
with seeded Gaussian noise).
"""

from __future__ import annotations

import json
import time

import numpy as np
import pytest
from test_fitfeed import T_K, plan_of, step_points

from pnbench.modeling import joint
from pnbench.sweeps import fitmodel
from pnbench.sweeps.events import EventBus
from pnbench.sweeps.fitfeed import FitWorker
from pnbench.sweeps.store import Point


def _run(names, monkeypatch):
    plan = plan_of(names)
    written, calls = [], []
    real = joint.fit_all

    def counting(data, **options):
        calls.append({k: len(v["voltage_V"]) for k, v in data.items()})
        return real(data, **options)

    monkeypatch.setattr(joint, "fit_all", counting)
    worker = FitWorker(plan.steps, EventBus(), temperature_K=T_K, snapshot_interval_s=0.01,
                       write_model=written.append, extras={"device": "LH-VC510"})
    worker.start()
    rng = np.random.default_rng(510)
    points = []
    for step in plan.steps:
        for p in step_points(step.name, rng):
            worker.submit(step, p)
            points.append(p)
        worker.step_done(step.name)
        deadline = time.monotonic() + 60
        while len(written) <= plan.steps.index(step) and time.monotonic() < deadline:
            time.sleep(0.005)  # as in a run, the next step comes a while later
    worker.finish()
    return plan, points, written, calls


def test_the_run_model_is_fitted_once_from_every_point(monkeypatch):
    plan, points, written, calls = _run(["forward", "cv", "admittance"], monkeypatch)
    assert calls == [{"iv_forward": 56, "cv": 62, "admittance": 28}]
    *steps, last = written
    assert len(steps) == 3 and all(m.extras.get("provisional") for m in steps)
    assert "provisional" not in last.extras
    # the same model as the points read back as rows and fitted by the old path
    monkeypatch.undo()
    by_rows = fitmodel.run_model({s.name: s for s in plan.steps}, points, {}, T_K,
                                 extras={"device": "LH-VC510"})
    assert json.dumps(last.to_json_dict(), sort_keys=True) == \
        json.dumps(by_rows.to_json_dict(), sort_keys=True)


def test_a_step_end_model_carries_the_live_estimates(monkeypatch):
    _, _, written, _ = _run(["forward", "cv"], monkeypatch)
    after_forward, after_cv, final = written
    assert {"IS", "N"} <= set(after_forward.values) and "CJO" not in after_forward.values
    assert {"IS", "N", "CJO", "VJ", "M"} <= set(after_cv.values)
    for name in ("IS", "N", "CJO"):  # the live and the final fits agree within 2 sigma
        assert abs(after_cv.values[name] - final.values[name]) < 2 * final.sigmas[name]


def test_columns_grow_and_keep_absent_cells_as_nan():
    cols = fitmodel.Columns()
    rows = [Point("s", k, "iv", 0.0, voltage_V=0.1 * k, current_A=None if k % 3 else 1e-3 * k,
                  compliance=k % 2 == 1) for k in range(150)]
    cols.extend(rows[:1])
    cols.extend(rows[1:100])  # past the first allocation
    cols.extend(rows[100:])
    view = cols.view()
    assert len(cols) == 150 and view["voltage_V"][149] == pytest.approx(14.9)
    assert np.isnan(view["current_A"][1]) and view["current_A"][3] == pytest.approx(3e-3)
    assert view["compliance"].tolist() == [k % 2 == 1 for k in range(150)]
    assert np.isnan(view["capacitance_F"]).all()
    assert cols.view(140)["voltage_V"][0] == pytest.approx(14.0)
    assert fitmodel.arrays(rows, {"s"})["current_A"][3] == pytest.approx(3e-3)
    # the same points given by column (a run folder read back) hold the same values
    by_col = fitmodel.Columns()
    first = fitmodel.arrays(rows[:70], {"s"})
    del first["frequency_Hz"]  # a column the reader skipped reads as NaN
    by_col.extend_columns(first)
    by_col.extend_columns(fitmodel.arrays(rows[70:], {"s"}))
    for name, col in by_col.view().items():
        np.testing.assert_array_equal(col, view[name], err_msg=name)


def test_no_provisional_model_just_before_the_run_model(monkeypatch):
    """When the run's end follows a step's end at once, only the run's model is written
    (a provisional one would be replaced a moment later), and the step's last live
    snapshot skips its full refit (the run's fit from every point follows)."""
    from pnbench.modeling.incremental import IncrementalFitter
    from pnbench.sweeps.fitfeed import _STOP

    refits = []
    monkeypatch.setattr(IncrementalFitter, "refit", lambda self: refits.append(self))
    plan = plan_of(["forward"])
    batch = step_points("forward", np.random.default_rng(510))
    written = []
    worker = FitWorker(plan.steps, EventBus(), temperature_K=T_K, write_model=written.append)
    for p in batch:
        worker.submit(plan.steps[0], p)
    assert worker._handle([("forward", None), _STOP]) is True
    assert len(written) == 1 and "provisional" not in written[0].extras
    assert refits == []
    written.clear()
    worker = FitWorker(plan.steps, EventBus(), temperature_K=T_K, write_model=written.append)
    for p in batch:
        worker.submit(plan.steps[0], p)
    worker._handle([("forward", None)])  # a step's end alone: refit, provisional
    assert len(refits) == 1 and len(written) == 1 and written[0].extras.get("provisional")
    assert worker._fitters == {} and worker.latest["forward"].success  # fitter let go


def test_the_run_s_end_takes_the_columns_without_a_copy():
    """At the run's end the columns hand their memory to the fit (`Columns.take`: the
    same values as a view, no copy made, the columns left empty), and the fit lets each
    step's arrays go once pooled (``consume``), giving the same model as from views."""
    import tracemalloc

    plan = plan_of(["forward", "cv"])
    steps = {s.name: s for s in plan.steps}
    rng = np.random.default_rng(510)
    store = {}
    for step in plan.steps:
        store[step.name] = fitmodel.Columns(step.kind)
        for _ in range(40):  # a few thousand points: their bytes dwarf the arrays' headers
            store[step.name].extend(step_points(step.name, rng))
    held = sum(c.nbytes() for c in store.values())
    views = {name: c.view() for name, c in store.items()}
    tracemalloc.start()
    try:
        taken = {name: c.take() for name, c in store.items()}
        copied = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert copied < held / 10 and all(len(c) == 0 for c in store.values())
    for name, view in views.items():
        assert set(taken[name]) == set(view)
        for column, values in view.items():
            np.testing.assert_array_equal(taken[name][column], values, err_msg=column)
    kept = fitmodel.model_of_columns(steps, views, T_K, extras={"device": "LH-VC510"})
    let_go = fitmodel.model_of_columns(steps, taken, T_K, extras={"device": "LH-VC510"},
                                       consume=True)
    assert taken == {} and set(views) == set(steps)
    assert json.dumps(let_go.to_json_dict(), sort_keys=True) == \
        json.dumps(kept.to_json_dict(), sort_keys=True)
