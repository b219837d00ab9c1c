"""Data without noise: the digits the numbers carry, and residuals no instrument makes.

A fit's noise is estimated from its residuals, and its lack-of-fit tests read them. Data
computed by a simulator and written to a file have no noise: their residuals are the
rounding of the digits written, plus whatever the model and the simulator compute
differently. Both can sit far below anything a bench resolves, and there the tests
answer another question than the one an engineer asks. On clean ngspice data of a
diode (12 significant digits) the residuals were ~1e-12 of the readings where the model
is the simulator's, and ~1e-9 where it is not quite: ngspice computes the diffusion
capacitance as TT*(gd + GMIN), a constant TT*GMIN (5e-21 F for TT = 5 ns) that the
3-sigma rule kept as a fixture capacitance; a C-V fit without RS misses the (w*RS*C)**2
of the parallel C (~1e-8), which the runs test read as a misfit.

So a fit whose residuals are (``assess``)

* at the rounding of the digits its readings carry (their rms within AT_ROUNDING times
  that of the rounding), or
* typically below RESOLUTION of the readings: no SMU or LCR meter reads a current or a
  capacitance to a tenth of a part per million,

says so plainly instead of judging the model by them (`misfit.assess`), and a fixture
term that changes no reading by RESOLUTION of it is not kept (`drop_unresolved`): it is
not the bench's. Noisy data never qualify (their residuals are the noise, 1e-5 of the
readings and more), so nothing changes for them.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: Relative size of residuals (rms) below which no bench instrument produced the data.
RESOLUTION = 1e-7
#: Residuals within this factor of the rounding's rms are the rounding (pure rounding
#: gives ~1; noise as large as the rounding gives ~1.4).
AT_ROUNDING = 2.0
#: Values read to find the digits, and rows to measure the residuals on (evenly spread).
DIGIT_SAMPLE = 500
RESIDUAL_ROWS = 20_000
#: A double carries 17 significant digits; from 15 on the rounding (<1e-14) is below
#: anything the checks compare it with, and the digits are not counted further.
MAX_DIGITS = 17
FULL_DIGITS = 15
#: Median of |Gaussian| over its rms.
_GAUSS = 1.4826


def significant_digits(values) -> int:
    """The fewest significant digits that reproduce every (sampled) finite non-zero value
    exactly, i.e. how many the writer of the numbers used (17: full double precision)."""
    v = np.asarray(values, dtype=float).ravel()
    v = v[np.isfinite(v) & (v != 0)]
    if v.size == 0:
        return MAX_DIGITS
    v = v[:: max(1, v.size // DIGIT_SAMPLE)]
    need = 1
    for x in v.tolist():
        d = need
        while d < MAX_DIGITS and float(f"{x:.{d - 1}e}") != x:
            d += 1
        need = d
        if need >= FULL_DIGITS:
            break
    return need


def rounding_unit(values, digits: int) -> np.ndarray:
    """The unit of the last of ``digits`` significant digits of each value (0 for 0)."""
    v = np.abs(np.asarray(values, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        unit = 10.0 ** (np.floor(np.log10(v)) - digits + 1)
    return np.where(np.isfinite(unit) & (v > 0), unit, 0.0)


@dataclass(frozen=True)
class NoiseFree:
    """Residuals of a fit to data without noise: their relative rms, the rounding's rms
    of the digits the readings carry, and which of the two cases applies."""

    digits: int
    #: typical relative residual and rounding (medians, scaled as rms)
    residual: float
    rounding: float
    #: rms of each residual over its rounding's rms
    ratio: float

    @property
    def at_rounding(self) -> bool:
        return self.ratio <= AT_ROUNDING

    def statement(self, runs_z: float | None = None) -> str:
        """The fit message's plain statement (``runs_z``: the runs test's z, said when
        it would have read the residuals as a misfit)."""
        tests = "the chi-square, the runs test and the sigmas"
        if self.at_rounding:
            written = (f"rounded to {self.digits} significant digits"
                       if self.digits < FULL_DIGITS else "exact to double precision")
            return (f"the data look noise-free, {written}: "
                    f"the residuals ({self.residual:.2g} of the readings, typically) are "
                    f"that rounding (their rms {self.ratio:.2g} times its own), so {tests} "
                    f"describe the rounding, not the model")
        rounding = (f", above the rounding of {self.digits} significant digits"
                    if self.digits < FULL_DIGITS else "")
        runs = (f"; the runs test's z = {runs_z:.1f} is not read as a misfit"
                if runs_z is not None else "")
        return (f"the data look computed, not measured: the residuals ({self.residual:.2g} "
                f"of the readings, typically{rounding}) are below any instrument's "
                f"resolution ({RESOLUTION:g}), where the model and the simulator that "
                f"computed the data need not agree (in their physical constants, or a "
                f"simulator's GMIN: ngspice adds TT*GMIN to the diffusion capacitance), so "
                f"{tests} describe that difference, not a measurement{runs}")

    def figures(self) -> dict:
        return {"significant_digits": self.digits, "relative_residual": self.residual,
                "relative_rounding": self.rounding, "residual_over_rounding": self.ratio,
                "at_rounding": self.at_rounding}


def _rows(state) -> np.ndarray:
    rows = np.flatnonzero(state.used.any(axis=1))
    return rows[:: max(1, rows.size // RESIDUAL_ROWS)]


def assess(model, state, x: np.ndarray, y: np.ndarray) -> NoiseFree | None:
    """The fit's residuals against the rounding of the digits its numbers carry and
    RESOLUTION (see the module notes); None for data with noise (or a fit whose noise
    was stated).

    The digits are those of the readings (the fewest over the channels), as the model
    gives them back from its channels (``model.readings(x, y)``, where a channel is
    computed from them; else the channels are the readings). The bias written beside
    them is taken as rounded to as many: its rounding reaches the reading through the
    model's slope (an I-V point's current moves by dI/dV times it: 40 times the
    voltage's relative rounding at 1 V and N = 1). Its own digits are not read, as a
    set point is often a round number that no rounding made.
    """
    if not state.noise.estimated:
        return None
    rows = _rows(state)
    if rows.size == 0:
        return None
    used, xr, yr = state.used[rows], x[rows], y[rows]
    read = getattr(model, "readings", None)
    with np.errstate(all="ignore"):
        yread = read(xr, yr) if read is not None else yr
    ok = used & np.isfinite(yr) & (yr != 0) & np.isfinite(yread) & (yread != 0)
    if not ok.any():
        return None
    digits = min(significant_digits(yread[ok[:, c], c]) for c in range(yr.shape[1])
                 if ok[:, c].any())
    with np.errstate(all="ignore"):
        yhat = model.predict(state.t, xr, None)[0]
        scale = np.abs(yr)
        rel = (yhat - yr) / scale
    # typical sizes (medians, as rms for Gaussian scatter): a few readings near an
    # absolute floor (a current of tens of pA) do not speak for the rest
    residual = _GAUSS * float(np.median(np.abs(rel[ok])))
    if digits >= FULL_DIGITS and not residual < RESOLUTION:
        return None  # noisy readings at full precision: the common case, decided cheaply
    with np.errstate(all="ignore"):
        h = 1e-6 * np.maximum(np.abs(xr[:, 0]), 1e-3)
        shifted = xr.copy()
        shifted[:, 0] += h
        slope = (model.predict(state.t, shifted, None)[0] - yhat) / h[:, None]
        ux = rounding_unit(xr[:, 0], digits)[:, None]
        q2 = ((rounding_unit(yread, digits) / np.abs(yread)) ** 2
              + (slope * ux / scale) ** 2) / 12.0
    rel, q = rel[ok], np.sqrt(q2[ok])
    if not (np.all(np.isfinite(rel)) and np.all(np.isfinite(q))):
        return None
    with np.errstate(all="ignore"):
        ratio = float(np.sqrt(np.mean((rel / q) ** 2))) if np.all(q > 0) else math.inf
    out = NoiseFree(digits, residual, float(np.median(q)), ratio)
    return out if out.at_rounding or out.residual < RESOLUTION else None


def effect(model, state, x: np.ndarray, name: str) -> float:
    """The largest relative change of a used reading's model value when the parameter
    ``name`` is set to its null (none)."""
    k = [p.name for p in model.params].index(name)
    rows = _rows(state)
    t0 = state.t.copy()
    t0[k] = model.params[k].null
    with np.errstate(all="ignore"):
        a = model.predict(state.t, x[rows], None)[0]
        b = model.predict(t0, x[rows], None)[0]
        d = np.abs(a - b) / np.abs(a)
    d = d[state.used[rows] & np.isfinite(d)]
    return float(d.max()) if d.size else 0.0


def drop_unresolved(model, state, x: np.ndarray, y: np.ndarray, names,
                    refit: Callable) -> object:
    """``state`` without the optional parameters among ``names`` (the bench's fixture
    terms) that change no reading by RESOLUTION of it, on data without noise
    (`assess`); ``refit(t, active)`` fits again without them. The reason is put in the
    state's notes, after those of the first fit."""
    if assess(model, state, x, y) is None:
        return state
    k = {p.name: j for j, p in enumerate(model.params)}
    drop = []
    for name in names:
        j = k.get(name)
        if j is None or not state.active[j] or not model.params[j].optional:
            continue
        size = effect(model, state, x, name)
        if size < RESOLUTION:
            drop.append((j, size))
    if not drop:
        return state
    t, active = state.t.copy(), state.active.copy()
    notes = list(state.notes)
    for j, size in drop:
        p = model.params[j]
        unit = {"CFIX": " F", "RFIX": " ohm"}.get(p.name, "")
        notes.append(f"{p.name} = {p.value(state.t[j]):.3g}{unit} not kept: it changes no reading "
                     f"by more than {size:.2g} of it, below any meter's resolution, so it "
                     f"is not the bench's (on data this precise a simulator's own terms show "
                     f"at that level)")
        t[j], active[j] = p.null, False
    new = refit(t, active)
    new.notes = notes + list(new.notes)
    return new


def readmit(model, state, x: np.ndarray, y: np.ndarray, left: np.ndarray,
            refit: Callable) -> object:
    """``state`` with the points ``left`` out (a forward cut, lowest bias first) taken
    back while the model misses each by less than RESOLUTION of the reading, on data
    without noise (`assess`): there the cut's z test compares a departure of 1e-9 (the
    diffusion capacitance at a few tens of mV) with residuals of 1e-12 and leaves out
    points no meter could tell from the curve. ``refit(eligible)`` fits again over the
    rows ``eligible`` (m, channels)."""
    rows = np.flatnonzero(left)
    if rows.size == 0 or assess(model, state, x, y) is None:
        return state
    rows = rows[np.argsort(x[rows, 0], kind="stable")]
    with np.errstate(all="ignore"):
        yhat = model.predict(state.t, x[rows], None)[0][:, 0]
        miss = np.abs(yhat - y[rows, 0]) / np.abs(y[rows, 0])
    bad = np.flatnonzero(~(miss < RESOLUTION))
    take = rows if bad.size == 0 else rows[: bad[0]]
    if take.size == 0:
        return state
    eligible = state.used.copy()
    eligible[take, 0] = True
    new = refit(eligible)
    new.notes = list(state.notes) + list(new.notes)
    return new

