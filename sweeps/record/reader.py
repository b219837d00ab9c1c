"""Reading a run folder back into typed records.

`read_run` gives a `RunInfo` (run.json), `read_columns` the points as numpy columns,
`read_events` the typed events, `read_model` the `ModelSet`; `read_plan`, `read_card`
and `read_metadata` the rest. Everything that cannot be read raises DataFileError naming
the file (and the line, for points.csv and events.jsonl); a torn last line (a write cut
short by a kill) is no error: it is left out and said (``torn``).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

from pnbench.errors import DataFileError
from pnbench.sweeps.events import Event, parse_event_line
from pnbench.sweeps.record import layout
from pnbench.sweeps.record.columns import Point, PointColumns
from pnbench.sweeps.record.columns import read_columns as _columns
from pnbench.sweeps.statuses import RunStatus, StepStatus, run_status


@dataclass(frozen=True)
class StepInfo:
    name: str
    kind: str = ""
    planned: int = 0
    done: int = 0
    status: str = StepStatus.PENDING
    ended_by: str | None = None


@dataclass(frozen=True)
class RunInfo:
    """run.json, typed; ``doc`` is the whole document (keys this version does not know
    included). ``event["key"]``-style access reads the document."""

    path: Path
    doc: dict
    status: RunStatus
    reason: str = ""
    device: dict = field(default_factory=dict)
    instruments: dict = field(default_factory=dict)
    steps: tuple[StepInfo, ...] = ()
    outputs_off_confirmed: bool = False
    simulated: str | None = None
    started: str | None = None
    ended: str | None = None
    resume_count: int = 0
    #: {"status", "reason"} while the end work (fit, model, card, report) is under way
    finishing: dict | None = None

    @property
    def device_name(self) -> str:
        return str(self.device.get("name") or "device")

    @property
    def end_status(self) -> RunStatus:
        """The status the run ends with: the recorded one, or the one its end work
        will record (the report, written before the status, shows this)."""
        if self.finishing and self.finishing.get("status"):
            return run_status(self.finishing["status"])
        return self.status

    def __getitem__(self, key: str):
        return self.doc[key]

    def get(self, key: str, default=None):
        return self.doc.get(key, default)

    def __contains__(self, key: str) -> bool:
        return key in self.doc


def read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise DataFileError(f"{path}: missing") from None
    except UnicodeDecodeError as exc:
        raise DataFileError(f"{path}: not UTF-8 text (byte {exc.start}); the file is "
                            "damaged") from None
    except OSError as exc:
        raise DataFileError(f"{path}: cannot be read ({exc.strerror or exc})") from None


def read_json_object(path: Path) -> dict:
    """A JSON object file; DataFileError with line and column when it is not one."""
    text = read_text(path)
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise DataFileError(
            f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}); "
            "the file is damaged (expected one JSON object as the run writes it)"
        ) from None
    if not isinstance(doc, dict):
        raise DataFileError(f"{path}: expected a JSON object, found {type(doc).__name__}")
    return doc


def has(run_dir: str | Path, name: str) -> bool:
    """Whether the run folder holds the file ``name`` (a `layout` name)."""
    return (Path(run_dir) / name).is_file()


def present(run_dir: str | Path) -> dict[str, bool]:
    """Which of the run files are there: {"run", "points", "events", "model", "plan"}."""
    run_dir = Path(run_dir)
    return {key: (run_dir / name).is_file() for key, name in (
        ("run", layout.RUN), ("points", layout.POINTS), ("events", layout.EVENTS),
        ("model", layout.MODEL), ("plan", layout.PLAN))}


def read_run_doc(run_dir: str | Path) -> dict:
    """run.json as a dict (format checked)."""
    run_dir = Path(run_dir)
    file = run_dir / layout.RUN
    if not file.is_file():
        raise DataFileError(_no_run_json(run_dir))
    doc = read_json_object(file)
    if doc.get("format") != layout.RUN_FORMAT:
        raise DataFileError(f"{file}: not a run.json of format {layout.RUN_FORMAT}")
    return doc


def _no_run_json(run_dir: Path) -> str:
    if run_dir.is_dir() and (run_dir.parent.name == layout.STAGING
                             or (run_dir / layout.PLAN).is_file()):
        return (f"{run_dir}: the run was stopped while its folder was being created "
                "(no run.json): nothing was measured here, so there is nothing to resume "
                "or report; start the plan again with `pnbench run`")
    return (f"{run_dir}: no run.json here; give the folder of a pnbench run (named like "
            "20250101-120000_device)")


def run_info(path: Path, doc: dict) -> RunInfo:
    steps = tuple(StepInfo(str(s.get("name", "")), str(s.get("kind", "") or ""),
                           _int(s.get("planned")), _int(s.get("done")),
                           str(s.get("status") or StepStatus.PENDING), s.get("ended_by"))
                  for s in doc.get("steps") or [] if isinstance(s, dict))
    device = doc.get("device")
    finishing = doc.get("finishing")
    return RunInfo(
        path=path, doc=doc, status=run_status(doc.get("status"), RunStatus.FAILED),
        reason=str(doc.get("reason") or ""),
        device=device if isinstance(device, dict) else {},
        instruments=dict(doc.get("instruments") or {}), steps=steps,
        outputs_off_confirmed=bool(doc.get("outputs_off_confirmed", False)),
        simulated=doc.get("simulated"), started=doc.get("started"), ended=doc.get("ended"),
        resume_count=_int(doc.get("resume_count")),
        finishing=finishing if isinstance(finishing, dict) else None)


def _int(value) -> int:
    return int(value) if isinstance(value, (int, float)) and not isinstance(value, bool) \
        else 0


def read_run(run_dir: str | Path) -> RunInfo:
    """run.json of a run folder, typed."""
    return run_info(Path(run_dir), read_run_doc(run_dir))


def read_columns(run_dir: str | Path, fields: tuple[str, ...] | None = None) -> PointColumns:
    """Every complete point of a run folder as columns (a torn last line left out);
    ``fields`` limits the numeric columns kept (`columns.FIELDS`; the others read as NaN
    and take no memory)."""
    return _columns(Path(run_dir) / layout.POINTS, fields)


def read_points(run_dir: str | Path) -> list[Point]:
    """Every complete point as row objects (small folders; readers of large ones take
    `read_columns`)."""
    return list(read_columns(run_dir).rows())


def read_metadata(run_dir: str | Path) -> dict[str, str]:
    """The ``# key = value`` lines at the top of points.csv (values as text)."""
    meta = {}
    with open(Path(run_dir) / layout.POINTS, encoding="utf-8", errors="replace") as f:
        for line in f:
            if not line.startswith("#"):
                break
            key, sep, value = line[1:].partition("=")
            if sep:
                meta[key.strip()] = value.strip()
    return meta


@dataclass(frozen=True)
class EventLog:
    events: list[Event]
    torn: bool  # the last line was cut short and is left out


def read_event_log(run_dir: str | Path) -> EventLog:
    """Every complete event of events.jsonl; DataFileError names a malformed line."""
    path = Path(run_dir) / layout.EVENTS
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise DataFileError(f"{path}: missing; not a pnbench run folder") from None
    except OSError as exc:
        raise DataFileError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    lines = data.split(b"\n")
    torn = bool(lines[-1].strip())
    events = []
    for n, line in enumerate(lines[:-1], start=1):
        if not line.strip():
            continue
        try:
            events.append(parse_event_line(line))
        except (ValueError, UnicodeDecodeError) as exc:
            raise DataFileError(event_line_problem(path, n, exc)) from None
    return EventLog(events, torn)


def event_line_problem(path: Path, line: int, exc: BaseException) -> str:
    return f"{path}, line {line}: unreadable event ({exc})"


def read_events(run_dir: str | Path) -> list[Event]:
    return read_event_log(run_dir).events


def read_model_doc(run_dir: str | Path) -> dict | None:
    """model.json as a dict, or None when the run has none (yet)."""
    path = Path(run_dir) / layout.MODEL
    return read_json_object(path) if path.is_file() else None


def read_model(run_dir: str | Path):
    """The run's `ModelSet` (None when it has no model.json yet)."""
    from pnbench.modeling.modelset import ModelSet

    doc = read_model_doc(run_dir)
    if doc is None:
        return None
    return ModelSet.from_json_dict(doc, source=str(Path(run_dir) / layout.MODEL))


def model_source(run_dir: str | Path) -> str:
    """How messages name the run's model file."""
    return str(Path(run_dir) / layout.MODEL)


def plan_path(run_dir: str | Path) -> Path:
    return Path(run_dir) / layout.PLAN


def read_plan(run_dir: str | Path) -> str | None:
    """plan.toml as run (None when it is missing)."""
    path = plan_path(run_dir)
    return read_text(path) if path.is_file() else None


def read_card(run_dir: str | Path) -> tuple[str, str] | None:
    """(file name, text) of the run's model card, or None."""
    cards = sorted(Path(run_dir).glob("*" + layout.CARD_SUFFIX))
    if not cards:
        return None
    return cards[0].name, read_text(cards[0])


def report_path(run_dir: str | Path) -> Path:
    return Path(run_dir) / layout.REPORT


def figures_dir(run_dir: str | Path) -> Path:
    return Path(run_dir) / layout.FIGURES


def log_path(run_dir: str | Path) -> Path:
    return Path(run_dir) / layout.LOG


def looks_like_run(run_dir: str | Path) -> bool:
    """Whether the folder holds any of run.json, points.csv, events.jsonl."""
    run_dir = Path(run_dir)
    return any((run_dir / n).exists() for n in (layout.RUN, layout.POINTS, layout.EVENTS))
