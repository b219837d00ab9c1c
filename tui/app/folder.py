"""Follow a run folder read-only: the new rows of points.csv, the new lines of
events.jsonl, and run.json whenever it changes.

`pnbench watch` and the review screen read run folders through this and nothing else.
Files are opened for reading only, never locked or written, so watching cannot disturb
the process that acquires. A line still being written (no newline yet) waits for the
next poll; a file that shrinks (replaced) is read again from the start.
"""

from __future__ import annotations

import csv
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

from pnbench.errors import DataFileError
from pnbench.tui.app.state import RunState

POINTS = "points.csv"
EVENTS = "events.jsonl"
RUN = "run.json"
MODEL = "model.json"


@dataclass
class Batch:
    """What appeared since the last poll."""

    points: list[dict] = field(default_factory=list)
    events: list[dict] = field(default_factory=list)
    run: dict | None = None
    model: dict | None = None
    metadata: dict[str, str] = field(default_factory=dict)
    problems: list[str] = field(default_factory=list)

    def __bool__(self) -> bool:
        return bool(self.points or self.events or self.run is not None or self.problems)


class _LineReader:
    """New complete lines of a growing text file, remembered by byte offset."""

    def __init__(self, path: Path):
        self.path = path
        self.offset = 0
        self.partial = b""
        self.restarted = False

    def read(self, limit_bytes: int = 4 << 20) -> list[str]:
        try:
            size = os.stat(self.path).st_size
        except FileNotFoundError:
            return []
        self.restarted = False
        if size < self.offset:  # replaced or truncated: start over
            self.offset, self.partial, self.restarted = 0, b"", True
        if size == self.offset:
            return []
        with open(self.path, "rb") as handle:
            handle.seek(self.offset)
            chunk = handle.read(min(size - self.offset, limit_bytes))
        self.offset += len(chunk)
        data = self.partial + chunk
        lines = data.split(b"\n")
        self.partial = lines.pop()
        return [line.decode("utf-8", errors="replace").rstrip("\r") for line in lines]


class FolderTail:
    """Incremental, read-only reader of one run folder."""

    def __init__(self, run_dir: str | os.PathLike):
        self.run_dir = Path(run_dir)
        if not self.run_dir.is_dir():
            raise DataFileError(
                f"{self.run_dir}: not a folder; expected a run folder holding run.json, "
                "points.csv and events.jsonl (as `pnbench run` writes under --out)")
        self._points = _LineReader(self.run_dir / POINTS)
        self._events = _LineReader(self.run_dir / EVENTS)
        self._header: list[str] | None = None
        self._run_stamp: tuple[int, int] | None = None
        self._model_stamp: tuple[int, int] | None = None
        self.metadata: dict[str, str] = {}
        self.points_line = 0

    def looks_like_run(self) -> bool:
        return any((self.run_dir / name).exists() for name in (RUN, POINTS, EVENTS))

    def poll(self) -> Batch:
        batch = Batch()
        self._poll_points(batch)
        self._poll_events(batch)
        self._poll_run(batch)
        return batch

    def read_model(self) -> dict | None:
        """model.json when it changed since the last call (None otherwise)."""
        doc, self._model_stamp = read_json_if_changed(self.run_dir / MODEL,
                                                      self._model_stamp)
        return doc

    def _poll_points(self, batch: Batch) -> None:
        lines = self._points.read()
        if self._points.restarted:
            self._header, self.points_line = None, 0
        for line in lines:
            self.points_line += 1
            if not line.strip():
                continue
            if line.startswith("#"):
                key, sep, value = line[1:].partition("=")
                if sep:
                    self.metadata[key.strip()] = value.strip()
                    batch.metadata[key.strip()] = value.strip()
                continue
            cells = next(csv.reader([line]))
            if self._header is None:
                self._header = [cell.strip() for cell in cells]
                continue
            if len(cells) != len(self._header):
                batch.problems.append(
                    f"{self.run_dir / POINTS} line {self.points_line}: {len(cells)} cells, "
                    f"header has {len(self._header)}; row skipped")
                continue
            batch.points.append(dict(zip(self._header, cells, strict=True)))

    def _poll_events(self, batch: Batch) -> None:
        for number, line in enumerate(self._events.read(), start=1):
            if not line.strip():
                continue
            try:
                event = json.loads(line)
            except json.JSONDecodeError as exc:
                batch.problems.append(f"{self.run_dir / EVENTS}: unreadable line ({exc})")
                continue
            if isinstance(event, dict):
                batch.events.append(event)
            else:
                batch.problems.append(f"{self.run_dir / EVENTS} line {number}: not an object")

    def _poll_run(self, batch: Batch) -> None:
        try:
            batch.run, self._run_stamp = read_json_if_changed(self.run_dir / RUN,
                                                              self._run_stamp)
        except DataFileError as exc:
            batch.problems.append(str(exc))


def read_json_if_changed(path: Path, stamp: tuple[int, int] | None
                         ) -> tuple[dict | None, tuple[int, int] | None]:
    """(document, new stamp) of a JSON file replaced atomically by its writer; the
    document is None when the file is missing or has not changed since `stamp`."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return None, stamp
    new = (st.st_mtime_ns, st.st_size)
    if new == stamp:
        return None, stamp
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise DataFileError(f"{path}: cannot read yet ({exc})") from None
    return (doc if isinstance(doc, dict) else None), new


def apply_batch(state: RunState, batch: Batch) -> None:
    """Feed a batch into a RunState: run.json first (steps), then points, then events."""
    if batch.run is not None:
        state.apply_run_json(batch.run)
    temperature = batch.metadata.get("temperature_K")
    if temperature:
        try:
            state.temperature_K = float(temperature)
        except ValueError:
            pass
    for row in batch.points:
        state.add_point(row)
    for event in batch.events:
        if event.get("kind") != "point":
            state.apply_event(event)
    if batch.run is not None:  # the document is the last word on status
        state.apply_run_json(batch.run)


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
