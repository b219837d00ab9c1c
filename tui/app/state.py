"""What the screens know about one run: points, estimates, log, progress, outputs.

A pure, single-threaded model fed by two kinds of input, both described in the run-folder
contract of docs/run-folder.md: points (a row of points.csv, or the in-process `point` event)
and events (one object of events.jsonl), plus the run.json document. The live app and
`pnbench watch` feed it the same way, so both show the same thing. No Textual, no
threads, no files: the screens read it on the UI thread after draining their queue.
"""

from __future__ import annotations

import math
import time
from collections import deque
from dataclasses import dataclass, field, replace

import numpy as np

from pnbench.sweeps.events import (
    Correction,
    Event,
    Fit,
    Output,
    Paused,
    PointTaken,
    Resumed,
    RunFinished,
    RunStarted,
    StageDrifting,
    StageRamping,
    StageStable,
    StepStarted,
)
from pnbench.sweeps.progress import ProgressModel, StepProgress, format_duration
from pnbench.sweeps.record import PointColumns
from pnbench.sweeps.statuses import RUN_FINAL, RunStatus
from pnbench.tui.app.columns import Columns, FrozenColumns, Snapshot, to_number
from pnbench.tui.app.events import LOG_TAGS, LogEntry, as_event, describe

__all__ = ["Estimate", "LogEntry", "RunState", "Snapshot", "StepProgress", "describe",
           "format_duration"]


#: The coordinates on which points are told apart when thinned for display: as the I-V
#: views draw them (V, log |I|, in compliance or not) and the C-V and admittance views
#: (V, each frequency, C, log G).
IV_CELLS = (("voltage_V", "lin"), ("current_A", "log"), ("compliance", "exact"))
CV_CELLS = (("voltage_V", "lin"), ("frequency_Hz", "exact"), ("capacitance_F", "lin"),
            ("conductance_S", "log"))


@dataclass
class Estimate:
    """One fitted parameter as the last `fit` event gave it."""

    value: float
    sigma: float | None
    settled: bool
    #: the fit it came from fails its lack-of-fit checks (its sigma is a lower bound)
    misfit: bool = False


@dataclass
class RunState:
    """Everything a run screen shows, built from points, events and run.json."""

    #: points as the plots draw them (bounded: thinned for display past a capacity)
    iv: Columns = field(default_factory=lambda: Columns(
        ("voltage_V", "current_A", "time_s", "compliance"), IV_CELLS))
    cv: Columns = field(default_factory=lambda: Columns(
        ("voltage_V", "frequency_Hz", "capacitance_F", "conductance_S", "time_s"), CV_CELLS))
    parameters: dict[str, Estimate] = field(default_factory=dict)
    log: deque = field(default_factory=lambda: deque(maxlen=2000))
    #: log entries ever added (the deque keeps only the newest)
    log_total: int = 0
    counts: dict[str, int] = field(default_factory=dict)
    #: done/planned per step and the ETA: the model headless and watch use too
    progress: ProgressModel = field(default_factory=ProgressModel)
    status: str = "idle"
    reason: str = ""
    outputs: dict[str, bool] = field(default_factory=dict)
    #: a run over temperature: the stage's last news (set point, reading, state, wait)
    stage: dict = field(default_factory=dict)
    #: a run over temperature: the plan's set points in run order (K)
    set_points_K: tuple = ()
    outputs_off_confirmed: bool = False
    #: who confirmed the outputs off: the runner, or the guardian after a killed run
    outputs_off_by: str = "runner"
    #: False once the run says no instrument was ever reached
    connected: bool = True
    device: dict = field(default_factory=dict)
    instruments: dict = field(default_factory=dict)
    temperature_K: float = 300.15
    #: a model over temperature (model.json): each temperature's fit, and its TNOM
    temperatures: tuple = ()
    model_temperature_K: float | None = None
    last_time_s: float = 0.0
    #: increases at every change, so a screen redraws only when something changed
    version: int = 0
    _wall_at_last_time: float = field(default=math.nan, repr=False)
    _misfits_logged: set = field(default_factory=set, repr=False)
    #: the run's LCR correction (run.json's record, or rebuilt from its events): C-V
    #: points of a run compensated in software are shown as its fits use them
    correction: dict | None = field(default=None, repr=False)

    # ----------------------------------------------------------------- input
    def add_point(self, row: dict) -> None:
        """One point: a points.csv row (strings) or a `point` event (numbers)."""
        kind = str(row.get("point_kind") or row.get("kind") or "").strip().lower()
        if kind not in ("iv", "cv"):
            kind = ""
        step = str(row.get("step", "") or "")
        values = {key: to_number(row.get(key)) for key in (
            "voltage_V", "current_A", "time_s", "frequency_Hz", "capacitance_F",
            "conductance_S")}
        values["compliance"] = 1.0 if str(row.get("compliance", "")).strip().lower() in (
            "1", "true", "1.0") else 0.0
        if not kind:
            kind = "cv" if math.isfinite(values["capacitance_F"]) else "iv"
        if kind == "cv" and self.correction is not None:
            values.update(_compensated(self.correction, step, values))
        (self.cv if kind == "cv" else self.iv).append(values, step)
        if step:
            self.progress.add_points(step, [values["time_s"]])
        self._note_time(values["time_s"])
        self.version += 1

    def apply_event(self, event: Event | dict) -> None:
        """One event of the stream (typed, or a dict as in events.jsonl)."""
        event = as_event(event)
        if isinstance(event, PointTaken):
            self.add_point(_point_row(event))
            return
        step = event.step
        t = to_number(event.time_s)
        self._note_time(t)
        self.counts[event.kind] = self.counts.get(event.kind, 0) + 1
        self.progress.apply(event)
        match event:
            case Fit():
                misfit = bool((event.misfit or {}).get("misfit"))
                for name, entry in (event.parameters or {}).items():
                    if isinstance(entry, dict):
                        sigma = entry.get("sigma")
                        self.parameters[name] = Estimate(
                            to_number(entry.get("value")),
                            None if sigma is None else to_number(sigma),
                            bool(entry.get("settled", False)), misfit)
            case StepStarted() if step and not event.step_kind:
                progress = self._step(step)
                progress.kind = str(event.extra.get("sweep") or progress.kind)
            case Paused():
                self.status = RunStatus.PAUSED
            case Resumed() | RunStarted():
                self.status = RunStatus.RUNNING
            case RunFinished():
                self.status = str(event.status or RunStatus.COMPLETED)
                self.reason = str(event.reason or self.reason or "")
                self.outputs_off_confirmed = bool(event.outputs_off_confirmed)
                self.connected = event.connected is not False
            case Correction():
                runs = [*((self.correction or {}).get("runs") or []),
                        {"set_point_K": event.set_point_K, "applied_by": event.applied_by,
                         "values": event.values}]
                points = {r["set_point_K"] for r in runs}
                self.correction = {"done": True, "runs": runs,
                                   "every_set_point": len(points) > 1}
            case Output() if event.role == "stage":
                self.stage = {**self.stage, "state": "standby"}
            case Output():
                self.outputs[str(event.role or "source")] = bool(event.on)
            case StageRamping() | StageStable() | StageDrifting():
                self.stage = {"set_point_K": event.set_point_K,
                              "temperature_K": event.temperature_K,
                              "state": event.kind.removeprefix("stage_"),
                              "waited_s": getattr(event, "waited_s", None),
                              "ramp_K_per_min": getattr(event, "ramp_K_per_min", None)}
        if event.kind in LOG_TAGS:
            self.add_log(LogEntry(t, LOG_TAGS[event.kind], step, describe(event)))
        self.version += 1

    def add_points(self, points: PointColumns) -> None:
        """Many points at once (a run folder read or followed): columns, not rows."""
        n = len(points)
        if not n:
            return
        steps = points.steps()
        for kind, target in (("cv", self.cv), ("iv", self.iv)):
            mask = points.kind_mask(kind)
            if mask.any():
                chosen = points.select(mask)
                values = {name: getattr(chosen, name) for name in target.names
                          if name != "compliance"}
                if kind == "cv" and self.correction is not None:
                    values = _compensated_columns(self.correction, steps[mask], values)
                if "compliance" in target.names:
                    values["compliance"] = chosen.compliance.astype(float)
                target.extend(values, steps[mask])
        for name in points.step_names:
            mine = points.step_mask(name)
            if mine.any():
                self.progress.add_points(name, points.time_s[mine])
        times = points.time_s[np.isfinite(points.time_s)]
        if times.size:
            self._note_time(float(times.max()))
        self.version += 1

    def apply_run_json(self, doc: dict) -> None:
        """The run.json document (status, device, instruments, steps)."""
        self.status = str(doc.get("status", self.status))
        self.reason = str(doc.get("reason", "") or "")
        self.device = dict(doc.get("device") or {})
        self.instruments = dict(doc.get("instruments") or {})
        self.outputs_off_confirmed = bool(doc.get("outputs_off_confirmed", False))
        guardian = doc.get("guardian")
        self.outputs_off_by = ("guardian" if isinstance(guardian, dict)
                               and guardian.get("outputs_off_confirmed") else "runner")
        self.connected = doc.get("connected") is not False
        temperature = to_number(self.device.get("temperature_K"))
        if math.isfinite(temperature) and temperature > 0:
            self.temperature_K = temperature
        self.progress.apply_run_doc(doc)
        if isinstance(doc.get("lcr_correction"), dict):
            self.correction = doc["lcr_correction"]
        if self.status in RUN_FINAL and self.outputs_off_confirmed:
            self.outputs = {role: False for role in self.outputs}
        self.version += 1

    def set_plan_steps(self, steps: list[tuple[str, str, int]],
                       seconds_per_point: dict[str, float] | None = None) -> None:
        """Steps known before the run starts: (name, kind, planned points), and the
        plan's estimate of seconds per point (for the ETA before points come)."""
        self.progress.set_plan(steps, seconds_per_point)
        self.version += 1

    def apply_model_json(self, doc: dict) -> None:
        """The run's model.json (the fit of every point, written after each step and at
        the end) replaces the live estimates: a name it leaves out (say RS, once all the
        data show no series resistance) is no longer shown."""
        self.parameters.clear()
        rows = doc.get("temperatures")
        self.temperatures = tuple(r for r in rows if isinstance(r, dict)) \
            if isinstance(rows, list) else ()
        tnom = doc.get("temperature_K")
        self.model_temperature_K = float(tnom) if isinstance(tnom, (int, float)) else None
        for name, entry in (doc.get("parameters") or {}).items():
            if not isinstance(entry, dict) or not isinstance(entry.get("value"),
                                                               (int, float)):
                continue
            sigma = entry.get("sigma")
            self.parameters[name] = Estimate(
                float(entry["value"]),
                float(sigma) if isinstance(sigma, (int, float)) else None, True)
        for kind, fit in (doc.get("fits") or {}).items():  # a model that misfits says so
            lack = fit.get("lack_of_fit") if isinstance(fit, dict) else None
            text = fit.get("message") if isinstance(fit, dict) else None
            if isinstance(lack, dict) and lack.get("misfit"):
                for name in fit.get("correlation") or {}:  # its parameters, marked
                    if name in self.parameters:
                        self.parameters[name] = replace(self.parameters[name], misfit=True)
            if isinstance(lack, dict) and lack.get("misfit") and isinstance(text, str) \
                    and (kind, text) not in self._misfits_logged:
                self._misfits_logged.add((kind, text))
                self.add_log(LogEntry(self.last_time_s, LOG_TAGS["warning"], None,
                                      f"fit {kind}: {text}"))
        self.parameters.update(fixture_estimates(doc))
        self.version += 1

    def add_log(self, entry: LogEntry) -> None:
        self.log.append(entry)
        self.log_total += 1

    def new_log_entries(self, seen: int) -> list[LogEntry]:
        """Entries added after the first `seen` (as many as the log still holds)."""
        fresh = self.log_total - seen
        if fresh <= 0:
            return []
        entries = list(self.log)
        return entries[-min(fresh, len(entries)):]

    # ----------------------------------------------------------------- derived
    @property
    def point_count(self) -> int:
        """Points of the run so far (the plots may keep fewer: see `Columns`)."""
        return self.iv.total + self.cv.total

    @property
    def source_on(self) -> bool:
        return any(self.outputs.values())

    @property
    def finished(self) -> bool:
        return self.status in RUN_FINAL

    def step_kind(self, name: str) -> str:
        progress = self.steps.get(name)
        return progress.kind if progress else ""

    def snapshot(self) -> Snapshot:
        return Snapshot(FrozenColumns(self.iv), FrozenColumns(self.cv),
                        dict(self.parameters),
                        {name: p.kind for name, p in self.steps.items()},
                        self.temperature_K, self.version, self.temperatures,
                        self.model_temperature_K)

    @property
    def steps(self) -> dict[str, StepProgress]:
        return self.progress.steps

    @property
    def current_step(self) -> str | None:
        return self.progress.current

    @current_step.setter
    def current_step(self, name: str | None) -> None:
        self.progress.current = name

    def eta_s(self) -> tuple[float, float]:
        """Seconds left in the current step and in the whole run (NaN when unknown):
        the shared progress model's (`sweeps.progress`)."""
        if self.finished:
            return 0.0, 0.0
        return self.progress.eta_s()

    def progress_fraction(self) -> float:
        return self.progress.fraction()

    def elapsed_s(self) -> float:
        """Run time now: the last event time plus wall time since it, while running."""
        if self.status == "running" and math.isfinite(self._wall_at_last_time):
            return self.last_time_s + (time.monotonic() - self._wall_at_last_time)
        return self.last_time_s

    # ----------------------------------------------------------------- helpers
    def _step(self, name: str) -> StepProgress:
        return self.progress.step(name)

    def _note_time(self, t: float) -> None:
        if math.isfinite(t) and t >= self.last_time_s:
            self.last_time_s = t
            self._wall_at_last_time = time.monotonic()


def _point_row(event: PointTaken) -> dict:
    return {"step": event.step, "kind": event.point_kind, "time_s": event.time_s,
            "voltage_V": event.voltage_V, "current_A": event.current_A,
            "frequency_Hz": event.frequency_Hz, "capacitance_F": event.capacitance_F,
            "conductance_S": event.conductance_S, "compliance": event.compliance}


def _compensated(record: dict, step: str, values: dict) -> dict:
    """C and G of C-V values (scalars or arrays) of a step compensated with the run's
    recorded correction where pnbench applied it in software; {} otherwise."""
    from pnbench.modeling.compensation import compensate_parallel
    from pnbench.sweeps.fitcorrection import residuals_for
    from pnbench.tui.report.arrhenius import set_point_of

    residuals = residuals_for(record, set_point_of(step), step=step)
    if residuals is None:
        return {}
    c, g = compensate_parallel(np.asarray(values["capacitance_F"], dtype=float),
                               np.asarray(values["conductance_S"], dtype=float),
                               np.asarray(values["frequency_Hz"], dtype=float), residuals)
    if np.ndim(values["capacitance_F"]) == 0:
        return {"capacitance_F": float(c), "conductance_S": float(g)}
    return {"capacitance_F": c, "conductance_S": g}


def _compensated_columns(record: dict, steps: np.ndarray, values: dict) -> dict:
    """`_compensated` over columns of several steps (new arrays where changed)."""
    out = dict(values)
    for name in dict.fromkeys(steps.tolist()):
        at = steps == name
        part = _compensated(record, str(name), {k: np.asarray(v)[at] for k, v in
                                                values.items()})
        for key, column in part.items():
            whole = np.array(out[key], dtype=float)
            whole[at] = column
            out[key] = whole
    return out


def fixture_estimates(doc: dict | None) -> dict[str, Estimate]:
    """The fixture's figures of a model.json document as estimates named CFIX and RFIX
    (the bench's: the parameter table marks them so, and model curves drawn over the
    meter's readings include them)."""
    out = {}
    for name, key in (("CFIX", "fixture_capacitance_F"), ("RFIX", "fixture_resistance_ohm")):
        fixture = (doc or {}).get(key)
        if isinstance(fixture, dict) and isinstance(fixture.get("value"), (int, float)):
            sigma = fixture.get("sigma")
            out[name] = Estimate(float(fixture["value"]),
                                 float(sigma) if isinstance(sigma, (int, float)) else None,
                                 True)
    return out
