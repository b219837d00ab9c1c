"""Following a run folder read-only, for live viewers (`pnbench watch`, the app).

`FolderTail.poll()` returns what appeared since the last poll: the new complete rows of
points.csv (as `PointColumns`), the new typed events, and run.json when it changed.
Files are opened for reading only, never locked or written, so watching cannot disturb
the process that acquires. A line still being written (no newline yet) waits for the
next poll; a file that shrinks (replaced) is read again from the start. What cannot be
read is reported in ``problems`` (the same sentences, naming file and line, that the
folder readers raise) and skipped: a viewer keeps going.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from pnbench.errors import DataFileError
from pnbench.sweeps.events import Event, parse_event_line
from pnbench.sweeps.record import layout
from pnbench.sweeps.record.columns import Point, PointColumns, _assemble, _parse_block
from pnbench.sweeps.record.reader import (
    RunInfo,
    event_line_problem,
    looks_like_run,
    read_json_object,
    run_info,
)


@dataclass
class Batch:
    """What appeared since the last poll."""

    points: PointColumns = field(default_factory=PointColumns.empty)
    events: list[Event] = field(default_factory=list)
    run: RunInfo | None = None
    metadata: dict[str, str] = field(default_factory=dict)
    problems: list[str] = field(default_factory=list)

    def __bool__(self) -> bool:
        return bool(len(self.points) or self.events or self.run is not None
                    or self.problems)


class _Lines:
    """New complete lines of a growing file, as bytes, remembered by byte offset."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.offset = 0
        self.lines = 0  # complete lines read so far
        self.restarted = False

    def read(self, limit_bytes: int = 16 << 20) -> bytes:
        try:
            size = os.stat(self.path).st_size
        except FileNotFoundError:
            return b""
        self.restarted = False
        if size < self.offset:  # replaced or truncated: start over
            self.offset, self.lines, self.restarted = 0, 0, True
        if size == self.offset:
            return b""
        with open(self.path, "rb") as handle:
            handle.seek(self.offset)
            chunk = handle.read(min(size - self.offset, limit_bytes))
        end = chunk.rfind(b"\n") + 1
        self.offset += end
        return chunk[:end]


class FolderTail:
    """Incremental, read-only reader of one run folder."""

    def __init__(self, run_dir: str | os.PathLike) -> None:
        self.run_dir = Path(run_dir)
        if not self.run_dir.is_dir():
            raise DataFileError(
                f"{self.run_dir}: not a folder; expected a run folder holding run.json, "
                "points.csv and events.jsonl (as `pnbench run` writes under --out)")
        self._points = _Lines(self.run_dir / layout.POINTS)
        self._events = _Lines(self.run_dir / layout.EVENTS)
        self._header_seen = False
        self._steps: dict[bytes, int] = {}
        self._kinds: dict[bytes, int] = {}
        self._run_stamp: tuple[int, int] | None = None
        self._model_stamp: tuple[int, int] | None = None
        self.metadata: dict[str, str] = {}

    def looks_like_run(self) -> bool:
        return looks_like_run(self.run_dir)

    def poll(self) -> Batch:
        batch = Batch()
        self._poll_points(batch)
        self._poll_events(batch)
        self._poll_run(batch)
        return batch

    def read_model(self) -> dict | None:
        """model.json when it changed since the last call (None otherwise)."""
        doc, self._model_stamp = _if_changed(self.run_dir / layout.MODEL, self._model_stamp)
        return doc

    def _poll_points(self, batch: Batch) -> None:
        data = self._points.read()
        if self._points.restarted:
            self._header_seen, self._steps, self._kinds = False, {}, {}
        path = self.run_dir / layout.POINTS
        line = self._points.lines
        self._points.lines += data.count(b"\n")
        if not self._header_seen:
            data, line = self._head(data, line, batch, path)
        if not data:
            return
        try:
            block = _parse_block(data, path, line, self._steps, self._kinds)
            batch.points = _assemble([block], [*self._steps], self._kinds, line + 1, {},
                                     False)
        except DataFileError:
            batch.points = self._row_by_row(data, line, batch, path)

    def _head(self, data: bytes, line: int, batch: Batch, path: Path) -> tuple[bytes, int]:
        pos = 0
        while pos < len(data) and not self._header_seen:
            nl = data.find(b"\n", pos)
            text = data[pos:nl].decode("utf-8", "replace").strip()
            pos, line = nl + 1, line + 1
            if text.startswith("#"):
                key, sep, value = text[1:].partition("=")
                if sep:
                    self.metadata[key.strip()] = batch.metadata[key.strip()] = value.strip()
            elif text:
                self._header_seen = True
                if text not in (layout.HEADER, layout.HEADER_T):
                    batch.problems.append(f"{path}, line {line}: header is {text[:80]!r}, "
                                          f"expected {layout.HEADER!r}")
        return data[pos:], line

    def _row_by_row(self, data: bytes, line: int, batch: Batch, path: Path) -> PointColumns:
        good = []
        for n, raw in enumerate(data.split(b"\n")[:-1], start=line + 1):
            try:
                Point.from_row(raw.decode("utf-8"))
            except (ValueError, UnicodeDecodeError) as exc:
                batch.problems.append(f"{path}, line {n}: row cannot be read ({exc}); "
                                      "skipped")
                continue
            good.append(raw + b"\n")
        if not good:
            return PointColumns.empty()
        block = _parse_block(b"".join(good), path, line, self._steps, self._kinds)
        return _assemble([block], [*self._steps], self._kinds, line + 1, {}, False)

    def _poll_events(self, batch: Batch) -> None:
        line = self._events.lines
        data = self._events.read()
        path = self.run_dir / layout.EVENTS
        raw_lines = data.split(b"\n")[:-1]
        self._events.lines += len(raw_lines)
        for n, raw in enumerate(raw_lines, start=line + 1):
            if not raw.strip():
                continue
            try:
                batch.events.append(parse_event_line(raw))
            except (ValueError, UnicodeDecodeError) as exc:
                batch.problems.append(event_line_problem(path, n, exc))

    def _poll_run(self, batch: Batch) -> None:
        try:
            doc, self._run_stamp = _if_changed(self.run_dir / layout.RUN, self._run_stamp)
        except DataFileError as exc:
            batch.problems.append(str(exc))
            return
        if doc is not None:
            batch.run = run_info(self.run_dir, doc)


def _if_changed(path: Path, stamp: tuple[int, int] | None
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
        return read_json_object(path), new
    except DataFileError as exc:
        raise DataFileError(f"{exc} (cannot read it yet)") from None
