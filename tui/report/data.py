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
        return Points(
            step=self.step[mask],
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
    mask = points.kind_mask(kind)
    if not mask.any():
        return None
    chosen = points.select(mask)
    return Points(step=chosen.steps(), voltage_V=chosen.voltage_V,
                  current_A=chosen.current_A, frequency_Hz=chosen.frequency_Hz,
                  capacitance_F=chosen.capacitance_F, conductance_S=chosen.conductance_S,
                  compliance=chosen.compliance)


def _load_points(data: RunData) -> None:
    points = record.read_columns(data.run_dir)
    data.metadata = dict(points.metadata)
    if points.torn:
        data.missing.append("points.csv: the last line was cut short (the run was stopped "
                            "while writing it) and is left out")
    data.iv, data.cv = _arrays(points, "iv"), _arrays(points, "cv")
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
