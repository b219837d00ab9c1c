"""Read a run folder for the report: what exists, what is missing, what is damaged.

The files are read through the run store's readers (`pnbench.sweeps.store`), so the
report understands exactly what the runner writes. A run killed at any instant may
leave a half-written last line in ``points.csv`` or ``events.jsonl``: the readers leave
it out and the report says so. What cannot be read (``run.json`` or ``model.json``
that is not JSON, garbage rows in ``points.csv``, a folder with none of the run files)
is a damaged folder: ``DataFileError`` naming the file, which the command line turns
into exit 2.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pnbench.errors import DataFileError
from pnbench.sweeps import store

#: Point kinds the report draws.
KINDS = ("iv", "cv")


@dataclass(frozen=True)
class Points:
    """Points of one kind as arrays (SI units; NaN where a cell does not apply)."""

    step: tuple[str, ...]
    voltage_V: np.ndarray
    current_A: np.ndarray
    frequency_Hz: np.ndarray
    capacitance_F: np.ndarray
    conductance_S: np.ndarray
    compliance: np.ndarray  # bool

    def __len__(self) -> int:
        return len(self.voltage_V)

    def subset(self, mask: np.ndarray) -> Points | None:
        """The points where ``mask`` holds, or None when there are none."""
        if not mask.any():
            return None
        return Points(
            step=tuple(s for s, m in zip(self.step, mask, strict=True) if m),
            voltage_V=self.voltage_V[mask], current_A=self.current_A[mask],
            frequency_Hz=self.frequency_Hz[mask], capacitance_F=self.capacitance_F[mask],
            conductance_S=self.conductance_S[mask], compliance=self.compliance[mask],
        )


@dataclass
class RunData:
    """Everything the report reads from one run folder."""

    run_dir: Path
    run: dict | None = None
    iv: Points | None = None
    cv: Points | None = None
    metadata: dict[str, str] = field(default_factory=dict)
    events: list[dict] = field(default_factory=list)
    model_json: dict | None = None
    plan_text: str | None = None
    card_text: str | None = None
    card_name: str | None = None
    #: Sentences on files that are missing or lines that were left out.
    missing: list[str] = field(default_factory=list)

    @property
    def device(self) -> dict:
        dev = (self.run or {}).get("device")
        return dev if isinstance(dev, dict) else {}

    @property
    def device_name(self) -> str:
        return str(self.device.get("name") or self.metadata.get("device")
                   or self.run_dir.name)

    def _positive(self, key: str) -> float | None:
        sources = [self.device.get(key), self.metadata.get(key)]
        if key == "temperature_K" and self.model_json is not None:
            sources.append(self.model_json.get("temperature_K"))
        for source in sources:
            try:
                value = float(source)
            except (TypeError, ValueError):
                continue
            if math.isfinite(value) and value > 0:
                return value
        return None

    @property
    def temperature_K(self) -> float | None:
        return self._positive("temperature_K")

    @property
    def area_m2(self) -> float | None:
        return self._positive("area_m2")

    @property
    def material(self) -> str | None:
        text = str(self.device.get("material") or self.metadata.get("material") or "")
        return text.strip() or None


def _read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise DataFileError(f"{path}: not UTF-8 text (byte {exc.start}); the file is "
                            "damaged") from None
    except OSError as exc:
        raise DataFileError(f"{path}: cannot be read ({exc.strerror})") from None


def _read_json_object(path: Path) -> dict:
    text = _read_text(path)
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


def _torn(path: Path) -> bool:
    """True when the file's last line has no newline (a write cut short)."""
    with open(path, "rb") as f:
        size = f.seek(0, 2)
        if size == 0:
            return False
        f.seek(size - 1)
        return f.read(1) != b"\n"


def _arrays(points: list[store.Point], kind: str) -> Points | None:
    chosen = [p for p in points if p.kind == kind]
    if not chosen:
        return None

    def col(name: str) -> np.ndarray:
        return np.array([math.nan if getattr(p, name) is None else getattr(p, name)
                         for p in chosen], dtype=float)

    return Points(step=tuple(p.step for p in chosen), voltage_V=col("voltage_V"),
                  current_A=col("current_A"), frequency_Hz=col("frequency_Hz"),
                  capacitance_F=col("capacitance_F"), conductance_S=col("conductance_S"),
                  compliance=np.array([p.compliance for p in chosen], dtype=bool))


def _load_points(data: RunData) -> None:
    path = data.run_dir / "points.csv"
    _read_text(path)  # a clear message for binary garbage
    data.metadata = store.read_metadata(data.run_dir)
    points = store.read_points(data.run_dir)
    if _torn(path):
        data.missing.append("points.csv: the last line was cut short (the run was stopped "
                            "while writing it) and is left out")
    data.iv, data.cv = _arrays(points, "iv"), _arrays(points, "cv")
    others = sorted({p.kind for p in points} - set(KINDS))
    if others:
        data.missing.append(f"points.csv: points of kind {', '.join(others)} are not drawn "
                            f"(the report knows {', '.join(KINDS)})")
    if not points:
        data.missing.append("points.csv holds no points yet")


def _load_events(data: RunData) -> None:
    path = data.run_dir / "events.jsonl"
    lines = [ln for ln in _read_text(path).split("\n")[:-1] if ln.strip()]
    data.events = [e.to_json_dict() for e in store.read_events(data.run_dir)]
    if _torn(path):
        data.missing.append("events.jsonl: the last line was cut short and is left out")
    unread = len(lines) - len(data.events)
    if unread > 0:
        data.missing.append(f"events.jsonl: {unread} line(s) could not be read as events "
                            "and are left out")


def load_run(run_dir: Path | str) -> RunData:
    """Read a run folder; raises DataFileError when it is damaged or holds no run."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise DataFileError(f"{run_dir}: not a run folder (no such directory); give the "
                            "folder of a pnbench run, named like 20260101-120000_device")
    data = RunData(run_dir=run_dir)
    present = {name: (run_dir / name).is_file()
               for name in ("run.json", "points.csv", "events.jsonl", "model.json",
                            "plan.toml")}
    if not (present["run.json"] or present["points.csv"]):
        raise DataFileError(
            f"{run_dir}: neither run.json nor points.csv is there, so there is nothing to "
            "report; a run folder holds run.json, points.csv, events.jsonl and model.json "
            "as the run writes them"
        )
    if present["run.json"]:
        _read_json_object(run_dir / "run.json")  # line and column of a JSON fault
        data.run = store.read_run(run_dir)
    else:
        data.missing.append("run.json is missing: status, instruments, limits and steps "
                            "are unknown")
    if present["points.csv"]:
        _load_points(data)
    else:
        data.missing.append("points.csv is missing: there are no measured points")
    if present["events.jsonl"]:
        _load_events(data)
    else:
        data.missing.append("events.jsonl is missing: no warnings or events to show")
    if present["model.json"]:
        data.model_json = _read_json_object(run_dir / "model.json")
    if present["plan.toml"]:
        data.plan_text = _read_text(run_dir / "plan.toml")
    else:
        data.missing.append("plan.toml is missing: the plan as run is unknown")
    cards = sorted(run_dir.glob("*.lib"))
    if cards:
        data.card_name = cards[0].name
        data.card_text = _read_text(cards[0])
    return data
