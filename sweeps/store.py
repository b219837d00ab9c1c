"""The run folder: create, append to, reopen after a crash, and read.

Layout and formats are the contract described in docs/run-folder.md. Durability rules:

- a point is written and flushed to the operating system before the next bias step, so a
  killed process (even kill -9) loses nothing it had read; `sync()` (fsync) runs at least
  once a second from `append_point` and at each step end, which covers power loss up to
  about a second;
- run.json, model.json and the model card are replaced atomically (temporary file, fsync,
  rename), so a reader never sees half a document;
- `RunFolder.reopen` cuts a torn last line (a write cut short by the kill) from points.csv
  and events.jsonl before appending, so the files stay parseable.

Readers (the app, reports, `watch`) use `read_run`, `read_points`, `read_events`,
`read_metadata`, and `PointTail` to follow a live run.
"""

from __future__ import annotations

import fcntl
import json
import os
import re
import threading
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from pnbench.errors import BadInput, DataFileError
from pnbench.sweeps.events import Event

RUN_FORMAT = 1
LOCK_NAME = ".pnbench.lock"
COLUMNS = ("step", "index", "kind", "time_s", "voltage_V", "current_A", "frequency_Hz",
           "capacitance_F", "conductance_S", "compliance")
HEADER = ",".join(COLUMNS)
FSYNC_INTERVAL_S = 1.0
_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


@dataclass(frozen=True, slots=True)
class Point:
    """One row of points.csv. ``kind`` is ``iv`` or ``cv``; absent cells are None."""

    step: str
    index: int
    kind: str
    time_s: float
    voltage_V: float | None = None
    current_A: float | None = None
    frequency_Hz: float | None = None
    capacitance_F: float | None = None
    conductance_S: float | None = None
    compliance: bool = False

    def to_row(self) -> str:
        """The CSV line, newline included (floats in shortest round-trip form)."""
        return (f"{self.step},{self.index},{self.kind},{self.time_s:.6f},"
                f"{_cell(self.voltage_V)},{_cell(self.current_A)},{_cell(self.frequency_Hz)},"
                f"{_cell(self.capacitance_F)},{_cell(self.conductance_S)},"
                f"{1 if self.compliance else 0}\n")

    @classmethod
    def from_row(cls, line: str) -> Point:
        cells = line.rstrip("\r\n").split(",")
        if len(cells) != len(COLUMNS):
            raise ValueError(f"{len(cells)} cells, expected {len(COLUMNS)}")
        return cls(cells[0], int(cells[1]), cells[2], float(cells[3]),
                   *(float(c) if c else None for c in cells[4:9]), cells[9] == "1")


def _cell(value: float | None) -> str:
    return "" if value is None else repr(float(value))


def utc_now() -> datetime:
    return datetime.now(UTC)


def iso(moment: datetime) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def folder_name(started: datetime, device_name: str) -> str:
    safe = _SAFE.sub("_", device_name).strip("._") or "device"
    return f"{started.astimezone(UTC):%Y%m%d-%H%M%S}_{safe[:60]}"


def atomic_write(path: Path, text: str) -> None:
    """Replace ``path`` with ``text`` so that a reader sees the old or the new file."""
    tmp = path.with_name(f".{path.name}.tmp")
    with open(tmp, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)
    _fsync_dir(path.parent)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _cut_torn_tail(path: Path) -> int:
    """Truncate a last line without its newline; return the bytes removed."""
    if not path.exists():
        return 0
    with open(path, "rb+") as f:
        size = f.seek(0, os.SEEK_END)
        if size == 0:
            return 0
        f.seek(max(0, size - 65536))
        tail = f.read()
        if tail.endswith(b"\n"):
            return 0
        cut = tail.rfind(b"\n")
        keep = size - len(tail) + cut + 1 if cut >= 0 else 0
        f.truncate(keep)
        os.fsync(f.fileno())
        return size - keep


class RunFolder:
    """A run folder open for writing (a live run or a resumed one)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self._lockfile = _take_lock(self.path)
        self.run: dict = {}
        self._points = open(self.path / "points.csv", "a", encoding="utf-8", newline="")
        self._events = open(self.path / "events.jsonl", "a", encoding="utf-8")
        self._log = open(self.path / "run.log", "a", encoding="utf-8")
        self._lock = threading.Lock()
        self._last_sync = time.monotonic()
        self._dirty = False

    # -- creating and reopening -------------------------------------------------------
    @classmethod
    def create(cls, out_dir: str | Path, plan_text: str, run_doc: dict,
               metadata: dict, started: datetime | None = None) -> RunFolder:
        """Make a new run folder under ``out_dir`` (created if needed).

        ``run_doc`` is the first run.json (``device.name`` names the folder);
        ``metadata`` becomes the ``# key = value`` lines at the top of points.csv.
        """
        started = started or utc_now()
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        base = folder_name(started, str(run_doc.get("device", {}).get("name", "device")))
        path = out / base
        suffix = 1
        while True:
            try:
                path.mkdir()
                break
            except FileExistsError:
                suffix += 1
                path = out / f"{base}-{suffix}"
        (path / "plan.toml").write_text(plan_text, encoding="utf-8")
        lines = [f"# {key} = {value}\n" for key, value in metadata.items()]
        (path / "points.csv").write_text("".join(lines) + HEADER + "\n", encoding="utf-8")
        (path / "events.jsonl").touch()
        (path / "run.log").touch()
        folder = cls(path)
        doc = {"format": RUN_FORMAT, **run_doc}
        doc.setdefault("started", iso(started))
        folder.write_run(doc)
        return folder

    @classmethod
    def reopen(cls, path: str | Path) -> RunFolder:
        """Open an existing run folder to append (resume); cuts torn last lines."""
        path = Path(path)
        run = read_run(path)
        for name in ("points.csv", "events.jsonl"):
            if not (path / name).exists():
                raise DataFileError(f"run folder {path}: {name} is missing; this is not a "
                                    "complete pnbench run folder")
        cut = _cut_torn_tail(path / "points.csv") + _cut_torn_tail(path / "events.jsonl")
        _drop_bad_last_event(path / "events.jsonl")
        folder = cls(path)
        folder.run = run
        if cut:
            folder.log(f"reopen: removed {cut} bytes of a line cut short by the interruption")
        return folder

    # -- writing ------------------------------------------------------------------------
    def append_point(self, point: Point) -> None:
        """Write one point and flush it; fsync when a second has passed since the last."""
        self._points.write(point.to_row())
        self._points.flush()
        self._dirty = True
        now = time.monotonic()
        if now - self._last_sync >= FSYNC_INTERVAL_S:
            self.sync(now)

    def append_event(self, event: Event) -> None:
        with self._lock:
            self._events.write(event.to_json() + "\n")
            self._events.flush()

    def sync(self, now: float | None = None) -> None:
        """fsync points.csv and events.jsonl (step ends, and once a second)."""
        with self._lock:
            for f in (self._points, self._events):
                f.flush()
                os.fsync(f.fileno())
            self._dirty = False
            self._last_sync = time.monotonic() if now is None else now

    def write_run(self, doc: dict) -> None:
        with self._lock:
            self.run = doc
            atomic_write(self.path / "run.json", json.dumps(doc, indent=2, default=str) + "\n")

    def update_run(self, **changes) -> dict:
        """Merge top-level keys into run.json and rewrite it atomically."""
        doc = {**self.run, **changes}
        self.write_run(doc)
        return doc

    def log(self, message: str) -> None:
        stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S")
        with self._lock:
            self._log.write(f"{stamp}Z {message}\n")
            self._log.flush()

    def write_model(self, model_json: dict, card_text: str | None, device_name: str) -> None:
        """Replace model.json and the model card (``<device>.lib``) atomically."""
        atomic_write(self.path / "model.json", json.dumps(model_json, indent=2) + "\n")
        if card_text is not None:
            atomic_write(self.path / card_file_name(device_name), card_text)

    def close(self) -> None:
        for f in (self._points, self._events, self._log):
            try:
                f.flush()
                os.fsync(f.fileno())
                f.close()
            except (OSError, ValueError):
                pass
        try:
            self._lockfile.close()  # releases the lock
        except OSError:
            pass


def _take_lock(path: Path):
    """Hold an exclusive lock on the run folder while it is open for writing (released by
    the kernel when the process dies, even by kill -9)."""
    handle = open(path / LOCK_NAME, "a+", encoding="utf-8")
    try:
        fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        handle.seek(0)
        owner = handle.read().strip() or "another process"
        handle.close()
        raise BadInput(f"run folder {path} is in use by pnbench process {owner}; wait for it "
                       "to finish (or stop it) before resuming") from None
    handle.seek(0)
    handle.truncate()
    handle.write(str(os.getpid()))
    handle.flush()
    return handle


def card_file_name(device_name: str) -> str:
    return (_SAFE.sub("_", device_name).strip("._") or "device") + ".lib"


def _drop_bad_last_event(path: Path) -> None:
    """A complete but unparseable last event line (should not happen) is removed."""
    data = path.read_bytes()
    if not data:
        return
    start = data.rfind(b"\n", 0, len(data) - 1) + 1
    try:
        json.loads(data[start:])
    except ValueError:
        with open(path, "rb+") as f:
            f.truncate(start)


# -- reading -------------------------------------------------------------------------
def read_run(path: str | Path) -> dict:
    """run.json of a run folder, as a dict."""
    file = Path(path) / "run.json"
    try:
        doc = json.loads(file.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DataFileError(f"{path}: no run.json here; give the folder of a pnbench "
                            "run (named like 20250101-120000_device)") from None
    except (OSError, ValueError) as exc:
        raise DataFileError(f"{file}: cannot read it ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != RUN_FORMAT:
        raise DataFileError(f"{file}: not a run.json of format {RUN_FORMAT}")
    return doc


def read_metadata(path: str | Path) -> dict:
    """The ``# key = value`` lines at the top of points.csv (values as text)."""
    meta = {}
    with open(Path(path) / "points.csv", encoding="utf-8") as f:
        for line in f:
            if not line.startswith("#"):
                break
            key, sep, value = line[1:].partition("=")
            if sep:
                meta[key.strip()] = value.strip()
    return meta


def read_points(path: str | Path) -> list[Point]:
    """Every complete point of a run folder, in the order taken (a torn last line of a
    live or killed run is left out)."""
    points, _ = PointTail(path).read_new()
    return points


def read_events(path: str | Path) -> list[Event]:
    """Every complete event of events.jsonl."""
    out = []
    with open(Path(path) / "events.jsonl", encoding="utf-8") as f:
        for line in f:
            if not line.endswith("\n"):
                break
            try:
                out.append(Event.from_json_dict(json.loads(line)))
            except (ValueError, KeyError):
                continue
    return out


class PointTail:
    """Follows points.csv of a live run: each `read_new()` returns the complete rows
    written since the last call (for `watch` and the app)."""

    def __init__(self, path: str | Path) -> None:
        self.file = Path(path) / "points.csv"
        self.offset = 0
        self._header_seen = False

    def read_new(self) -> tuple[list[Point], int]:
        points: list[Point] = []
        try:
            with open(self.file, "rb") as f:
                f.seek(self.offset)
                data = f.read()
        except FileNotFoundError:
            raise DataFileError(f"{self.file}: missing; not a pnbench run folder") from None
        end = data.rfind(b"\n") + 1
        for number, raw in enumerate(data[:end].decode("utf-8").splitlines()):
            if not raw or raw.startswith("#"):
                continue
            if not self._header_seen:
                if raw.strip() != HEADER:
                    raise DataFileError(f"{self.file}: header is {raw.strip()!r}, expected "
                                        f"{HEADER!r}")
                self._header_seen = True
                continue
            try:
                points.append(Point.from_row(raw))
            except ValueError as exc:
                raise DataFileError(f"{self.file}: row after byte {self.offset} "
                                    f"(+{number} lines) cannot be read: {exc}") from None
        self.offset += end
        return points, self.offset
