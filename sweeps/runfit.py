"""The inputs of a run's model, built one way for every caller.

A run's model is fitted by `fitmodel.model_of_columns` from the plan's steps (their
kinds, the LCR meter's test level, the breakdown guard that states BV), the points of
each step as columns, the device's temperature and area, and what run.json records
of the run (the device's name, the meter's open/short correction). The end of a run
passes what the fit worker holds in memory (`run_extras` builds its extras); `pnbench
fit RUN_DIR` and the app's review refit read the same from the folder here
(`read_inputs`) and fit through the same call (`fit_inputs`), so the three agree.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from pnbench.errors import PnbenchError
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: The point kinds of points.csv behind each family `pnbench fit --kind` may choose.
FAMILY = {"iv": ("iv_forward", "iv_reverse"), "cv": ("cv", "admittance")}


@dataclass(frozen=True)
class RunInputs:
    """Everything `fitmodel.model_of_columns` takes, for one run."""

    steps: dict[str, object]  # step name -> a plan step (kind, ac_level_V, guard)
    columns: dict[str, dict[str, np.ndarray]]  # step name -> fit columns
    temperature_K: float
    area_m2: float | None = None
    extras: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def only(self, family: str) -> RunInputs:
        """The steps of one family ("iv" or "cv"; "auto" keeps them all)."""
        if family not in FAMILY:
            return self
        keep = {n: s for n, s in self.steps.items() if s.kind in FAMILY[family]}
        return replace(self, steps=keep,
                       columns={n: c for n, c in self.columns.items() if n in keep})


#: What a run's model takes from its run.json: the meter's correction record (stated in
#: the C-V fits' messages) and the instruments' stated noise (what the fits are judged
#: against).
RUN_KEYS = ("lcr_correction", "stated_noise")


def run_extras(device_name: str | None, run) -> dict:
    """The extras a run's model carries: the device's name and RUN_KEYS of its run.json
    (a mapping) where present."""
    out: dict = {"device": device_name} if device_name else {}
    out.update({key: run.get(key) for key in RUN_KEYS if run.get(key)})
    return out


def read_inputs(run_dir: str | Path, points=None) -> RunInputs:
    """A run folder's fit inputs: its plan's steps (else run.json's step kinds, with a
    note), the points of each step (``points``: `PointColumns` already read, e.g. those
    a review keeps; else every point of points.csv), the plan's device temperature and
    area, run.json's extras."""
    from pnbench.sweeps import record

    folder = Path(run_dir).expanduser()
    run = record.read_run(folder).doc
    if points is None:
        points = record.read_columns(folder)
    notes: list[str] = []
    plan = _plan(folder, run, notes)
    device = run.get("device") if isinstance(run.get("device"), dict) else {}
    planned = {s.name: s for s in plan.steps} if plan is not None else {}
    codes, first = np.unique(points.step_code, return_index=True)
    found = [points.step_names[c] for c in codes[np.argsort(first)]]  # in the order taken
    names = [n for n in planned if n in found] + [n for n in found if n not in planned]
    kinds = {str(s.get("name")): str(s.get("kind", "")) for s in run.get("steps") or []
             if isinstance(s, dict) and s.get("name")}
    steps: dict[str, object] = {}
    columns: dict[str, dict[str, np.ndarray]] = {}
    for name in names:
        mine = points.select(points.step_mask(name))
        steps[name] = planned.get(name) or SimpleNamespace(
            name=name, kind=kinds.get(name) or _guess_kind(mine), ac_level_V=None,
            breakdown_guard_A=None)
        columns[name] = mine.fit_columns()
    if plan is not None:
        temperature, area, name = (plan.device.temperature_K, plan.device.area_m2,
                                   plan.device.name)
    else:
        temperature, area, name = (device.get("temperature_K"), device.get("area_m2"),
                                   device.get("name"))
    if not (isinstance(temperature, (int, float)) and temperature > 0):
        temperature = DEFAULT_TEMPERATURE_K
    if not (isinstance(area, (int, float)) and area > 0):
        area = None
    return RunInputs(steps, columns, float(temperature), area, run_extras(name, run),
                     tuple(notes))


def fit_inputs(inputs: RunInputs, **options):
    """The run's model (`fitmodel.joint_of_columns`: a JointFit, or None when nothing
    can be fitted); ``options`` go to the joint fit (e.g. ibv_A, with_fixture, noise)."""
    from pnbench.sweeps.fitmodel import joint_of_columns

    return joint_of_columns(inputs.steps, inputs.columns, inputs.temperature_K,
                            area_m2=inputs.area_m2, extras=inputs.extras, **options)


def _plan(folder: Path, run: dict, notes: list[str]):
    from pnbench.sweeps.launch import plan_of_run

    try:
        return plan_of_run(folder, run)
    except PnbenchError as exc:
        notes.append(f"the run's plan does not load ({exc}): step kinds from run.json, "
                     "the LCR test level unknown (its distortion is not modelled) and BV "
                     "stated at 1 mA")
        return None


def _guess_kind(points) -> str:
    """A step without a kind anywhere: C-V, else I-V forward or reverse by its bias."""
    kinds = points.kinds().astype(str)
    if kinds.size and kinds[0] == "cv":
        return "cv"
    v = points.voltage_V[np.isfinite(points.voltage_V)]
    return "iv_reverse" if v.size and np.median(v) < 0 else "iv_forward"
