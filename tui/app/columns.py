"""Columns of points as the app keeps them for display: compact arrays bounded in size,
and frozen copies (snapshots) that a worker thread can read while points keep arriving.

A night of points (1e5-1e6) is far more than a terminal plot can show: once `Columns`
holds `capacity` points it thins itself to what looks the same on a plot (`display_keep`),
so memory and the cost of a redraw stay flat however long the run. The run folder keeps
every point; `total` counts every point ever added."""

from __future__ import annotations

import math
from array import array
from dataclasses import dataclass

import numpy as np


def to_number(value: object) -> float:
    """A float from a CSV cell or a JSON value; empty or missing is NaN."""
    if value is None or value == "":
        return math.nan
    try:
        return float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return math.nan


#: Points a `Columns` holds before it thins itself (to half or less): a few times what
#: the plots draw of one series, and under the size of a demo's sweep (which stays whole).
CAPACITY = 20000
#: Cells per axis of the finest thinning grid, and the coarsest it goes to.
FINE_GRID = 1024
COARSE_GRID = 16
#: Steps with fewer points than this are kept whole when thinning (an admittance step's
#: few biases x frequencies), as long as they take at most a quarter of the room.
SMALL_STEP = 256


class Columns:
    """Float columns in compact arrays, bounded: past `capacity` points they are thinned
    for display (`display_keep`) on the coordinates `cells` names, ``(column, "lin" |
    "log" | "exact")`` as the plots draw them. The step of each point is kept as a number
    into `step_names`."""

    def __init__(self, names: tuple[str, ...], cells: tuple[tuple[str, str], ...] = (),
                 capacity: int | None = CAPACITY):
        self.names = names
        self.cells = cells
        self.capacity = capacity if cells else None  # nothing to thin on: kept whole
        self.data = {name: array("d") for name in names}
        self.step_ids = array("i")
        self.step_names: list[str] = []
        self._ids: dict[str, int] = {}
        #: points ever added (the kept ones are `len(self)`)
        self.total = 0
        #: the grid of the last thinning (coarser once a finer one did not free room)
        self.grid = FINE_GRID

    def append(self, values: dict[str, float], step: str) -> None:
        for name in self.names:
            self.data[name].append(values.get(name, math.nan))
        number = self._ids.get(step)
        if number is None:
            number = self._ids[step] = len(self.step_names)
            self.step_names.append(step)
        self.step_ids.append(number)
        self.total += 1
        self._bound()

    def extend(self, values: dict[str, np.ndarray], steps: np.ndarray) -> None:
        """Many points at once: a column per name (missing ones NaN), a step per point."""
        n = len(steps)
        for name in self.names:
            column = values.get(name)
            self.data[name].frombytes((np.full(n, math.nan) if column is None
                                       else np.asarray(column, dtype=float)).tobytes())
        for step in dict.fromkeys(steps.tolist()):
            if step not in self._ids:
                self._ids[step] = len(self.step_names)
                self.step_names.append(step)
        codes = np.array([self._ids[s] for s in steps.tolist()], dtype=np.int32) \
            if n < 64 else _codes(steps, self._ids)
        self.step_ids.frombytes(codes.astype(np.int32).tobytes())
        self.total += n
        self._bound()

    @property
    def thinned(self) -> bool:
        """Some points were left out for display (the run folder has them all)."""
        return self.total > len(self)

    def _bound(self) -> None:
        if self.capacity is None or len(self) <= self.capacity:
            return
        data = {name: np.frombuffer(values, dtype=float) for name, values in self.data.items()}
        ids = np.frombuffer(self.step_ids, dtype=np.int32)
        keep, self.grid = display_keep(data, ids, self.cells, self.capacity // 2, self.grid)
        self.data = {name: array("d", values[keep].tobytes()) for name, values in data.items()}
        self.step_ids = array("i", ids[keep].astype(np.int32).tobytes())

    def __len__(self) -> int:
        return len(self.step_ids)

    def column(self, name: str) -> np.ndarray:
        return np.array(self.data[name], dtype=float)

    def step_of(self, index: int) -> str:
        return self.step_names[self.step_ids[index]]

    def step_mask(self, wanted) -> np.ndarray:
        """Boolean mask of the points whose step name satisfies `wanted(name)`."""
        table = np.array([bool(wanted(name)) for name in self.step_names], dtype=bool)
        ids = np.array(self.step_ids, dtype=np.int64)
        return table[ids] if len(table) else np.zeros(len(ids), dtype=bool)


class FrozenColumns:
    """A copy of Columns at one moment, safe to read on another thread."""

    def __init__(self, columns: Columns):
        self.names = columns.names
        self.data = {name: np.array(values, dtype=float)
                     for name, values in columns.data.items()}
        self.step_ids = np.array(columns.step_ids, dtype=np.int64)
        self.step_names = list(columns.step_names)

    def __len__(self) -> int:
        return len(self.step_ids)

    def column(self, name: str) -> np.ndarray:
        return self.data[name]

    def step_of(self, index: int) -> str:
        return self.step_names[self.step_ids[index]]

    def step_mask(self, wanted) -> np.ndarray:
        table = np.array([bool(wanted(name)) for name in self.step_names], dtype=bool)
        return table[self.step_ids] if len(table) else np.zeros(len(self), dtype=bool)


@dataclass(frozen=True)
class Snapshot:
    """What the plots need of a RunState, copied on the UI thread so the plot data can
    be computed on a worker thread while points keep arriving."""

    iv: FrozenColumns
    cv: FrozenColumns
    parameters: dict
    step_kinds: dict
    temperature_K: float
    version: int
    #: a model over temperature: each temperature's own fit (model.json "temperatures")
    temperatures: tuple = ()
    model_temperature_K: float | None = None

    def step_kind(self, name: str) -> str:
        return self.step_kinds.get(name, "")


def display_keep(data: dict[str, np.ndarray], step_ids: np.ndarray,
                 cells: tuple[tuple[str, str], ...], target: int,
                 grid: int = FINE_GRID) -> tuple[np.ndarray, int]:
    """Indices (in order) of at most `target` points that look like all of them on a
    plot, and the grid that gave them.

    Each step's points fall in cells of a `grid` per axis over the coordinates `cells`
    names (log10 of the magnitude for "log"; "exact" values are their own cells); the
    newest point of every occupied cell is kept, so a curve keeps its shape, its ends and
    its outliers, and a device that drifts shows where it is now. A grid that leaves too
    many is halved down to COARSE_GRID, then every k-th is kept. Small steps (fewer than
    SMALL_STEP points) are kept whole while they fit in a quarter of `target`."""
    n = len(step_ids)
    if n <= target:
        return np.arange(n), grid
    counts = np.bincount(step_ids) if n else np.zeros(0, dtype=np.int64)
    small = counts[step_ids] < SMALL_STEP
    if small.sum() > target // 4:
        small[:] = False
    axes = [_axis(data[name], how) for name, how in cells]
    while True:
        key = step_ids.astype(np.int64)
        for values, how in axes:  # renumbered after each axis: no overflow
            code = np.unique(values, return_inverse=True)[1].reshape(-1) if how == "exact" \
                else _cell(values, grid)
            key = np.unique(key * (int(code.max(initial=0)) + 1) + code,
                            return_inverse=True)[1].reshape(-1)
        key = np.where(small, -1 - np.arange(n), key)  # a small step's point: its own cell
        _, last = np.unique(key[::-1], return_index=True)
        keep = np.sort(n - 1 - last)
        if len(keep) <= target or grid <= COARSE_GRID:
            break
        grid = max(grid // 2, COARSE_GRID)
    if len(keep) > target:
        keep = keep[np.linspace(0, len(keep) - 1, target).round().astype(np.int64)]
    return keep, grid


def _axis(values: np.ndarray, how: str) -> tuple[np.ndarray, str]:
    if how == "log":
        with np.errstate(divide="ignore", invalid="ignore"):
            values = np.log10(np.abs(values))
    return values, how


def _cell(values: np.ndarray, grid: int) -> np.ndarray:
    """The cell of each value on a grid over their finite range; non-finite ones share
    one cell past the end."""
    finite = np.isfinite(values)
    out = np.full(len(values), grid + 1, dtype=np.int64)
    if finite.any():
        lo, hi = float(values[finite].min()), float(values[finite].max())
        span = hi - lo if hi > lo else 1.0
        out[finite] = np.minimum(((values[finite] - lo) / span * grid).astype(np.int64), grid)
    return out


def _codes(steps: np.ndarray, ids: dict[str, int]) -> np.ndarray:
    out = np.empty(len(steps), dtype=np.int32)
    for name, number in ids.items():
        out[steps == name] = number
    return out
