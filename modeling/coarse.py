"""Coarse to fine: a long run's fit decided on an even subset, finished on every point.

`lsq.fit` reweights three times and refits after each optional parameter it drops, every
time over every point: on a night's 50 000 C–V points that is tens of Jacobians and
noise estimates at the end of the run. `fit` does the same work on an evenly thinned
subset (every k-th row in the order taken, so every sweep, bias range and frequency stays
represented) and then finishes on every point the way `lsq.fit`'s last stage does: two
reweighting rounds (`lsq._rounds`) from the subset's solution, so the final values, the
noise model and the covariance are those of all the points. The subset's decisions are
checked there too:

* a kept optional parameter that is not Z_KEEP standard errors from its null on every
  point is dropped (the weakest first, then the rounds again), as `lsq.fit` does;
* a dropped one is tried again when a one-step (score) estimate on every point puts it
  more than Z_RETRY standard errors out: with ten times the points a parameter at 2
  sigma on the subset may stand at 6 on the whole; the rounds then run with it and
  Z_KEEP decides.

With no more than 2*MAX_ROWS usable rows it is `lsq.fit` itself. The two agree to a small
fraction of a standard error (`tests/modeling/test_coarse.py`); an optional parameter
within a few tenths of a standard error of Z_KEEP can be decided either way by either.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import blocked, lsq

#: Rows the decisions are made on (the subset's size).
MAX_ROWS = 4000
#: A dropped optional parameter is tried on every point when its one-step estimate is
#: this many standard errors from its null (the keep rule itself is lsq.Z_KEEP).
Z_RETRY = 2.0


def fit(model, x: np.ndarray, y: np.ndarray, eligible: np.ndarray, t0: np.ndarray,
        active: np.ndarray, noise: lsq.Noise | None = None, forced_use: bool = False,
        rounds: int = 3, max_iter: int = 60, max_rows: int | None = None,
        finish: bool = True) -> lsq.FitState:
    """`lsq.fit` with the decisions made on a subset of at most ~max_rows rows
    (MAX_ROWS by default) and the result finished on every row (see the module notes).
    ``finish`` False gives the subset's state itself where there is one: a start or a
    slope to weight by, not a result."""
    max_rows = MAX_ROWS if max_rows is None else max_rows
    rows = int(np.count_nonzero(np.any(eligible, axis=1)))
    if rows <= 2 * max_rows:
        return lsq.fit(model, x, y, eligible, t0, active, noise, forced_use, rounds, max_iter)
    every = math.ceil(rows / max_rows)
    pick = np.flatnonzero(np.any(eligible, axis=1))[::every]
    coarse = lsq.fit(model, x[pick], y[pick], eligible[pick], t0, active,
                     rows_of(noise, pick), forced_use, rounds, max_iter)
    if not finish:
        return coarse
    estimate = noise is None or noise.estimated
    with np.errstate(all="ignore"):  # every row: model values in blocks of rows
        return _finish(blocked.InBlocks(model), x, y, eligible, coarse,
                       np.asarray(active, dtype=bool),
                       forced_use, estimate, max_iter,
                       coarse.noise if estimate else noise)


def rows_of(noise: lsq.Noise | None, rows) -> lsq.Noise | None:
    """A noise model for some of the fit's rows: a stated noise's per-row parts taken at
    those rows (`Noise.take`)."""
    return None if noise is None else noise.take(rows)


def _finish(model, x, y, eligible, coarse: lsq.FitState, asked: np.ndarray, forced: bool,
            estimate: bool, max_iter: int, noise: lsq.Noise) -> lsq.FitState:
    def rounds(t, active, noise, n=2):
        return lsq._rounds(model, x, y, eligible, t, active, noise, forced, n, estimate,
                           max_iter)

    state = rounds(coarse.t.copy(), coarse.active.copy(), noise)
    # the subset's drops, in the order it made them (its notes give the reasons)
    order = {_reason(model.params[k]): k for k in range(len(model.params))}
    dropped = [order[n] for n in coarse.notes if n in order and asked[order[n]]
               and not state.active[order[n]]]
    tried: set[int] = set()
    while True:
        weak = {k: z for k, z in lsq.significance(model, state).items() if z < lsq.Z_KEEP}
        if weak:
            k = min(weak, key=weak.get)
            state = _without(model, state, k, rounds)
            dropped.append(k)
            tried.add(k)
            continue
        back = [k for k in _worth_trying(model, state, x, y, dropped) if k not in tried]
        if not back:
            break
        k = back[0]
        tried.add(k)
        active = state.active.copy()
        active[k] = True
        # the noise model as lsq.fit starts it: the state's was read from residuals
        # without this parameter, which it would have absorbed
        start = lsq.initial_noise(model, y, eligible) if estimate else state.noise
        trial = rounds(state.t.copy(), active, start, 3)
        if lsq.significance(model, trial).get(k, 0.0) >= lsq.Z_KEEP:
            state = trial
            dropped.remove(k)
    state.notes = [_reason(model.params[k]) for k in dropped]
    return state


def _without(model, state: lsq.FitState, k: int, rounds) -> lsq.FitState:
    active = state.active.copy()
    active[k] = False
    t = state.t.copy()
    t[k] = model.params[k].null
    return rounds(t, active, state.noise)


def _reason(p: lsq.Param) -> str:
    return p.absent_reason or f"{p.name} not determined by the data"


def _worth_trying(model, state: lsq.FitState, x, y, dropped: list[int]) -> list[int]:
    """Dropped optional parameters whose one-step estimate from the state, on every
    point, stands Z_RETRY standard errors from the null (strongest first)."""
    if not dropped:
        return []
    idx = np.flatnonzero(state.active)
    both = np.concatenate([idx, np.asarray(dropped, dtype=int)])
    normal = normal_equations(model, state.t, both, x, y, state.used, state.noise)
    if normal is None:
        return []
    h_all, g_all = normal
    s2 = state.chi2 / state.dof if state.dof > 0 else math.inf
    if not state.noise.estimated:
        s2 = max(s2, 1.0)
    scores = {}
    for j, k in enumerate(dropped):
        cols = np.concatenate([np.arange(idx.size), [idx.size + j]])
        h, g = h_all[np.ix_(cols, cols)], g_all[cols]
        d = np.sqrt(np.maximum(np.diag(h), 1e-300))
        try:
            inv = np.linalg.inv(h / np.outer(d, d)) / np.outer(d, d)
        except np.linalg.LinAlgError:
            continue
        step, var = -(inv @ g)[-1], s2 * inv[-1, -1]
        if var > 0 and math.isfinite(var):
            z = abs(state.t[k] + step - model.params[k].null) / math.sqrt(var)
            if z >= Z_RETRY:
                scores[k] = z
    return sorted(scores, key=scores.get, reverse=True)


def normal_equations(model, t, idx, x, y, use, noise):
    """(J^T J, J^T r) of the weighted rows over t[idx], summed over blocks of rows by
    `blocked.normal_sums` (a long run's Jacobian is never whole in memory); None where
    it is not finite."""
    with np.errstate(all="ignore"):
        h, g, _ = blocked.normal_sums(model, t, idx, x, y, use, noise)
    if not (np.all(np.isfinite(h)) and np.all(np.isfinite(g))):
        return None
    return h, g
