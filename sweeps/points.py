"""Bias-point generation: the levels a step visits, in order. Pure functions, no I/O.

Every step of a plan expands to a list of `PlannedPoint`s numbered from 0. The number is
the point's `index` in `points.csv`, so a resumed run knows exactly which point comes next.
SMU steps have one level per point (a voltage or a current); LCR steps visit every
frequency at each bias (bias outer, frequency inner: the DC bias settles once per bias).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class PlannedPoint:
    """One point a step will take: the SMU level, or the LCR bias and frequency."""

    index: int
    level: float  # V or A for SMU steps (per the step's source), bias V for LCR steps
    frequency_Hz: float | None = None


def linear(start: float, stop: float, points: int) -> list[float]:
    """``points`` evenly spaced levels from start to stop inclusive (one point: start)."""
    if points < 1:
        raise ValueError(f"points must be at least 1, got {points}")
    if points == 1:
        return [float(start)]
    return [float(x) for x in np.linspace(start, stop, points)]


def logarithmic(start: float, stop: float, points: int) -> list[float]:
    """``points`` levels spaced evenly in log|x| from start to stop (same sign, nonzero)."""
    if points < 1:
        raise ValueError(f"points must be at least 1, got {points}")
    if start == 0 or stop == 0 or (start > 0) != (stop > 0):
        raise ValueError("log spacing needs start and stop of the same sign, both nonzero")
    sign = 1.0 if start > 0 else -1.0
    if points == 1:
        return [float(start)]
    mags = np.geomspace(abs(start), abs(stop), points)
    return [sign * float(m) for m in mags]


def decades(start: float, stop: float, per_decade: int) -> list[float]:
    """Levels at ``per_decade`` points per decade from start to stop, both included.

    The count is rounded so the last decade fraction keeps the density:
    decades(1e-9, 1e-3, 5) gives 31 levels.
    """
    if per_decade < 1:
        raise ValueError(f"points per decade must be at least 1, got {per_decade}")
    if start == 0 or stop == 0 or (start > 0) != (stop > 0):
        raise ValueError("decades need start and stop of the same sign, both nonzero")
    span = abs(math.log10(abs(stop) / abs(start)))
    points = max(1, int(round(span * per_decade)) + 1)
    return logarithmic(start, stop, points)


def smu_points(levels: list[float]) -> list[PlannedPoint]:
    return [PlannedPoint(i, float(level)) for i, level in enumerate(levels)]


def lcr_points(biases: list[float], frequencies_Hz: list[float]) -> list[PlannedPoint]:
    """Bias outer, frequency inner."""
    out = []
    for bias in biases:
        for f in frequencies_Hz:
            out.append(PlannedPoint(len(out), float(bias), float(f)))
    return out


def ramp_levels(start: float, stop: float, max_step: float) -> list[float]:
    """Intermediate levels from start to stop (stop included, start excluded) in steps of
    at most ``max_step``: used to bring a source back gently after a guard or limit."""
    if max_step <= 0:
        raise ValueError("max_step must be positive")
    distance = stop - start
    count = max(1, int(math.ceil(abs(distance) / max_step)))
    return [start + distance * (k / count) for k in range(1, count + 1)]
