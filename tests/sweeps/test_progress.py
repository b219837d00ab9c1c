"""The one progress model: done/planned per step and an ETA that starts from the plan's
estimate and moves to the measured rate (headless, the app and watch all use it)."""

from __future__ import annotations

import math

from pnbench.sweeps import events as ev
from pnbench.sweeps.progress import ProgressModel


def started(model: ProgressModel, **estimates) -> None:
    model.set_plan([("a", "iv_forward", 100), ("b", "cv", 50)])
    model.apply(ev.RunStarted(planned=150, seconds_per_point=estimates))


def points(model, step, times, first_index=0):
    for k, t in enumerate(times):
        model.apply(ev.PointTaken(step=step, time_s=t, index=first_index + k))


def test_before_any_point_the_eta_is_the_plans_estimate():
    model = ProgressModel()
    started(model, a=0.1, b=0.2)
    model.apply(ev.StepStarted(step="a", planned=100))
    step_left, total = model.eta_s()
    assert math.isclose(step_left, 100 * 0.1) and math.isclose(total, 100 * 0.1 + 50 * 0.2)


def test_without_an_estimate_the_eta_is_unknown_until_points_come():
    model = ProgressModel()
    started(model)
    assert math.isnan(model.eta_s()[1])
    points(model, "a", [1.0, 1.5, 2.0, 2.5])
    step_left, total = model.eta_s()
    assert math.isclose(step_left, 96 * 0.5)
    assert math.isclose(total, 96 * 0.5 + 50 * 0.5)  # b borrows the measured rate


def test_the_measured_rate_takes_over_and_calibrates_the_other_steps():
    """The plan said 0.1 s a point; the bench takes 0.2 s: after many points the ETA of
    the step is the measured rate, and the next step's estimate is scaled by the same
    factor."""
    model = ProgressModel()
    started(model, a=0.1, b=0.4)
    points(model, "a", [0.2 * k for k in range(80)])
    step_left, total = model.eta_s()
    assert 0.19 * 20 < step_left < 0.2 * 20
    assert 1.8 * 0.4 * 50 < total - step_left < 2.0 * 0.4 * 50


def test_a_pause_is_not_taken_for_the_rate():
    model = ProgressModel()
    started(model)
    points(model, "a", [0.1 * k for k in range(20)])
    points(model, "a", [600.0 + 0.1 * k for k in range(20)], first_index=20)  # resumed
    assert math.isclose(model.steps["a"].measured_s(), 0.1, rel_tol=1e-6)
    assert model.total_done() == 40


def test_finished_steps_count_as_done_and_the_end_has_no_eta():
    model = ProgressModel()
    started(model, a=0.1, b=0.1)
    points(model, "a", [0.1 * k for k in range(30)])
    model.apply(ev.StepFinished(step="a", status="limit", done=30, planned=100))
    assert model.total_planned() == 30 + 50 and model.total_done() == 30
    assert math.isclose(model.fraction(), 100 / 150)
    model.apply(ev.RunFinished(status="completed"))
    assert model.eta_s() == (0.0, 0.0)
