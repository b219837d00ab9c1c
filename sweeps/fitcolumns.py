"""A step's points as typed columns: what the fit worker keeps of a run (`Columns`), so
the run's model is fitted from memory, never re-read from points.csv."""

from __future__ import annotations

from array import array

import numpy as np

from pnbench.sweeps.record import Point

#: The value columns of points.csv a fit uses.
VALUE_COLUMNS = ("voltage_V", "current_A", "frequency_Hz", "capacitance_F", "conductance_S",
                 "temperature_K")
#: The value columns a step of each kind fills (the others are empty in points.csv).
KIND_COLUMNS = {"iv": ("voltage_V", "current_A"),
                "cv": ("voltage_V", "frequency_Hz", "capacitance_F", "conductance_S")}


def kind_columns(step_kind: str | None, temperature: bool = False) -> tuple[str, ...]:
    """The value columns `Columns` keeps for a step kind (None: every one)."""
    if step_kind is None:
        return VALUE_COLUMNS
    names = KIND_COLUMNS["iv" if step_kind.startswith("iv") else "cv"]
    return (*names, "temperature_K") if temperature else names


class Columns:
    """One step's points as typed columns: what the fit worker keeps of a run, so the
    run's model is fitted from memory, never re-read.

    Each column is an `array.array` of doubles (8 bytes a value, grown in place by a
    small fraction; the compliance flag one byte), holding only the columns the step's
    kind fills (`kind_columns`): 17 bytes an I-V point, 33 a C-V point, 8 more over
    temperature; no object per point. The acquisition thread appends (`append`, about a
    microsecond) while another thread reads (`view`): the count is raised only after
    every column has the point, and a view copies the rows below the count it read.
    """

    def __init__(self, step_kind: str | None = None, temperature: bool = False) -> None:
        self.names = kind_columns(step_kind, temperature)
        self._values = {name: array("d") for name in self.names}
        self._appenders = [(self._values[name].append, name) for name in self.names]
        self._compliance = array("b")
        self.n = 0

    def __len__(self) -> int:
        return self.n

    def nbytes(self) -> int:
        """Bytes held by the columns (their allocation may be a little larger)."""
        return self.n * (8 * len(self.names) + 1)

    def append(self, point: Point) -> None:
        """Append one point (an absent cell becomes NaN)."""
        for append, name in self._appenders:
            value = getattr(point, name)
            append(_NAN if value is None else value)
        self._compliance.append(1 if point.compliance else 0)
        self.n += 1

    def extend(self, points: list[Point]) -> None:
        """Append points (absent cells become NaN)."""
        for p in points:
            self.append(p)

    def extend_columns(self, col: dict[str, np.ndarray]) -> None:
        """Append points given as columns (a run folder's, `PointColumns.fit_columns`;
        a missing value column reads as NaN), with no object per point."""
        k = len(col["voltage_V"])
        for name in self.names:
            values = col.get(name)
            values = (np.full(k, np.nan) if values is None
                      else np.ascontiguousarray(values, dtype=float))
            self._values[name].frombytes(values.tobytes())
        comp = col.get("compliance")
        comp = np.zeros(k, np.int8) if comp is None else np.asarray(comp, dtype=np.int8)
        self._compliance.frombytes(np.ascontiguousarray(comp).tobytes())
        self.n += k

    def view(self, start: int = 0) -> dict[str, np.ndarray]:
        """The columns from point ``start`` on, as numpy arrays (copies of the rows there
        were when called; safe while another thread appends)."""
        n = self.n
        col = {name: np.frombuffer(self._values[name][start:n], dtype=np.float64)
               if n > start else np.zeros(0) for name in self.names}
        comp = self._compliance[start:n]
        col["compliance"] = (np.frombuffer(comp, dtype=np.int8).astype(bool)
                             if n > start else np.zeros(0, dtype=bool))
        return col

    def take(self) -> dict[str, np.ndarray]:
        """Every row as numpy arrays that take over the columns' memory (no copy), the
        columns left empty: for the run's end, when nothing is appended any more (its
        final fit then holds a night's points once, not three times)."""
        n = self.n
        col = {name: np.frombuffer(self._values[name], dtype=np.float64)[:n]
               for name in self.names}
        col["compliance"] = np.frombuffer(self._compliance, dtype=np.int8)[:n].view(bool)
        self._values = {name: array("d") for name in self.names}
        self._appenders = [(self._values[name].append, name) for name in self.names]
        self._compliance = array("b")
        self.n = 0
        return col


_NAN = float("nan")
