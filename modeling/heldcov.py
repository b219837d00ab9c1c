"""Carry the uncertainty of held parameters into a fit's covariance.

A fit that holds some parameters (phi) at values another fit found, with covariance
S_phi, returns estimates theta(phi). To first order theta moves with phi as
A = d theta / d phi = -(J_a^T J_a)^-1 J_a^T J_h (J_a, J_h: weighted Jacobians of the
residuals over the free and the held parameters at the optimum), so the covariance of
theta gains A S_phi A^T. The two data sets are independent, so this stacked covariance
equals the one a single least-squares problem over both would give to first order
(the Gauss–Markov argument for two-stage estimation; Seber & Wild, *Nonlinear
Regression*, Wiley 1989, sec. 2.1, from memory).
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import coarse, lsq


def to_t_space(model, t: np.ndarray, held: list[int], cov_values: np.ndarray) -> np.ndarray:
    """A covariance in the units of the values, expressed in the fitted variables t."""
    d = np.array([model.params[j].derivative(t[j]) for j in held], dtype=float)
    cov = np.asarray(cov_values, dtype=float).reshape(len(held), len(held))
    with np.errstate(divide="ignore", invalid="ignore"):
        out = cov / np.outer(d, d)
    return np.where(np.isfinite(out), out, 0.0)


def propagated(model, state: lsq.FitState, x: np.ndarray, y: np.ndarray,
               held: np.ndarray, held_cov_t: np.ndarray) -> np.ndarray | None:
    """A S_phi A^T over the active parameters of ``state`` (t space), or None."""
    idx = np.flatnonzero(state.active)
    if idx.size == 0 or len(held) == 0:
        return None
    both = np.concatenate([idx, np.asarray(held, dtype=int)])
    # J^T J over free and held columns, summed over blocks of rows (a long run's
    # Jacobian is never whole in memory)
    normal = coarse.normal_equations(model, state.t, both, x, y, state.used, state.noise)
    if normal is None:
        return None
    h = normal[0]
    try:
        a = -np.linalg.solve(h[:idx.size, :idx.size], h[:idx.size, idx.size:])
    except np.linalg.LinAlgError:
        return None
    return a @ held_cov_t @ a.T


def held_covariance_t(model, state: lsq.FitState, x, y, fixed: dict[str, float],
                      held_covariance: np.ndarray | None,
                      names: tuple[str, ...]) -> np.ndarray | None:
    """The covariance the held parameters ``names`` (`held_names`: ``held_covariance`` in
    values' units, in that order) carry into the free ones (t space, `propagated`); None
    without any."""
    k = model.index
    held = [k[nm] for nm in held_names(model, fixed, names)]
    if held_covariance is None or not held:
        return None
    return propagated(model, state, x, y, np.array(held),
                      to_t_space(model, state.t, held, held_covariance))


def held_names(model, fixed: dict[str, float], names: tuple[str, ...]) -> list[str]:
    """Those of ``names`` the model holds at a finite value other than none (a held
    uncertainty means something only for them)."""
    k = model.index
    return [nm for nm in names if nm in fixed and nm in k
            and _finite_held(model, k[nm], fixed[nm])]


def _finite_held(model, j: int, value: float) -> bool:
    p = model.params[j]
    return math.isfinite(value) and not (p.optional and p.to_t(value) == p.null)
