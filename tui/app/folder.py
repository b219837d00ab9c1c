"""Feeding what a run folder holds into the app's RunState.

The folder itself is read by the run record (`pnbench.sweeps.record`): `FolderTail`
follows it read-only for `pnbench watch` and the app, giving new points as columns, typed
events and run.json when it changes. Here those batches become a RunState.
"""

from __future__ import annotations

import os

from pnbench.errors import DataFileError
from pnbench.sweeps.events import PointTaken
from pnbench.sweeps.record import Batch, FolderTail
from pnbench.tui.app.state import RunState

__all__ = ["Batch", "FolderTail", "apply_batch", "check_run_folder", "read_run_folder"]


def apply_batch(state: RunState, batch: Batch) -> None:
    """Feed a batch into a RunState: run.json first (steps), then points, then events."""
    if batch.run is not None:
        state.apply_run_json(batch.run.doc)
    temperature = batch.metadata.get("temperature_K")
    if temperature:
        try:
            state.temperature_K = float(temperature)
        except ValueError:
            pass
    state.add_points(batch.points)
    for event in batch.events:
        if not isinstance(event, PointTaken):
            state.apply_event(event)
    if batch.run is not None:  # the document is the last word on status
        state.apply_run_json(batch.run.doc)


def check_run_folder(run_dir: str | os.PathLike) -> FolderTail:
    """A tail of `run_dir`, or DataFileError when it is no folder or holds none of the
    run files yet."""
    tail = FolderTail(run_dir)
    if not tail.looks_like_run():
        raise DataFileError(
            f"{tail.run_dir}: holds no run.json, points.csv or events.jsonl; give the "
            "folder of a run (named like 20250101-120000_device under --out)")
    return tail


def read_run_folder(run_dir: str | os.PathLike) -> tuple[RunState, FolderTail]:
    """The whole folder read once (the review screen); raises DataFileError when the
    folder holds none of run.json, points.csv, events.jsonl."""
    tail = check_run_folder(run_dir)
    state = RunState()
    while True:
        batch = tail.poll()
        if not batch:
            break
        apply_batch(state, batch)
    return state, tail
