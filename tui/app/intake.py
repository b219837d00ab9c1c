"""The live feed's points as columns: a drain's run of `point` events becomes one
`PointColumns`, which a RunState takes at once (`RunState.add_points`), as it takes a
folder's new rows. Per point this costs a few attribute reads, not a RunState update."""

from __future__ import annotations

from collections.abc import Iterable, Iterator

import numpy as np

from pnbench.sweeps.events import Event, PointTaken
from pnbench.sweeps.record import PointColumns

_KINDS = ("iv", "cv")
_FLOATS = ("time_s", "voltage_V", "current_A", "frequency_Hz", "capacitance_F",
           "conductance_S")


def point_columns(points: list[PointTaken]) -> PointColumns:
    """The points (in order) as columns; a point whose kind is neither iv nor cv is C-V
    when it has a capacitance (as `RunState.add_point` decides)."""
    n = len(points)
    floats = {name: np.array([getattr(p, name) for p in points], dtype=float)
              for name in _FLOATS}
    steps: dict[str, int] = {}
    step_code = np.fromiter((steps.setdefault(p.step or "", len(steps)) for p in points),
                            dtype=np.int32, count=n)
    said = np.array([str(p.point_kind or "").strip().lower() for p in points], dtype=object)
    kind_code = np.where(said == "cv", 1, np.where(said == "iv", 0, np.where(
        np.isfinite(floats["capacitance_F"]), 1, 0))).astype(np.int32)
    return PointColumns(tuple(steps), step_code=step_code, kind_names=_KINDS,
                        kind_code=kind_code,
                        index=np.fromiter((p.index for p in points), dtype=np.int64,
                                          count=n),
                        compliance=np.fromiter((bool(p.compliance) for p in points),
                                               dtype=bool, count=n),
                        temperature_K=np.full(n, np.nan), **floats)


def batches(events: Iterable[Event]) -> Iterator[PointColumns | Event]:
    """The events in order, each run of `point` events given as one PointColumns."""
    run: list[PointTaken] = []
    for event in events:
        if isinstance(event, PointTaken):
            run.append(event)
            continue
        if run:
            yield point_columns(run)
            run = []
        yield event
    if run:
        yield point_columns(run)
