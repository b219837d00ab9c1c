"""Reviewing a finished run folder: its points, which of them a refit uses, the refit.

The folder is read with the run record (`sweeps.record`): points as columns, typed
events, run.json and model.json; the refit builds its inputs the way `pnbench fit
RUN_DIR` does and fits them through the call the end of a run uses (`sweeps.runfit`),
with only the points the user kept. Blocking calls (reading,
refitting) run on worker threads; everything here returns values.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from pnbench.errors import DataFileError
from pnbench.modeling.modelset import card_name
from pnbench.sweeps.events import Fit, PointTaken
from pnbench.sweeps.record import PointColumns
from pnbench.tui.app.state import Estimate, RunState, fixture_estimates


@dataclass
class Review:
    """A run folder opened for review."""

    run_dir: Path
    run_doc: dict
    columns: PointColumns  # every point, in the order taken
    used: np.ndarray  # bool per point
    events: list = field(default_factory=list)  # typed events (sweeps.events)
    model_doc: dict | None = None  # model.json as the run wrote it
    refit_doc: dict | None = None  # model.json document of the last refit
    refit_model: object | None = None  # its ModelSet

    @property
    def device_name(self) -> str:
        return str((self.run_doc.get("device") or {}).get("name") or "device")

    @property
    def temperature_K(self) -> float:
        value = (self.run_doc.get("device") or {}).get("temperature_K")
        return float(value) if isinstance(value, (int, float)) and value > 0 else 300.15

    @property
    def points(self) -> _Rows:
        """The points as row objects, made when asked (tables show a page at a time)."""
        return _Rows(self.columns)

    def step_kinds(self) -> dict[str, str]:
        return {str(s.get("name")): str(s.get("kind", "")) for s in
                self.run_doc.get("steps") or [] if s.get("name")}


def load_review(run_dir: str | Path) -> Review:
    """Read a run folder (raises DataFileError naming what is missing)."""
    from pnbench.sweeps import record

    run_dir = Path(run_dir).expanduser()
    if not run_dir.is_dir():
        raise DataFileError(f"{run_dir}: no such folder; give a run folder (named like "
                            "20250101-120000_device under the runs folder)")
    run_doc = record.read_run(run_dir).doc
    columns = record.read_columns(run_dir)
    events = record.read_events(run_dir)
    model_doc = record.read_model_doc(run_dir)
    # every point starts in use: the fitters treat compliance points themselves
    used = np.ones(len(columns), dtype=bool)
    return Review(run_dir, run_doc, columns, used, events, model_doc)


class _Rows:
    """Row objects of columns, by index (a sequence made lazily)."""

    def __init__(self, columns: PointColumns) -> None:
        self._columns = columns

    def __len__(self) -> int:
        return len(self._columns)

    def __getitem__(self, n: int):
        if isinstance(n, slice):
            return [self._columns.row(k) for k in range(*n.indices(len(self)))]
        if n < 0:
            n += len(self)
        if not 0 <= n < len(self):
            raise IndexError(n)
        return self._columns.row(n)

    def __iter__(self):
        return self._columns.rows()


def estimates(model_doc: dict | None) -> dict[str, Estimate]:
    """Parameter estimates of a model.json document (settled: it is a final fit)."""
    out = {}
    for name, entry in ((model_doc or {}).get("parameters") or {}).items():
        if not isinstance(entry, dict):
            continue
        value = entry.get("value")
        if not isinstance(value, (int, float)):
            continue
        sigma = entry.get("sigma")
        out[name] = Estimate(float(value), float(sigma) if isinstance(
            sigma, (int, float)) else None, True)
    for kind in misfits(model_doc):  # a fit that fails its lack-of-fit checks
        for name in ((model_doc or {}).get("fits") or {})[kind].get("correlation") or {}:
            if name in out:
                out[name] = replace(out[name], misfit=True)
    out.update(fixture_estimates(model_doc))  # the bench's, shown marked as such
    return out


def misfits(model_doc: dict | None) -> list[str]:
    """The fits of a model.json document whose lack-of-fit checks failed."""
    fits = (model_doc or {}).get("fits") or {}
    return [kind for kind, fit in fits.items() if isinstance(fit, dict)
            and isinstance(fit.get("lack_of_fit"), dict) and fit["lack_of_fit"].get("misfit")]


def review_state(review: Review, only_used: bool = False) -> RunState:
    """A RunState of the review for the plots and tables (refit estimates if any)."""
    state = RunState()
    state.apply_run_json(review.run_doc)
    state.add_points(review.columns.select(review.used) if only_used else review.columns)
    for event in review.events:
        if not isinstance(event, (Fit, PointTaken)):
            state.apply_event(event)
    state.apply_run_json(review.run_doc)
    state.parameters = estimates(review.refit_doc or review.model_doc)
    return state


def toggle(review: Review, index: int) -> None:
    review.used[index] = not review.used[index]


def set_step(review: Review, step: str, used: bool) -> None:
    review.used[review.columns.step_mask(step)] = used


def refit(review: Review):
    """Fit the whole model again from the points in use, with the inputs the run's own
    fit had (`sweeps.runfit`: the plan's steps and test levels, run.json's correction
    and stated noise); returns the ModelSet (or raises DataFileError when no point is
    left). Blocking: call on a worker thread."""
    from pnbench.sweeps.runfit import fit_inputs, read_inputs

    chosen = review.columns.select(review.used)
    if not len(chosen):
        raise DataFileError(f"{review.run_dir}: no point is in use; keep some points "
                            "(space toggles one, t a step, a all) before refitting")
    fit = fit_inputs(read_inputs(review.run_dir, chosen))
    if fit is None:
        raise DataFileError(f"{review.run_dir}: the points in use give nothing to fit")
    model = fit.model
    review.refit_model = model
    review.refit_doc = model.to_json_dict()
    return model


def card_text(review: Review) -> str:
    """The model card of the refit (or of the run's own model.json)."""
    from pnbench.modeling.modelset import ModelSet

    model = review.refit_model
    if model is None:
        if review.model_doc is None:
            raise DataFileError(f"{review.run_dir}: no model.json and no refit yet; "
                                "refit (r) first")
        model = ModelSet.from_json_dict(review.model_doc)
    return model.card_text(card_name(review.device_name))




def export_card(review: Review, path: str | Path) -> Path:
    """Write the model card (and, for a refit, model.json beside it as NAME.json)."""
    target = Path(path).expanduser()
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(card_text(review), encoding="utf-8")
    if review.refit_doc is not None:
        target.with_suffix(".json").write_text(json.dumps(review.refit_doc, indent=2) + "\n",
                                               encoding="utf-8")
    return target


def point_row(n: int, point, used: bool) -> tuple[str, ...]:
    """One row of the review's point table."""
    def num(value: float | None, digits: int = 4) -> str:
        return "" if value is None else f"{value:.{digits}g}"

    reading = (f"I={num(point.current_A)}" if point.kind == "iv"
               else f"C={num(point.capacitance_F)} G={num(point.conductance_S, 3)}")
    freq = num(point.frequency_Hz, 3)
    return (str(n + 1), "yes" if used else "no", point.step, point.kind,
            num(point.voltage_V), reading, freq, "!" if point.compliance else "")
