"""The open and the short measured by pnbench itself, as ordinary readings, for software
compensation (``[lcr_correction] apply = "software"``, `sweeps.correction`).

With the fixture open (or shorted) and every output off, the LCR meter reads at each
test level and frequency the plan's C-V and admittance steps use, at 0 V with its DC
bias off, in the reading form its dialect gives (Cp/G, Cs/Rs, ...: `drivers.roles`
turns each into an admittance). Each value is the mean of `readings_for` readings: the
noise of the open and the short becomes a systematic error of every compensated point,
so they are read more often than a point. The table a correction run records
(run.json's ``lcr_correction`` runs, the ``lcr_correction`` event):

    open:  frequency_Hz, ac_level_V, G_S, B_S, C_F (= B/w), G_sd_S, B_sd_S
    short: frequency_Hz, ac_level_V, R_ohm, X_ohm, R_sd_ohm, X_sd_ohm

(``_sd`` the standard error of the mean), with ``measured_by = "pnbench"`` and
``readings``. `modeling.compensation.FixtureResiduals` reads it back, at the test level
of the step it compensates.
"""

from __future__ import annotations

import math

from pnbench.errors import InstrumentError
from pnbench.sweeps.plan import Plan

#: Readings averaged for each value of the open and the short, at least (a step that
#: averages more per point has its open and short averaged as much).
MIN_READINGS = 16


def level_frequency_pairs(plan: Plan) -> list[tuple[float, float]]:
    """Every (test level, frequency) pair of the plan's LCR steps, once, in order of
    level then frequency."""
    return sorted({(float(s.ac_level_V), float(f)) for s in plan.steps
                   if s.instrument == "lcr" for f in s.frequencies_Hz})


def readings_for(plan: Plan) -> int:
    """How many readings each value of the open and the short averages."""
    return max([MIN_READINGS, *(int(s.average) for s in plan.steps
                                if s.instrument == "lcr")])


def measure(lcr, which: str, pairs: list[tuple[float, float]], readings: int,
            check=None) -> dict:
    """Read the open (``which`` "open") or the shorted fixture at every pair; the table
    above. InstrumentError when a reading is not finite (nothing is compensated with
    it). ``check`` (the run's `Control.check`) is called before each pair, so an abort
    stops the readings there (OperatorStop)."""
    import numpy as np  # not at import: `pnbench check` imports sweeps.correction

    rows = []
    level_now = None
    for level, f in pairs:
        if check is not None:
            check()
        if level != level_now:
            lcr.configure(ac_level_V=level)  # DC bias to 0 V and off
            level_now = level
        y = np.array([complex(lcr.apply_and_read(0.0, f).admittance_S)
                      for _ in range(readings)])
        if not np.all(np.isfinite(y)):
            raise InstrumentError(f"the {which} fixture's reading at {f:g} Hz, "
                                  f"{level:g} V is not a number; nothing was compensated")
        rows.append((level, f, y))
    table: dict = {"frequency_Hz": [r[1] for r in rows], "ac_level_V": [r[0] for r in rows],
                   "measured_by": "pnbench", "readings": readings}
    if which == "open":
        g = [_mean_sd(y.real) for _, _, y in rows]
        b = [_mean_sd(y.imag) for _, _, y in rows]
        table.update(G_S=[m for m, _ in g], B_S=[m for m, _ in b],
                     C_F=[m / (2 * math.pi * f) for (m, _), (_, f, _) in zip(b, rows,
                                                                               strict=True)],
                     G_sd_S=[s for _, s in g], B_sd_S=[s for _, s in b])
        return table
    with np.errstate(divide="ignore", invalid="ignore"):
        z = [1.0 / y for _, _, y in rows]
    if not all(np.all(np.isfinite(v)) for v in z):
        raise InstrumentError("a reading of the shorted fixture was zero admittance (an "
                              "open fixture?); nothing was compensated")
    r = [_mean_sd(v.real) for v in z]
    x = [_mean_sd(v.imag) for v in z]
    table.update(R_ohm=[m for m, _ in r], X_ohm=[m for m, _ in x],
                 R_sd_ohm=[s for _, s in r], X_sd_ohm=[s for _, s in x])
    return table


def _mean_sd(values) -> tuple[float, float]:
    import numpy as np

    n = values.size
    sd = float(np.std(values, ddof=1) / math.sqrt(n)) if n > 1 else 0.0
    return float(np.mean(values)), sd
