"""Weighted nonlinear least squares shared by every fitter (pure numpy/scipy).

A *model* names its parameters (``Param``: how the fitted variable t maps to the
model-card value, bounds, whether the data may leave it undetermined) and its measured
*channels* (``"log"``: residual in the logarithm, for currents and conductances that span
decades; ``"lin"``: plain residual, for capacitances). Each channel has a noise model

    sigma = sqrt((rel * y)**2 + floor**2)        (percent of reading plus a floor)

either given by the caller or estimated from the residuals (iteratively reweighted).
Residuals are divided by sigma, so for Gaussian noise of that size the weighted sum of
squares is a chi-square and cov = s**2 (J^T W J)^-1 is the Cramér–Rao bound at the
optimum (docs/physics.md §9; Kay, Estimation Theory, 1993, ch. 3). Points whose model
value lies below ``FLOOR_FACTOR`` times the floor carry almost no information and are
left out of log channels (the log of a reading at the floor is meaningless); the choice
uses the model value, not the reading, so it does not bias the fit.

The solver is a small Levenberg–Marquardt with Marquardt scaling and bounds by
projection: a handful of parameters, many points, no scipy call overhead.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from pnbench.modeling import fitnoise
from pnbench.modeling.blocked import normal_sums, residual_sum, weighted_rows  # noqa: F401
from pnbench.modeling.fitnoise import FLOOR_FACTOR, Noise, estimate_noise, initial_noise
from pnbench.modeling.fitresult import FitResult, correlation_from_covariance

#: An optional parameter is kept only when it is this many sigmas away from its null.
Z_KEEP = 3.0


@dataclass(frozen=True)
class Param:
    """One fitted parameter: the model-card ``name`` and how t maps to its value.

    scale "log": value = exp(t); "lin": value = t; "inv": value = 1/t (a resistance fitted
    as a conductance, so "no shunt" is t = 0). ``optional`` parameters are dropped, with
    ``absent_reason`` in the message, when the data do not set them apart from ``null``.
    """

    name: str
    scale: str = "lin"
    lower: float = -math.inf
    upper: float = math.inf
    optional: bool = False
    null: float = 0.0
    absent_reason: str = ""
    step: float = 1e-6  # smallest step in t for numeric derivatives

    def value(self, t: float) -> float:
        if self.scale == "log":
            return math.exp(t)
        if self.scale == "inv":
            return math.inf if t == 0 else 1.0 / t
        return t

    def derivative(self, t: float) -> float:
        """d value / d t."""
        if self.scale == "log":
            return math.exp(t)
        if self.scale == "inv":
            return -math.inf if t == 0 else -1.0 / t**2
        return 1.0

    def to_t(self, value: float) -> float:
        if self.scale == "log":
            return math.log(value)
        if self.scale == "inv":
            return 0.0 if math.isinf(value) else 1.0 / value
        return float(value)


class Model(Protocol):
    params: tuple[Param, ...]
    channels: tuple[str, ...]

    def predict(self, t: np.ndarray, x: np.ndarray,
                active: np.ndarray | None) -> tuple[np.ndarray, np.ndarray | None]:
        """Model values (m, C) at conditions x (m, d), and d values / d t[active]
        (m, C, k) when ``active`` (index array) is given."""


@dataclass
class FitState:
    """Where a fit stands: the full t vector, which parameters are active, the noise
    model, the rows used (m, C) and the normal equations at t."""

    t: np.ndarray
    active: np.ndarray
    noise: Noise
    used: np.ndarray
    hessian: np.ndarray
    gradient: np.ndarray
    chi2: float
    n_rows: int
    converged: bool = True
    notes: list[str] = field(default_factory=list)

    @property
    def dof(self) -> int:
        return self.n_rows - int(np.count_nonzero(self.active))


def numeric_jacobian(f, t: np.ndarray, active: np.ndarray, x: np.ndarray,
                     y0: np.ndarray, params: tuple[Param, ...],
                     rel_step: float = 1e-6) -> np.ndarray:
    """Forward differences of f(t, x) -> (m, C) over t[active] -> (m, C, k)."""
    jac = np.empty(y0.shape + (len(active),))
    for col, k in enumerate(active):
        h = max(rel_step * abs(t[k]), params[k].step)
        if t[k] + h > params[k].upper:
            h = -h
        tk = t.copy()
        tk[k] += h
        jac[..., col] = (f(tk, x) - y0) / h
    return jac


def _solve_scaled(h: np.ndarray, g: np.ndarray, lam: float) -> np.ndarray:
    d = np.sqrt(np.maximum(np.diag(h), 1e-300))
    hs = h / np.outer(d, d) + lam * np.eye(len(d))
    try:
        return -np.linalg.solve(hs, g / d) / d
    except np.linalg.LinAlgError:
        return -(np.linalg.lstsq(hs, g / d, rcond=None)[0]) / d


def levenberg(model: Model, t0: np.ndarray, active: np.ndarray, x: np.ndarray,
              y: np.ndarray, use: np.ndarray, noise: Noise, max_iter: int = 60,
              yhat_ref: np.ndarray | None = None):
    """Minimize the weighted sum of squares over t[active] from t0.

    Returns (t, H, g, chi2, converged) with H = J^T J and g = J^T r at the result. The
    normal equations are summed over blocks of rows (`blocked`) and a trial step needs
    only its residuals, so a long run's Jacobian is never whole in memory.
    """
    idx = np.flatnonzero(active)
    lower = np.array([model.params[k].lower for k in idx])
    upper = np.array([model.params[k].upper for k in idx])
    t = t0.astype(float).copy()
    t[idx] = np.clip(t[idx], lower, upper)
    h, g, chi2 = normal_sums(model, t, idx, x, y, use, noise, yhat_ref)
    lam = 1e-3
    converged = False
    for _ in range(max_iter):
        if not (np.all(np.isfinite(h)) and np.all(np.isfinite(g))):
            converged = False  # the data overwhelm double precision here: stop, say so
            break
        # a parameter on a bound that the gradient pushes outward stays put this step
        free = ~(((t[idx] <= lower) & (g > 0)) | ((t[idx] >= upper) & (g < 0)))
        improved = False
        while lam < 1e12:
            step = np.zeros(len(idx))
            if np.any(free):
                step[free] = _solve_scaled(h[np.ix_(free, free)], g[free], lam)
            if not np.all(np.isfinite(step)):
                lam *= 6.0
                continue
            t_new = t.copy()
            t_new[idx] = np.clip(t[idx] + step, lower, upper)
            try:
                with np.errstate(over="ignore", invalid="ignore"):
                    chi2_new = residual_sum(model, t_new, idx, x, y, use, noise, yhat_ref)
                if np.isfinite(chi2_new) and chi2_new <= chi2:
                    h_new, g_new, _ = normal_sums(model, t_new, idx, x, y, use, noise,
                                                  yhat_ref)
            except (ValueError, ArithmeticError):  # a trial point the model cannot take
                lam *= 6.0
                continue
            if np.isfinite(chi2_new) and chi2_new <= chi2:
                actual = t_new[idx] - t[idx]
                gain = float(actual @ h @ actual)
                t, h, g = t_new, h_new, g_new
                drop = chi2 - chi2_new
                chi2 = chi2_new
                lam = max(lam / 5.0, 1e-12)
                improved = True
                if drop <= 1e-12 * chi2 + 1e-300 or gain <= 1e-12 * max(chi2, 1.0):
                    converged = True
                break
            lam *= 6.0
        if not improved:
            converged = True  # no step lowers chi2: a (bounded) minimum
            break
        if converged:
            break
    return t, h, g, chi2, converged


def usable_rows(model: Model, y: np.ndarray, yhat: np.ndarray, eligible: np.ndarray,
                noise: Noise, forced: bool = False) -> np.ndarray:
    """Rows a fit may use: eligible, and for log channels above the measurement floor."""
    use = eligible & np.isfinite(y)
    for c, kind in enumerate(model.channels):
        if kind == "log":
            use[:, c] &= y[:, c] > 0
            if not forced:
                use[:, c] &= yhat[:, c] > FLOOR_FACTOR * noise.floor[c]
    return use


def covariance_t(state: FitState) -> np.ndarray:
    """s**2 H^-1 over the active parameters (s**2 = reduced chi-square); inf if singular."""
    h = state.hessian
    k = h.shape[0]
    if k == 0:
        return np.zeros((0, 0))
    if not np.all(np.isfinite(h)):
        return np.full((k, k), math.inf)
    d = np.sqrt(np.maximum(np.diag(h), 1e-300))
    hs = h / np.outer(d, d)
    w, v = np.linalg.eigh(hs)
    s2 = state.chi2 / state.dof if state.dof > 0 else math.inf
    if not state.noise.estimated and math.isfinite(s2):
        s2 = max(s2, 1.0)  # a stated noise sets the scale; worse residuals widen it
    if w[0] <= 1e-13 * max(w[-1], 1e-300) or not math.isfinite(s2):
        cov = np.full((k, k), math.inf)
        if w[0] > 0 and math.isfinite(s2):
            with np.errstate(over="ignore", invalid="ignore"):
                inv = (v / w) @ v.T / np.outer(d, d)
            cov = np.where(np.isfinite(inv), s2 * inv, math.inf)
            cov[:, w.argmin()] = math.inf
        return cov
    return s2 * ((v / w) @ v.T) / np.outer(d, d)


def significance(model: Model, state: FitState) -> dict[int, float]:
    """|t - null|/sigma_t of every active optional parameter (0 when undetermined)."""
    idx = np.flatnonzero(state.active)
    cov = covariance_t(state)
    out = {}
    for j, k in enumerate(idx):
        p = model.params[k]
        if not p.optional:
            continue
        if cov[j, j] == 0.0 and state.chi2 == 0.0:  # through every reading exactly (data
            # computed by this model): set exactly, not undetermined, unless at none
            out[int(k)] = math.inf if state.t[k] != p.null else 0.0
            continue
        sd = math.sqrt(cov[j, j]) if np.isfinite(cov[j, j]) and cov[j, j] > 0 else math.inf
        out[int(k)] = abs(state.t[k] - p.null) / sd if math.isfinite(sd) else 0.0
    return out


def fit(model: Model, x: np.ndarray, y: np.ndarray, eligible: np.ndarray, t0: np.ndarray,
        active: np.ndarray, noise: Noise | None = None, forced_use: bool = False,
        rounds: int = 3, max_iter: int = 60) -> FitState:
    """Reweighted fit with selection of the optional parameters the data determine.

    Floating-point warnings from trial points far from the data are expected and
    handled (such steps are rejected), so they are silenced here.
    """
    with np.errstate(all="ignore"):
        return _fit(model, x, y, eligible, t0, active, noise, forced_use, rounds, max_iter)


def _fit(model, x, y, eligible, t0, active, noise, forced_use, rounds, max_iter):
    estimate = noise is None or noise.estimated
    if noise is None:
        noise = initial_noise(model, y, eligible)
    t, active = t0.astype(float).copy(), active.copy()
    notes: list[str] = []
    state = _rounds(model, x, y, eligible, t, active, noise, forced_use, rounds, estimate,
                    max_iter)
    while True:
        z = significance(model, state)
        weak = {k: v for k, v in z.items() if v < Z_KEEP}
        if not weak:
            break
        k = min(weak, key=weak.get)
        p = model.params[k]
        notes.append(p.absent_reason or f"{p.name} not determined by the data")
        active = state.active.copy()
        active[k] = False
        t = state.t.copy()
        t[k] = p.null
        state = _rounds(model, x, y, eligible, t, active, state.noise, forced_use,
                        max(2, rounds - 1), estimate, max_iter)
    state.notes = notes + state.notes
    return state


def _rounds(model, x, y, eligible, t, active, noise, forced, rounds, estimate, max_iter):
    yhat, _ = model.predict(t, x, None)
    converged = True
    for i in range(rounds):
        use = usable_rows(model, y, yhat, eligible, noise, forced)
        t, h, g, chi2, converged = levenberg(model, t, active, x, y, use, noise, max_iter,
                                             yhat_ref=yhat)
        yhat, _ = model.predict(t, x, None)
        if not estimate or i == rounds - 1:
            break
        noise = estimate_noise(model, y, yhat, eligible, noise,
                               leverage=leverages_at(model, t, x, y, use, active, noise))
    # final normal equations with weights at the solution
    use = usable_rows(model, y, yhat, eligible, noise, forced)
    idx = np.flatnonzero(active)
    h, g, chi2 = normal_sums(model, t, idx, x, y, use, noise)
    return FitState(t=t, active=active, noise=noise, used=use, hessian=h, gradient=g,
                    chi2=chi2, n_rows=int(use.sum()), converged=converged)


def leverages_at(model, t, x, y, use, active, noise) -> np.ndarray | None:
    """The leverage of every used row at t (``fitnoise.leverages``), for the noise
    estimate; None for fits of more than ``fitnoise.LEVERAGE_ROWS`` rows."""
    if use.sum() > fitnoise.LEVERAGE_ROWS:
        return None
    _, jac, _ = weighted_rows(model, t, np.flatnonzero(active), x, y, use, noise)
    return fitnoise.leverages(jac, use)


def at_bounds(model: Model, state: FitState) -> list[str]:
    """Names of required active parameters sitting on a bound (a fit gone astray)."""
    return [model.params[k].name for k in np.flatnonzero(state.active)
            if not model.params[k].optional
            and (state.t[k] <= model.params[k].lower or state.t[k] >= model.params[k].upper)]


def healthy(model: Model, state: FitState) -> bool:
    """A state fit to warm-start from: converged, nothing required on a bound."""
    return bool(state.converged and state.dof > 0 and not at_bounds(model, state))


def to_result(model, state: FitState, kind: str, n_points: int,
              extras: dict | None = None, min_rows: int = 4, *, x: np.ndarray | None = None,
              y: np.ndarray | None = None,
              extra_cov_t: np.ndarray | None = None, verdict=None) -> FitResult:
    """The FitResult of a finished least-squares state (values in SI, not t).

    With the data ``x``, ``y`` the lack-of-fit checks of ``misfit`` run and a misfit
    shows in the message (sigmas inflated, marked lower bounds); ``extra_cov_t`` adds
    the covariance carried in from held parameters (``heldcov``); a ``verdict`` the
    caller already has (a live stream's, `lsqstream`) is used as it is.
    """
    from pnbench.modeling import misfit

    idx = np.flatnonzero(state.active)
    cov_t = covariance_t(state)
    if extra_cov_t is not None and extra_cov_t.shape == cov_t.shape:
        cov_t = cov_t + np.where(np.isfinite(extra_cov_t), extra_cov_t, 0.0)
    if verdict is None:
        verdict = misfit.assess(model, state, x, y) if x is not None and y is not None \
            else misfit.Verdict()
    cov_t = cov_t * verdict.inflation**2
    d = np.array([model.params[k].derivative(state.t[k]) for k in idx])
    cov = cov_t * np.outer(d, d)
    names = tuple(model.params[k].name for k in idx)
    values = {model.params[k].name: model.params[k].value(state.t[k]) for k in idx}
    sig = np.sqrt(np.where(np.isfinite(np.diag(cov)), np.diag(cov), math.inf))
    sigmas = dict(zip(names, sig, strict=True))
    cor = correlation_from_covariance(np.where(np.isfinite(cov), cov, 0.0))
    ok = state.n_rows >= min_rows and state.dof > 0 and bool(np.all(np.isfinite(sig)))
    red = state.chi2 / state.dof if state.dof > 0 else math.nan
    parts = [f"{' '.join(names)} from {int(state.used.any(axis=1).sum())} of "
             f"{n_points} points" if ok else "fit failed: the data do not determine "
             f"{' '.join(n for n, s in sigmas.items() if not math.isfinite(s)) or 'it'}"]
    parts += state.notes
    parts += state.noise.notes
    parts += verdict.notes
    if not state.converged:
        parts.append("the solver stopped before converging")
    at_bound = at_bounds(model, state)
    if at_bound:
        parts.append(f"{', '.join(at_bound)} at the edge of the allowed range")
        ok = False
    # every active parameter on a bound (optional ones too): a value the bounds chose
    edge = [model.params[k].name for k in idx
            if state.t[k] <= model.params[k].lower or state.t[k] >= model.params[k].upper]
    noise_extras: dict = {"at_bound": edge} if edge else {}
    if verdict.figures:
        noise_extras["lack_of_fit"] = {**verdict.figures, "misfit": verdict.misfit,
                                       "sigma_inflation": verdict.inflation}
    for c, ch in enumerate(model.channels):
        key = f"noise_{c}" if len(model.channels) > 1 else "noise"
        noise_extras[key] = {"relative": state.noise.rel[c], "floor": state.noise.floor[c],
                             "estimated": state.noise.estimated, "channel": ch}
    return FitResult(
        kind=kind, names=names, values=values, sigmas=sigmas, covariance=cov,
        correlation=cor, used=state.used.any(axis=1), n_points=n_points, reduced_chi2=red,
        success=ok, message="; ".join(parts), extras={**noise_extras, **(extras or {})},
    )
