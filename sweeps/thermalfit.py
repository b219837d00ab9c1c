"""The model of a run over temperature, from its points grouped by stage set point.

Each step of a run over temperature is planned at one set point (``Step.set_point_K``,
see thermalplan.expand_steps). The points of every step at one set point are fitted
together at the temperature the stage measured while they were taken (the mean of their
``temperature_K`` column; the set point when the column is empty), and the set points
together through modeling.fit_temperature: EG, XTI and the coefficients, the values at
TNOM (the set point nearest 300.15 K) and each temperature's own fit in
``extras["temperatures"]``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np


def over_temperature(steps: Mapping) -> bool:
    """Whether any step is planned at a stage set point."""
    return any(getattr(s, "set_point_K", None) is not None for s in steps.values())


def measured_temperature(col: Mapping[str, np.ndarray], set_point_K: float) -> float:
    """The mean of a step's ``temperature_K`` column, else its set point."""
    t = np.asarray(col.get("temperature_K", ()), dtype=float)
    t = t[np.isfinite(t) & (t > 0)]
    return float(np.mean(t)) if t.size else float(set_point_K)


def model_over_temperature(steps: Mapping, columns: Mapping[str, Mapping[str, np.ndarray]],
                           *, area_m2: float | None = None, ibv_A: float | None = None,
                           extras: dict | None = None):
    """The run's ModelSet over temperature (None when nothing can be fitted)."""
    from pnbench.modeling.fit_temperature import fit_over_temperature
    from pnbench.sweeps.fitcorrection import compensated_columns
    from pnbench.sweeps.fitmodel import noise_scale, note_correction
    from pnbench.sweeps.statednoise import fit_noise

    record = (extras or {}).get("lcr_correction")
    columns = compensated_columns(steps, columns, record)
    groups: dict[float, list[tuple[str, Mapping[str, np.ndarray]]]] = {}
    for name, step in steps.items():
        sp = getattr(step, "set_point_K", None)
        col = columns.get(name)
        if sp is None or col is None or not len(col["voltage_V"]):
            continue
        col = {**col, "noise_scale": np.full(len(col["voltage_V"]), noise_scale(step))}
        groups.setdefault(float(sp), []).append((step.kind, col))
    if not groups:
        return None
    sets = []
    for sp, parts in sorted(groups.items()):
        temps = [measured_temperature(col, sp) for _, col in parts]
        weights = [len(col["voltage_V"]) for _, col in parts]
        t = float(np.average(temps, weights=weights)) if sum(weights) else sp
        data: dict[str, dict] = {}
        for kind, col in parts:
            data.setdefault(kind, []).append(col)
        pooled = {kind: cols[0] if len(cols) == 1 else
                  {c: np.concatenate([p[c] for p in cols]) for c in cols[0]}
                  for kind, cols in data.items()}
        sets.append((t if math.isfinite(t) else sp, pooled))
    fit = fit_over_temperature(sets, area_m2=area_m2, ibv_A=ibv_A, extras=extras,
                               noise=fit_noise((extras or {}).get("stated_noise")))
    return note_correction(fit.model, record)
