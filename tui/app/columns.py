"""Columns of points as the app keeps them: compact growing arrays, and frozen copies
(snapshots) that a worker thread can read while points keep arriving."""

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


class Columns:
    """Growing float columns in compact arrays (a night of points stays small); the
    step of each point is kept as a number into `step_names`."""

    def __init__(self, names: tuple[str, ...]):
        self.names = names
        self.data = {name: array("d") for name in names}
        self.step_ids = array("i")
        self.step_names: list[str] = []
        self._ids: dict[str, int] = {}

    def append(self, values: dict[str, float], step: str) -> None:
        for name in self.names:
            self.data[name].append(values.get(name, math.nan))
        number = self._ids.get(step)
        if number is None:
            number = self._ids[step] = len(self.step_names)
            self.step_names.append(step)
        self.step_ids.append(number)

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


def _codes(steps: np.ndarray, ids: dict[str, int]) -> np.ndarray:
    out = np.empty(len(steps), dtype=np.int32)
    for name, number in ids.items():
        out[steps == name] = number
    return out
