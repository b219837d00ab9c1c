"""Read a run folder for the report: what exists, what is missing, what is damaged.

The files are read through the run record (`pnbench.sweeps.record`), so the report
understands exactly what the runner writes, and reads the points by column (a
million points cost about a second and their columns' memory). A run killed at any
instant may leave a half-written last line in ``points.csv`` or ``events.jsonl``: the
record leaves it out and the report says so. What cannot be read (``run.json`` or
``model.json`` that is not JSON, a malformed line, a folder with none of the run files)
is a damaged folder: ``DataFileError`` naming the file and line, which the command
line turns into exit 2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pnbench.errors import DataFileError
from pnbench.sweeps import record
from pnbench.sweeps.events import Event

#: Point kinds the report draws.
KINDS = ("iv", "cv")


@dataclass(frozen=True)
class Points:
    """Points of one kind as arrays (SI units; NaN where a cell does not apply)."""

    step: np.ndarray  # the step name of each point (object array)
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
        count = int(np.count_nonzero(mask))

        def cut(values: np.ndarray) -> np.ndarray:
            if values.strides == (0,):  # a column empty for every point stays one NaN
                return np.broadcast_to(np.nan, (count,))
            return values[mask]

        return Points(
            step=self.step[mask],
            voltage_V=cut(self.voltage_V), current_A=cut(self.current_A),
            frequency_Hz=cut(self.frequency_Hz), capacitance_F=cut(self.capacitance_F),
            conductance_S=cut(self.conductance_S), compliance=self.compliance[mask],
        )


@dataclass
class RunData:
    """Everything the report reads from one run folder."""

    run_dir: Path
    run: dict | None = None
    iv: Points | None = None
    cv: Points | None = None
    metadata: dict[str, str] = field(default_factory=dict)
    events: list[Event] = field(default_factory=list)
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


def _arrays(points: record.PointColumns, kind: str) -> Points | None:
    """The points of one kind; a column that is empty for all of them (the C-V columns
    of I-V points) is one read-only NaN, not a million."""
    mask = points.kind_mask(kind)
    count = int(np.count_nonzero(mask))
    if not count:
        return None

    def column(name: str) -> np.ndarray:
        values = getattr(points, name)
        if values.strides == (0,) or _all_nan(values, mask):
            return np.broadcast_to(np.nan, (count,))
        return values[mask]

    names = np.asarray(points.step_names, dtype=object)
    return Points(step=names[points.step_code[mask]], voltage_V=column("voltage_V"),
                  current_A=column("current_A"), frequency_Hz=column("frequency_Hz"),
                  capacitance_F=column("capacitance_F"),
                  conductance_S=column("conductance_S"), compliance=points.compliance[mask])


def _all_nan(values: np.ndarray, mask: np.ndarray, chunk: int = 1 << 16) -> bool:
    """Whether every selected value is NaN (looked at a chunk at a time)."""
    return all(np.isnan(values[k:k + chunk][mask[k:k + chunk]]).all()
               for k in range(0, len(values), chunk))


#: The columns the report uses (index and time are not read: a million points of them
#: would be 16 MB for nothing).
FIELDS = ("voltage_V", "current_A", "frequency_Hz", "capacitance_F", "conductance_S")


def _load_points(data: RunData) -> None:
    points = record.read_columns(data.run_dir, FIELDS)
    data.metadata = dict(points.metadata)
    if points.torn:
        data.missing.append("points.csv: the last line was cut short (the run was stopped "
                            "while writing it) and is left out")
    data.cv = _arrays(points, "cv")  # the small one first: less held at once
    data.iv = _arrays(points, "iv")
    others = sorted(set(points.kind_names) - set(KINDS))
    if others:
        data.missing.append(f"points.csv: points of kind {', '.join(others)} are not drawn "
                            f"(the report knows {', '.join(KINDS)})")
    if not len(points):
        data.missing.append("points.csv holds no points yet")


def _load_events(data: RunData) -> None:
    log = record.read_event_log(data.run_dir)
    data.events = log.events
    if log.torn:
        data.missing.append("events.jsonl: the last line was cut short and is left out")


def _run_doc(info: record.RunInfo) -> dict:
    """run.json as the report shows it: while the end work runs (the report is part of
    it), the status the run is ending with."""
    doc = dict(info.doc)
    if info.finishing:
        doc["status"] = str(info.end_status)
        doc["reason"] = str(info.finishing.get("reason") or doc.get("reason") or "")
    return doc


def load_run(run_dir: Path | str) -> RunData:
    """Read a run folder; raises DataFileError when it is damaged or holds no run."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise DataFileError(f"{run_dir}: not a run folder (no such directory); give the "
                            "folder of a pnbench run, named like 20260101-120000_device")
    data = RunData(run_dir=run_dir)
    present = record.present(run_dir)
    if not (present["run"] or present["points"]):
        raise DataFileError(
            f"{run_dir}: neither run.json nor points.csv is there, so there is nothing to "
            "report; a run folder holds run.json, points.csv, events.jsonl and model.json "
            "as the run writes them"
        )
    if present["run"]:
        data.run = _run_doc(record.read_run(run_dir))
    else:
        data.missing.append("run.json is missing: status, instruments, limits and steps "
                            "are unknown")
    if present["points"]:
        _load_points(data)
    else:
        data.missing.append("points.csv is missing: there are no measured points")
    if present["events"]:
        _load_events(data)
    else:
        data.missing.append("events.jsonl is missing: no warnings or events to show")
    data.model_json = record.read_model_doc(run_dir)
    data.plan_text = record.read_plan(run_dir)
    if data.plan_text is None:
        data.missing.append("plan.toml is missing: the plan as run is unknown")
    card = record.read_card(run_dir)
    if card is not None:
        data.card_name, data.card_text = card
    return data
