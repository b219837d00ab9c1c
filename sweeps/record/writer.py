"""Writing a run folder: create it atomically, append points and events, reopen it.

Durability rules (docs/run-folder.md):

- a new folder is built under a hidden temporary name inside ``--out`` and renamed to
  its final name once run.json exists, so a folder under a run's name always has one;
- a point is written and flushed to the operating system before the next bias step, so a
  killed process (even kill -9) loses nothing it had read;
- points.csv and events.jsonl are fsynced at least once a second while points come, and
  right after each step end (`sync_soon`), by a background thread (`_Syncer`): an fsync
  may take tens of milliseconds on a busy disk, which the acquisition thread never waits
  for; this covers power loss up to about a second. The end of a run calls `sync()`,
  which waits;
- run.json, model.json, the model card and the report are replaced atomically (temporary
  file, fsync, rename), so a reader never sees half a document. `update_run` writes
  run.json before it returns (a change of state); `update_run_soon` (the steps' done
  counts while points flow, a step's start and end) leaves the write to the background
  thread, which writes the latest document; every run.json write holds one lock, so the
  newest document is the last one renamed into place;
- `RunFolder.reopen` cuts a torn last line (a write cut short by the kill) from points.csv
  and events.jsonl before appending, so the files stay parseable.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import threading
import weakref
from datetime import UTC, datetime
from pathlib import Path

from pnbench.errors import BadInput, DataFileError
from pnbench.sweeps.events import Event
from pnbench.sweeps.record import layout
from pnbench.sweeps.record.columns import Point
from pnbench.sweeps.record.layout import HEADER, RUN_FORMAT, iso, utc_now

FSYNC_INTERVAL_S = 1.0


def atomic_write(path: Path, text: str) -> None:
    """Replace ``path`` with ``text`` so that a reader sees the old or the new file."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
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
    with contextlib.suppress(OSError):
        os.fsync(fd)
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


def _has_temperature_column(points: Path) -> bool:
    """Whether the header of points.csv ends with temperature_K (a run over temperature)."""
    try:
        with open(points, "rb") as f:
            for raw in f:
                text = raw.decode("utf-8", "replace").strip()
                if text and not text.startswith("#"):
                    return text == layout.HEADER_T
    except OSError:
        pass
    return False


class RunFolder:
    """A run folder open for writing (a live run or a resumed one)."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self._lockfile = _take_lock(self.path)
        self.run: dict = {}
        self._points = open(self.path / layout.POINTS, "a", encoding="utf-8", newline="")
        self._events = open(self.path / layout.EVENTS, "a", encoding="utf-8")
        self._log = open(self.path / layout.LOG, "a", encoding="utf-8")
        self._lock = threading.Lock()
        self._run_lock = threading.RLock()  # one run.json write at a time, newest last
        self._run_pending = False
        self._dirty = False
        self._closed = False
        self._syncer: _Syncer | None = None
        self.temperature_column = _has_temperature_column(self.path / layout.POINTS)

    # -- creating and reopening -------------------------------------------------------
    @classmethod
    def create(cls, out_dir: str | Path, plan_text: str, run_doc: dict,
               metadata: dict, started: datetime | None = None,
               temperature_column: bool = False) -> RunFolder:
        """Make a new run folder under ``out_dir`` (created if needed).

        ``run_doc`` is the first run.json (``device.name`` names the folder);
        ``metadata`` becomes the ``# key = value`` lines at the top of points.csv;
        ``temperature_column`` adds temperature_K (a run over temperature). The
        folder appears under its final name only once run.json is in it.
        """
        started = started or utc_now()
        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        base = layout.folder_name(started, str(run_doc.get("device", {}).get("name",
                                                                             "device")))
        staging = out / layout.STAGING
        staging.mkdir(exist_ok=True)
        tmp = staging / f"{base}.{os.getpid()}.{threading.get_ident()}"
        tmp.mkdir()
        (tmp / layout.PLAN).write_text(plan_text, encoding="utf-8")
        lines = [f"# {key} = {value}\n" for key, value in metadata.items()]
        header = layout.HEADER_T if temperature_column else HEADER
        (tmp / layout.POINTS).write_text("".join(lines) + header + "\n", encoding="utf-8")
        (tmp / layout.EVENTS).touch()
        (tmp / layout.LOG).touch()
        folder = cls(tmp)
        doc = {"format": RUN_FORMAT, **run_doc}
        doc.setdefault("started", iso(started))
        folder.write_run(doc)
        folder._rename_into(out, base)
        return folder

    def _rename_into(self, out: Path, base: str) -> None:
        suffix = 1
        while True:
            target = out / (base if suffix == 1 else f"{base}-{suffix}")
            if not target.exists():
                try:
                    os.rename(self.path, target)
                except OSError:  # taken meanwhile (a folder that is not empty)
                    pass
                else:
                    staging = self.path.parent
                    self.path = target
                    _fsync_dir(out)
                    with contextlib.suppress(OSError):  # another run may be using it
                        staging.rmdir()
                    return
            suffix += 1

    @classmethod
    def reopen(cls, path: str | Path) -> RunFolder:
        """Open an existing run folder to append (resume); cuts torn last lines."""
        from pnbench.sweeps.record.reader import read_run_doc

        path = Path(path)
        run = read_run_doc(path)
        for name in (layout.POINTS, layout.EVENTS):
            if not (path / name).exists():
                raise DataFileError(f"run folder {path}: {name} is missing; this is not a "
                                    "complete pnbench run folder")
        cut = (_cut_torn_tail(path / layout.POINTS)
               + _cut_torn_tail(path / layout.EVENTS))
        _drop_bad_last_event(path / layout.EVENTS)
        folder = cls(path)
        folder.run = run
        if cut:
            folder.log(f"reopen: removed {cut} bytes of a line cut short by the interruption")
        return folder

    # -- writing ------------------------------------------------------------------------
    def append_point(self, point: Point) -> None:
        """Write one point and flush it to the operating system (the background thread
        fsyncs it within a second)."""
        self._points.write(point.to_row(self.temperature_column))
        self._points.flush()
        if not self._dirty:
            self._dirty = True
            if self._syncer is None:
                self._start_syncer()

    def append_event(self, event: Event) -> None:
        with self._lock:
            self._events.write(event.to_json() + "\n")
            self._events.flush()

    def sync(self) -> None:
        """fsync points.csv and events.jsonl now, and write a pending run.json (the end of
        a run; waits)."""
        with self._lock:
            for f in (self._points, self._events):
                f.flush()
        self._fsync_files()
        self._write_pending_run()

    def sync_soon(self) -> None:
        """Ask the background thread to fsync points.csv and events.jsonl now (a step
        end); returns at once."""
        self._dirty = True
        self._start_syncer().wake()

    def _fsync_files(self) -> None:
        self._dirty = False
        for f in (self._points, self._events):
            with contextlib.suppress(ValueError):  # closed meanwhile
                os.fsync(f.fileno())

    def write_run(self, doc: dict) -> None:
        """Replace run.json with ``doc`` now (atomically, fsynced)."""
        with self._run_lock:
            self.run = doc
            self._run_pending = False
            atomic_write(self.path / layout.RUN, json.dumps(doc, indent=2, default=str)
                         + "\n")

    def update_run(self, **changes) -> dict:
        """Merge top-level keys into run.json and rewrite it atomically before returning
        (a change of state)."""
        with self._run_lock:
            doc = {**self.run, **changes}
            self.write_run(doc)
        return doc

    def update_run_soon(self, **changes) -> dict:
        """Merge top-level keys into run.json; the background thread writes it (within a
        second, the latest document wins). For progress while points flow."""
        self.run = doc = {**self.run, **changes}
        self._run_pending = True
        self._start_syncer().wake()
        return doc

    def _write_pending_run(self) -> None:
        with self._run_lock:
            if self._run_pending:
                self._run_pending = False
                atomic_write(self.path / layout.RUN,
                             json.dumps(self.run, indent=2, default=str) + "\n")

    def _start_syncer(self) -> _Syncer:
        if self._syncer is None:
            self._syncer = _Syncer(self)
        return self._syncer

    def log(self, message: str) -> None:
        stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S")
        with self._lock:
            self._log.write(f"{stamp}Z {message}\n")
            self._log.flush()

    def write_model(self, model_json: dict, card_text: str | None, device_name: str) -> None:
        """Replace model.json and the model card (``<device>.lib``) atomically."""
        atomic_write(self.path / layout.MODEL, json.dumps(model_json, indent=2) + "\n")
        if card_text is not None:
            atomic_write(self.path / layout.card_file_name(device_name), card_text)

    def close(self) -> None:
        if self._syncer is not None:
            self._syncer.stop()
        with contextlib.suppress(OSError, ValueError):
            self._write_pending_run()
        self._closed = True
        for f in (self._points, self._events, self._log):
            try:
                f.flush()
                os.fsync(f.fileno())
                f.close()
            except (OSError, ValueError):
                pass
        with contextlib.suppress(OSError):
            self._lockfile.close()  # releases the lock


class _Syncer:
    """The background thread of a `RunFolder`: fsyncs points.csv and events.jsonl once a
    second while they change (at once when woken: a step end) and writes run.json when
    `update_run_soon` left it pending. It holds the folder weakly and ends with
    `RunFolder.close` (or when the folder is gone)."""

    def __init__(self, folder: RunFolder) -> None:
        self._folder = weakref.ref(folder)
        self._event = threading.Event()
        self._stop = False
        self._warned = False
        self._thread = threading.Thread(target=self._loop, name="pnbench-sync", daemon=True)
        self._thread.start()

    def wake(self) -> None:
        self._event.set()

    def stop(self) -> None:
        self._stop = True
        self._event.set()
        if self._thread is not threading.current_thread():
            self._thread.join(10.0)

    def _loop(self) -> None:
        while not self._stop:
            self._event.wait(FSYNC_INTERVAL_S)
            self._event.clear()
            folder = self._folder()
            if folder is None or folder._closed:
                return
            try:
                if folder._dirty:
                    folder._fsync_files()
                folder._write_pending_run()
            except OSError as exc:  # a full or failing disk: say so once, keep trying
                if not self._warned:
                    self._warned = True
                    with contextlib.suppress(OSError, ValueError):
                        folder.log(f"background fsync or run.json write failed: {exc}")
            del folder


def _take_lock(path: Path):
    """Hold an exclusive lock on the run folder while it is open for writing (released by
    the kernel when the process dies, even by kill -9)."""
    handle = open(path / layout.LOCK, "a+", encoding="utf-8")
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
