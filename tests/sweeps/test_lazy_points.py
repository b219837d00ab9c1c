"""A plan's bias points are generated lazily, with the levels numpy would give.

The reference for the levels is numpy's ``linspace`` and ``geomspace`` (the functions the
point generator used before it became lazy): linear levels must be the same floats,
logarithmic ones within a few units in the last place (numpy's power may round
differently from Python's). A plan of a million points must not hold one object per
point: checked by counting PlannedPoint instances alive after reading it.
"""

from __future__ import annotations

import gc

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from plantext import cv, forward, limits, plan_text

from pnbench.sweeps import points as pts
from pnbench.sweeps.check import estimate
from pnbench.sweeps.plan import parse_plan

levels = st.floats(-100.0, 100.0, allow_nan=False)
counts = st.integers(1, 300)


@given(levels, levels, counts)
def test_linear_levels_are_numpys_linspace(start, stop, n):
    assert list(pts.LinearLevels(start, stop, n)) == np.linspace(start, stop, n).tolist()


@given(st.floats(1e-12, 1e3), st.floats(1e-12, 1e3), counts, st.sampled_from([1.0, -1.0]))
def test_log_levels_are_numpys_geomspace(a, b, n, sign):
    got = list(pts.LogLevels(sign * a, sign * b, n))
    want = np.geomspace(sign * a, sign * b, n)
    assert got[0] == sign * a and (n == 1 or got[-1] == sign * b)
    assert got == pytest.approx(want.tolist(), rel=1e-14, abs=0)


def test_points_index_slice_and_compare_like_tuples():
    smu = pts.smu_points(pts.LinearLevels(0.0, 1.0, 11))
    eager = tuple(pts.PlannedPoint(i, x) for i, x in enumerate(pts.linear(0.0, 1.0, 11)))
    assert len(smu) == 11 and smu == eager and list(smu[3:]) == list(eager[3:])
    assert smu[-1] == eager[-1] and list(smu[::-3]) == list(eager[::-3])
    assert smu[4:][2] == eager[6] and len(smu[20:]) == 0
    with pytest.raises(IndexError):
        smu[11]
    assert smu == pts.smu_points(pts.LinearLevels(0.0, 1.0, 11))
    assert hash(smu) == hash(pts.smu_points(pts.LinearLevels(0.0, 1.0, 11)))
    assert smu != pts.smu_points(pts.LinearLevels(0.0, 1.0, 12))
    lcr = pts.lcr_points(pts.LinearLevels(0.0, -2.0, 3), [1e5, 1e6])
    assert [(p.index, p.level, p.frequency_Hz) for p in lcr[3:]] == [
        (3, -1.0, 1e6), (4, -2.0, 1e5), (5, -2.0, 1e6)]
    assert list(lcr.levels) == [0.0, 0.0, -1.0, -1.0, -2.0, -2.0]
    assert list(lcr.levels[1::2]) == [0.0, -1.0, -2.0]


MILLION = plan_text(
    *(step for k in range(5)
      for step in (forward(f"iv{k}", points=100000),
                   cv(f"cv{k}", bias_stop="-20 V", bias_points=50000))),
    device="LH-VC510", limits=limits(max_power="1 W"))


def test_a_million_point_plan_holds_no_object_per_point():
    plan = parse_plan(MILLION, "million.toml")
    est = estimate(plan)
    gc.collect()
    alive = sum(isinstance(o, pts.PlannedPoint) for o in gc.get_objects())
    assert plan.total_points == 1_000_000 and alive < 1000
    assert est.total_s > 0 and est.worst_power_W == pytest.approx(0.075)
    step = plan.steps[1]
    assert step.planned == 100_000 and step.points[99_999].level == -20.0
    assert step.points[99_999].frequency_Hz == 1e6
