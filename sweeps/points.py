"""Bias-point generation: the levels a step visits, in order. Pure functions, no I/O.

Every step of a plan has a sequence of `PlannedPoint`s numbered from 0. The number is
the point's `index` in `points.csv`, so a resumed run knows exactly which point comes next.
SMU steps have one level per point (a voltage or a current); LCR steps visit every
frequency at each bias (bias outer, frequency inner: the DC bias settles once per bias).

The sequences are lazy: a step of a million points holds its range (start, stop, count)
and makes each point when it is asked for, so reading or checking a plan never builds
one object per planned point, and neither do slices (``step.points[start:]``). Levels are
computed as numpy's ``linspace`` and ``geomspace`` do (``start + i * step``, the ends
exact), without importing numpy.
"""

from __future__ import annotations

import math
import operator
from collections.abc import Iterator, Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class PlannedPoint:
    """One point a step will take: the SMU level, or the LCR bias and frequency."""

    index: int
    level: float  # V or A for SMU steps (per the step's source), bias V for LCR steps
    frequency_Hz: float | None = None


class Lazy(Sequence):
    """A read-only sequence whose items are computed from their index on demand; slices
    are lazy views. Subclasses give `_at(i)` and `_key()` (what makes two equal)."""

    def __init__(self, length: int) -> None:
        self._range = range(length)

    def _at(self, i: int):
        raise NotImplementedError

    def _key(self) -> tuple:
        raise NotImplementedError

    def __len__(self) -> int:
        return len(self._range)

    def __getitem__(self, k):
        if isinstance(k, slice):
            view = object.__new__(type(self))
            view.__dict__.update(self.__dict__)
            view._range = self._range[k]
            return view
        return self._at(self._range[operator.index(k)])

    def __iter__(self) -> Iterator:
        at = self._at
        for i in self._range:
            yield at(i)

    def __eq__(self, other) -> bool:
        if isinstance(other, Lazy) and type(other) is type(self):
            return self._key() == other._key() and self._range == other._range
        if isinstance(other, (Lazy, list, tuple)):
            return len(self) == len(other) and all(a == b for a, b in zip(self, other, strict=True))
        return NotImplemented

    def __hash__(self) -> int:
        return hash((type(self).__name__, self._key(), self._range))

    def __repr__(self) -> str:
        return f"{type(self).__name__}{self._key()}[{self._range.start}:{self._range.stop}]"


class LinearLevels(Lazy):
    """``points`` evenly spaced levels from start to stop inclusive (one point: start),
    each as numpy's linspace computes it."""

    def __init__(self, start: float, stop: float, points: int) -> None:
        if points < 1:
            raise ValueError(f"points must be at least 1, got {points}")
        super().__init__(points)
        self.start, self.stop, self.points = float(start), float(stop), points
        div = points - 1
        self._delta = self.stop - self.start
        self._step = self._delta / div if div else 0.0

    def _key(self) -> tuple:
        return (self.start, self.stop, self.points)

    def _at(self, i: int) -> float:
        if i == self.points - 1 and i > 0:
            return self.stop
        if self._step == 0.0 and i:
            return i / (self.points - 1) * self._delta + self.start
        return i * self._step + self.start


class LogLevels(Lazy):
    """``points`` levels spaced evenly in log|x| from start to stop (same sign, nonzero),
    the ends exact, each as numpy's geomspace computes it."""

    def __init__(self, start: float, stop: float, points: int) -> None:
        if points < 1:
            raise ValueError(f"points must be at least 1, got {points}")
        if start == 0 or stop == 0 or (start > 0) != (stop > 0):
            raise ValueError("log spacing needs start and stop of the same sign, both "
                             "nonzero")
        super().__init__(points)
        self.start, self.stop, self.points = float(start), float(stop), points
        self._sign = 1.0 if start > 0 else -1.0
        self._exponents = LinearLevels(math.log10(abs(start)), math.log10(abs(stop)), points)

    def _key(self) -> tuple:
        return (self.start, self.stop, self.points)

    def _at(self, i: int) -> float:
        if i == 0:
            return self.start
        if i == self.points - 1:
            return self.stop
        return self._sign * 10.0 ** self._exponents[i]


def decade_count(start: float, stop: float, per_decade: int) -> int:
    """How many levels ``per_decade`` points per decade from start to stop make, both
    included: the count is rounded so the last decade fraction keeps the density."""
    if per_decade < 1:
        raise ValueError(f"points per decade must be at least 1, got {per_decade}")
    if start == 0 or stop == 0 or (start > 0) != (stop > 0):
        raise ValueError("decades need start and stop of the same sign, both nonzero")
    span = abs(math.log10(abs(stop) / abs(start)))
    return max(1, int(round(span * per_decade)) + 1)


def linear(start: float, stop: float, points: int) -> list[float]:
    """``points`` evenly spaced levels from start to stop inclusive (one point: start)."""
    return list(LinearLevels(start, stop, points))


def logarithmic(start: float, stop: float, points: int) -> list[float]:
    """``points`` levels spaced evenly in log|x| from start to stop (same sign, nonzero)."""
    return list(LogLevels(start, stop, points))


def decades(start: float, stop: float, per_decade: int) -> list[float]:
    """Levels at ``per_decade`` points per decade from start to stop, both included:
    decades(1e-9, 1e-3, 5) gives 31 levels."""
    return logarithmic(start, stop, decade_count(start, stop, per_decade))


class SmuPoints(Lazy):
    """An SMU step's points: one per level (levels: any sequence, lazy or not)."""

    def __init__(self, levels: Sequence[float]) -> None:
        super().__init__(len(levels))
        self._levels = levels

    def _key(self) -> tuple:
        return (self._levels if isinstance(self._levels, Lazy) else tuple(self._levels),)

    def _at(self, i: int) -> PlannedPoint:
        return PlannedPoint(i, float(self._levels[i]))

    @property
    def levels(self) -> Sequence[float]:
        """The level of each point (of this view)."""
        return self._levels if self._range == range(len(self._levels)) else _Levels(self)


class LcrPoints(Lazy):
    """An LCR step's points: every frequency at each bias (bias outer)."""

    def __init__(self, biases: Sequence[float], frequencies_Hz: Sequence[float]) -> None:
        super().__init__(len(biases) * len(frequencies_Hz))
        self.biases = biases if isinstance(biases, Lazy) else tuple(map(float, biases))
        self.frequencies_Hz = tuple(map(float, frequencies_Hz))

    def _key(self) -> tuple:
        return (self.biases, self.frequencies_Hz)

    def _at(self, i: int) -> PlannedPoint:
        b, f = divmod(i, len(self.frequencies_Hz))
        return PlannedPoint(i, float(self.biases[b]), self.frequencies_Hz[f])

    @property
    def levels(self) -> Sequence[float]:
        """The bias of each point (of this view)."""
        return _Levels(self)


class _Levels(Lazy):
    """The levels of a sequence of points, lazily."""

    def __init__(self, points: LcrPoints) -> None:
        super().__init__(len(points))
        self._points = points

    def _key(self) -> tuple:
        return (self._points,)

    def _at(self, i: int) -> float:
        return self._points[i].level


def smu_points(levels: Sequence[float]) -> SmuPoints:
    return SmuPoints(levels)


def lcr_points(biases: Sequence[float], frequencies_Hz: Sequence[float]) -> LcrPoints:
    """Bias outer, frequency inner."""
    return LcrPoints(biases, frequencies_Hz)


def ramp_levels(start: float, stop: float, max_step: float) -> list[float]:
    """Intermediate levels from start to stop (stop included, start excluded) in steps of
    at most ``max_step``: used to bring a source back gently after a guard or limit."""
    if max_step <= 0:
        raise ValueError("max_step must be positive")
    distance = stop - start
    count = max(1, int(math.ceil(abs(distance) / max_step)))
    return [start + distance * (k / count) for k in range(1, count + 1)]
