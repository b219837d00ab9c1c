"""C–V and admittance fits: CJO, VJ, M (and a fixture capacitance), and TT with IS, N, RS.

* ``fit_cv``: the depletion capacitance Cj(V) = CJO/(1 - V/VJ)**M (with the simulator's
  linear continuation above FC*VJ, docs/physics.md §4) fitted to reverse and low-forward
  points. Forward points are taken in, lowest bias first, only while they agree with
  the depletion curve extrapolated from the points before them (to within four standard
  errors of the prediction and the noise), so the diffusion capacitance never biases it.
* ``fit_admittance``: the whole small-signal model of docs/physics.md §4, RS in series with
  gd + 1/RSH + j*w*(Cj + TT*gd), fitted in complex admittance: the capacitance channel
  (Im Y / w) and the conductance channel (Re Y, residuals in its logarithm, forward
  points only) together. The conductance against bias carries IS, N and RS, so C–V data
  alone yield TT; with an I–V fit at hand those can be held (``fixed``).

The models both fit (`DepletionModel`, `AdmittanceModel`) live in `cvmodels`; the
Mott–Schottky doping of a run in `mottschottky`.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import lsq, precision
from pnbench.modeling.cvmodels import (
    CFIX_ABSENT,
    AdmittanceModel,
    DepletionModel,
    held_extras,
)
from pnbench.modeling.fit_iv import start_values as iv_start_values
from pnbench.modeling.fitresult import FitResult, empty_result
from pnbench.modeling.junction import thermal_voltage
from pnbench.modeling.meternoise import meter_rows_noise
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: the models, for callers that import them from here
__all__ = ["CFIX_ABSENT", "MIN_CV_POINTS", "Z_ACCEPT", "AdmittanceModel", "DepletionModel",
           "admittance_state", "cv_arrays", "depletion_start", "depletion_state",
           "fit_admittance", "fit_cv", "fit_cv_data", "held_extras"]

MIN_CV_POINTS = 4
#: Forward points join a depletion fit while within this many standard errors.
Z_ACCEPT = 4.0
#: Points a start-value scan reads at most (40 straight-line fits over half a million
#: reverse points took a second of a night's final fit).
START_ROWS = 8000
_TINY_IS = 1e-30


def depletion_start(v: np.ndarray, c: np.ndarray, fc: float = 0.5) -> np.ndarray:
    """(ln CJO, VJ, M) from a scan over VJ of straight lines ln C = ln CJO - M ln(1-V/VJ)
    (of more than START_ROWS points, an even subset: start values of a night's run)."""
    if v.size > START_ROWS:
        every = math.ceil(v.size / START_ROWS)
        v, c = v[::every], c[::every]
    best = None
    for vj in np.geomspace(0.1, 3.0, 40):
        sel = v < fc * vj
        if np.count_nonzero(sel) < 3:
            continue
        xx = np.log1p(-v[sel] / vj)
        yy = np.log(c[sel])
        if np.ptp(xx) <= 0:
            continue
        m, lnc = np.polyfit(xx, yy, 1)
        rms = float(np.sqrt(np.mean((lnc + m * xx - yy) ** 2)))
        score = rms - 1e-3 * np.count_nonzero(sel) / sel.size  # prefer covering more points
        if -m > 0 and (best is None or score < best[0]):
            best = (score, lnc, vj, -m)
    if best is None:
        c0 = float(np.interp(0.0, np.sort(v), c[np.argsort(v)]))
        return np.array([math.log(max(c0, 1e-18)), 0.7, 0.4])
    return np.array([best[1], best[2], float(np.clip(best[3], 0.02, 2.5))])


def _prediction_z(model, state: lsq.FitState, x, y) -> np.ndarray:
    """Standardized residual of points not in the fit: noise plus prediction error."""
    idx = np.flatnonzero(state.active)
    yhat, jac = model.predict(state.t, x, idx)
    cov = lsq.covariance_t(state)
    jac = jac[:, 0, :]
    var_pred = np.einsum("ij,jk,ik->i", jac, np.where(np.isfinite(cov), cov, 0.0), jac)
    var = state.noise.sigma(np.abs(yhat))[:, 0] ** 2 + np.maximum(var_pred, 0.0)
    return (y[:, 0] - yhat[:, 0]) / np.sqrt(np.maximum(var, 1e-300))


def depletion_state(model: DepletionModel, x, y, elig, start=None, noise=None):
    """Fit Cj(V) to the depletion region; the forward cut is chosen by agreement."""
    v = x[:, 0]
    ok = elig[:, 0] & np.isfinite(y[:, 0]) & (y[:, 0] > 0)
    if np.count_nonzero(ok) < MIN_CV_POINTS:
        return f"too few C-V points ({np.count_nonzero(ok)}; need {MIN_CV_POINTS})"
    accepted = ok & (v <= 0)
    if np.count_nonzero(accepted) < MIN_CV_POINTS:
        cut = np.sort(v[ok])[MIN_CV_POINTS - 1]
        accepted = ok & (v <= cut)
    t0 = np.zeros(len(model.params))
    t0[:3] = depletion_start(v[accepted], y[accepted, 0], model.fc)
    if start is not None:
        t0 = np.where(np.isfinite(start), start, t0)
    active = np.ones(len(model.params), dtype=bool)
    state = lsq.fit(model, x, y, accepted[:, None], t0, active, noise=noise)
    grew = False
    for _ in range(12):
        rest = np.flatnonzero(ok & ~accepted & (v > v[accepted].max()))
        if rest.size == 0:
            return state
        rest = rest[np.argsort(v[rest], kind="stable")]
        z = _prediction_z(model, state, x[rest], y[rest])
        bad = np.flatnonzero(np.abs(z) >= Z_ACCEPT)
        take = rest if bad.size == 0 else rest[: bad[0]]
        if take.size == 0:
            break
        accepted[take] = True
        grew = True
        state = lsq.fit(model, x, y, accepted[:, None], state.t, state.active | active,
                        noise=noise, rounds=2)
    if not grew:
        return state
    # The points just below the first rejected one carry diffusion capacitance too,
    # below the threshold but not below the noise: back off until the excess, growing
    # as exp(V/(Nc*Vt)), has fallen from Z_ACCEPT to a third of a standard error.
    rest = np.flatnonzero(ok & ~accepted & (v > v[accepted].max()))
    rest = rest[np.argsort(v[rest], kind="stable")]
    z = _prediction_z(model, state, x[rest], y[rest])
    n_vt = 2.0 * thermal_voltage(DEFAULT_TEMPERATURE_K)
    pos = np.flatnonzero(z > 0)
    if pos.size >= 2 and v[rest[pos[1]]] > v[rest[pos[0]]] and z[pos[1]] > z[pos[0]]:
        n_vt = (v[rest[pos[1]]] - v[rest[pos[0]]]) / math.log(z[pos[1]] / z[pos[0]])
        n_vt = float(np.clip(n_vt, 0.8, 3.0) * thermal_voltage(DEFAULT_TEMPERATURE_K)) \
            if np.isfinite(n_vt) else 2.0 * thermal_voltage(DEFAULT_TEMPERATURE_K)
    v_first = v[rest[0]] if rest.size else v[accepted].max()
    cut = v_first - n_vt * math.log(max(abs(z[0]) if z.size else Z_ACCEPT, Z_ACCEPT) / 0.3)
    trimmed = accepted & ((v <= max(cut, 0.0)) | (v <= 0))
    if np.count_nonzero(trimmed) >= MIN_CV_POINTS and np.any(trimmed != accepted):
        state = lsq.fit(model, x, y, trimmed[:, None], state.t, state.active | active,
                        noise=noise, rounds=2)
    return state


def fit_cv(voltage_V, frequency_Hz, capacitance_F, *, compliance=None, use=None,
           temperature_K: float = DEFAULT_TEMPERATURE_K, with_fixture: bool | None = None,
           fc: float = 0.5, noise=None, noise_scale=None, conductance_S=None) -> FitResult:
    """CJO, VJ, M (and CFIX: ``with_fixture`` None when the data determine it, True
    always, False never) from C–V points (parallel C). ``noise``: the meter's stated
    noise (with ``conductance_S``, when read, for |Y|), else estimated."""
    x, y, elig = cv_arrays(voltage_V, frequency_Hz, capacitance_F, conductance_S,
                           compliance, use)
    model = DepletionModel(fc, with_fixture)
    state = depletion_state(model, x, y[:, :1], elig[:, :1],
                            noise=meter_rows_noise(noise, x, y, 1, noise_scale))
    if isinstance(state, str):
        return empty_result("cv", len(x), state)
    state = precision.drop_unresolved(model, state, x, y[:, :1], ("CFIX",), lambda t, act: (
        lsq.fit(model, x, y[:, :1], state.used, t, act, noise=state.noise, rounds=2)))
    left = elig[:, 0] & np.isfinite(y[:, 0]) & (y[:, 0] > 0) & ~state.used[:, 0]
    state = precision.readmit(model, state, x, y[:, :1], left, lambda use: lsq.fit(
        model, x, y[:, :1], use, state.t, state.active, noise=state.noise, rounds=2))
    left &= ~state.used[:, 0]
    if left.any():  # points are left out only with a stated reason
        state.notes.append(
            f"{int(left.sum())} points from {float(x[left, 0].min()):.3g} V up left out: "
            f"diffusion capacitance shows there, which C-V data alone cannot model (with "
            f"I-V data the whole network is fitted)")
    return lsq.to_result(model, state, "cv", len(x), min_rows=MIN_CV_POINTS, x=x, y=y[:, :1])


def cv_arrays(v, f, c, g, compliance, use):
    v = np.asarray(v, dtype=float).ravel()
    n = v.size
    f = np.broadcast_to(np.asarray(f, dtype=float).ravel(), (n,)) if np.size(f) in (1, n) \
        else None
    if f is None:
        raise ValueError("frequency_Hz must be one value or one per point")
    c = np.asarray(c, dtype=float).ravel()
    g = np.full(n, np.nan) if g is None else np.asarray(g, dtype=float).ravel()
    if c.size != n or g.size != n:
        raise ValueError(f"C-V columns differ in length ({n}, {c.size}, {g.size})")
    base = np.isfinite(v) & np.isfinite(f) & (f > 0)
    if compliance is not None:
        base &= ~np.asarray(compliance, dtype=bool)
    if use is not None:
        base &= np.asarray(use, dtype=bool)
    elig = np.column_stack([base & np.isfinite(c), base & np.isfinite(g) & (v > 0)])
    return np.column_stack([v, f]), np.column_stack([c, g]), elig


def admittance_state(model: AdmittanceModel, x, y, elig, start=None, fixed=None,
                     noise=None):
    """Fit the whole admittance; without usable conductance, the depletion part only."""
    v = x[:, 0]
    dep = DepletionModel(model.fc, fixture=False)
    if len(model.params) > 8:
        dep.params = dep.params + model.params[8:]
    dstate = depletion_state(dep, x, y[:, :1], elig[:, :1])
    if isinstance(dstate, str):
        return dstate
    k = model.index
    t0 = np.zeros(len(model.params))
    t0[k["CJO"]:k["M"] + 1] = dstate.t[:3]
    if "CFIX" in k:
        t0[k["CFIX"]] = dstate.t[3] if dstate.active[3] else 0.0
    g_neg = y[elig[:, 1] & (y[:, 1] <= 0), 1]
    g_floor = 3.0 * float(np.max(np.abs(g_neg))) if g_neg.size else 0.0
    gpos = elig[:, 1] & (y[:, 1] > g_floor)
    vt = thermal_voltage(model.temperature_K)
    with_dc = np.count_nonzero(gpos) >= 4
    if with_dc:
        ts = iv_start_values(v[gpos], y[gpos, 1], model.temperature_K)
        t0[k["N"]] = ts[1]
        t0[k["IS"]] = ts[0] + math.log(ts[1] * vt)  # G ~ IS/(N Vt) exp(V/(N Vt))
        top = np.argsort(v[gpos])[-5:]
        ysel = y[gpos][top]
        yy = ysel[:, 1] + 1j * 2 * np.pi * x[gpos][top, 1] * ysel[:, 0]
        t0[k["RS"]] = max(0.8 * float(np.min((1.0 / yy).real)), 0.0)
        cj = dep.predict(dstate.t, x, None)[0][:, 0]
        extra = y[:, 0] - cj
        big = gpos & (extra > 0.1 * y[:, 0])
        t0[k["TT"]] = float(np.median(extra[big] / y[big, 1])) if big.any() else 0.0
    else:
        t0[k["IS"]], t0[k["N"]] = math.log(_TINY_IS), 1.0
    t0 = np.where(np.isfinite(t0), t0, 0.0)
    if start is not None:
        t0 = np.where(np.isfinite(start), start, t0)
    active = np.ones(len(model.params), dtype=bool)
    for name, value in (fixed or {}).items():
        if name in k:
            t0[k[name]] = model.params[k[name]].to_t(value)
            active[k[name]] = False
    if not with_dc:
        for name in ("IS", "N", "RS", "RSH", "TT"):
            active[k[name]] = False
        t0[k["IS"]], t0[k["RS"]], t0[k["RSH"]], t0[k["TT"]] = math.log(_TINY_IS), 0, 0, 0
    # the depletion fit's choice of C points is kept where the DC part is not fitted
    use = elig.copy()
    if not with_dc or not active[k["TT"]]:
        use[:, 0] &= dstate.used[:, 0]
    return lsq.fit(model, x, y, use, t0, active, noise=noise)


def fit_admittance(voltage_V, frequency_Hz, capacitance_F, conductance_S, *,
                   compliance=None, use=None, temperature_K: float = DEFAULT_TEMPERATURE_K,
                   with_fixture: bool | None = None, fixed: dict[str, float] | None = None,
                   fc: float = 0.5, noise=None, noise_scale=None) -> FitResult:
    """The whole small-signal model from C and G against bias (parallel readings).

    ``fixed`` holds model-card values instead of fitting them: IS, N, RS, RSH from an I–V
    fit (``joint.dc_holds``; RS = 0 and RSH = inf hold them absent), and CJO, VJ, M from
    a C–V fit where the admittance points alone cannot pin the depletion curve (forward
    bias only). ``noise``: the meter's stated noise, else estimated.
    """
    x, y, elig = cv_arrays(voltage_V, frequency_Hz, capacitance_F, conductance_S,
                            compliance, use)
    model = AdmittanceModel(temperature_K, fc, with_fixture)
    state = admittance_state(model, x, y, elig, fixed=fixed,
                             noise=meter_rows_noise(noise, x, y, 2, noise_scale))
    if isinstance(state, str):
        return empty_result("admittance", len(x), state)
    state = precision.drop_unresolved(model, state, x, y, ("CFIX",), lambda t, act: (
        lsq.fit(model, x, y, state.used, t, act, noise=state.noise, rounds=2)))
    return lsq.to_result(model, state, "admittance", len(x), extras=held_extras(model, fixed),
                         min_rows=MIN_CV_POINTS, x=x, y=y)


def fit_cv_data(voltage_V, frequency_Hz, capacitance_F, conductance_S=None, *,
                compliance=None, temperature_K: float = DEFAULT_TEMPERATURE_K,
                with_fixture: bool | None = None,
                fixed: dict[str, float] | None = None,
                held_covariance: np.ndarray | None = None,
                ac_level_V=None, noise=None, noise_scale=None
                ) -> dict[str, FitResult]:
    """The C-V fits of a run.

    With IS and N from an I-V fit in ``fixed``: one fit of the network the meter sees
    (``network.fit_network``) over every point, which yields CJO, VJ, M, TT and CFIX
    together, the I-V fit's uncertainty carried in (``held_covariance``, in the order
    of network.DC_NAMES present and finite in ``fixed``).

    Without them: the depletion fit and, when forward conductance is present, the
    admittance fit.

    The admittance fit holds CJO, VJ and M as the depletion fit found them when it
    succeeded: the reverse and low-forward capacitance pin the depletion curve far more
    tightly than forward admittance, where diffusion capacitance and the test signal's
    distortion dominate, and TT is then stated against the same CJO, VJ, M as the card.
    """
    if fixed and "IS" in fixed and "N" in fixed:
        from pnbench.modeling import network

        return {"cv": network.fit_network(
            voltage_V, frequency_Hz, capacitance_F, conductance_S, fixed=fixed,
            held_covariance=held_covariance, ac_level_V=ac_level_V, noise=noise,
            noise_scale=noise_scale,
            compliance=compliance,
            temperature_K=temperature_K, with_fixture=with_fixture)}
    out = {"cv": fit_cv(voltage_V, frequency_Hz, capacitance_F, compliance=compliance,
                        temperature_K=temperature_K, with_fixture=with_fixture, noise=noise,
                        noise_scale=noise_scale, conductance_S=conductance_S)}
    v = np.asarray(voltage_V, dtype=float).ravel()
    if conductance_S is not None:
        g = np.asarray(conductance_S, dtype=float).ravel()
        if np.count_nonzero(np.isfinite(g) & (g > 0) & (v > 0)) >= 4:
            held = dict(fixed or {})
            depl = out["cv"]
            if depl.success and all(n in depl.values for n in ("CJO", "VJ", "M")):
                held.update({n: depl.values[n] for n in ("CJO", "VJ", "M")})
            out["admittance"] = fit_admittance(
                voltage_V, frequency_Hz, capacitance_F, g, compliance=compliance,
                temperature_K=temperature_K, with_fixture=with_fixture, fixed=held or None,
                noise=noise, noise_scale=noise_scale)
    return out
