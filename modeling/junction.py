"""DC model of a junction diode: thermal voltage, I(V) and V(I).

Model (see docs/physics.md §2): junction current

    Ij(Vd) = IS*(exp(Vd/a) - 1) + Vd/RSH - K*(exp(-Vd/a) - 1),   a = N*Vt,
    K = IBV*exp(-BV/a)

with terminal voltage V = Vd + I*RS. The breakdown term follows the simulator
convention that the reverse current is about IBV at Vd = -BV (Nagel, SPICE2, 1975); the
"- 1" keeps the current exactly zero at zero bias (it matters only for a breakdown
voltage of a few N*Vt, where K is not negligible).

Away from breakdown the current is the exact explicit Lambert-W solution (Banwell &
Jayakumar, Electron. Lett. 36(4), 2000; with shunt, Ortiz-Conde et al., Solid-State
Electron. 44, 2000), with W(exp(x)) evaluated as the Wright omega function so nothing
overflows. Each one-exponential branch has the explicit form; where both the forward and
the breakdown exponential matter, the two explicit solutions bracket the exact one and a
few safeguarded Newton steps finish the job. Everything is vectorized.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants
from scipy.special import wrightomega

from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

_EPS = float(np.finfo(float).eps)

#: Largest exponent used before clipping (exp(700) ~ 1e304 is still finite).
_EXP_CAP = 700.0


def thermal_voltage(temperature_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """kT/q in volts, from scipy.constants (CODATA, exact since the 2019 SI)."""
    if not temperature_K > 0:
        raise ValueError(f"temperature must be > 0 K, got {temperature_K!r}")
    return constants.k * temperature_K / constants.e


def saturation_current(params: DiodeParams, temperature_K: float,
                       nominal_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """IS [A] at temperature_K of a model whose values hold at nominal_K (docs/physics.md §3):

        IS(T) = IS * (T/Tn)**(XTI/N) * exp((EG*q/(N*k)) * (1/Tn - 1/T))

    the simulator form (Antognetti & Massobrio, 1988).
    """
    t, tn = float(temperature_K), float(nominal_K)
    if not (t > 0 and tn > 0):
        raise ValueError(f"temperatures must be > 0 K, got {t!r} and {tn!r}")
    exponent = params.EG / (params.N * constants.k / constants.e) * (1.0 / tn - 1.0 / t)
    return params.IS * (t / tn) ** (params.XTI / params.N) * math.exp(exponent)


def params_at_temperature(params: DiodeParams, temperature_K: float,
                          nominal_K: float = DEFAULT_TEMPERATURE_K) -> DiodeParams:
    """``params`` moved from nominal_K (TNOM) to temperature_K with the reference
    simulator's full temperature model (modeling.temperature): IS with EG and XTI, VJ and
    CJO through the band gap, RS and BV with their coefficients TRS, TRS2 and TCV.
    """
    from pnbench.modeling import temperature

    return temperature.params_at(params, temperature_K, nominal_K)


def _shaped(x, shape: tuple):
    """Array x given back in ``shape``; a Python float when the input was a scalar."""
    x = np.asarray(x, dtype=float).reshape(shape)
    return x if shape else float(x)


def _times(g: float, v):
    """g*v, exactly 0 where there is no shunt (g = 0) even at v = -inf."""
    return g * v if g != 0.0 else np.zeros_like(v)


def _exp(x):
    """exp(x) capped above at exp(700) and exactly 0 below exp(-700) (~1e-304).

    The floor is for speed as much as for cleanliness: numpy's exp takes a slow path
    (about 15x) on arguments that underflow, which deep reverse bias produces in bulk.
    """
    x = np.asarray(x, dtype=float)
    return np.where(x < -_EXP_CAP, 0.0, np.exp(np.clip(x, -_EXP_CAP, _EXP_CAP)))


def _breakdown_log_k(p: DiodeParams, a: float) -> float:
    """ln K of the breakdown term -K*exp(-Vd/a) (K = IBV*exp(-BV/a)); -inf without.

    Kept as a logarithm: K itself underflows for BV above ~18 V.
    """
    if not math.isfinite(p.BV):
        return -math.inf
    return math.log(p.IBV) - p.BV / a


def _k(log_k: float) -> float:
    """K itself (0 without breakdown or where it underflows)."""
    return 0.0 if log_k == -math.inf else math.exp(log_k)


def _k_exp(log_k: float, x):
    """K*exp(x) computed as exp(ln K + x), finite for any K and x."""
    if log_k == -math.inf:
        return np.zeros_like(np.asarray(x, dtype=float))
    return _exp(log_k + x)


def _explicit_current(v, A, g, log_k, s, rs, a):
    """Solve I = A + g*Vd + s*K*exp(s*Vd/a), Vd = v - I*rs, for I (exactly).

    One-exponential branch: s = +1 forward (K = IS), s = -1 breakdown; K given as ln K.
    """
    base = (A + _times(g, v)) / (1.0 + g * rs)
    if log_k == -math.inf:
        return base
    if rs == 0.0:
        return A + _times(g, v) + s * _k_exp(log_k, s * v / a)
    x = log_k + math.log(rs / (a * (1.0 + g * rs))) + s * (v - rs * base) / a
    w = np.real(wrightomega(x))
    return base + s * (a / rs) * w


def _explicit_vd(i, A, g, log_k, s, a):
    """Solve I = A + g*Vd + s*K*exp(s*Vd/a) for Vd (exactly), one-exponential branch."""
    if log_k == -math.inf:
        return (i - A) / g
    if g == 0.0:
        with np.errstate(divide="ignore", invalid="ignore"):
            return s * a * (np.log(s * (i - A)) - log_k)
    c = log_k - math.log(g * a)
    x = c + s * (i - A) / (g * a)
    w = np.real(wrightomega(x))
    # Vd = (i - A)/g - s*a*w loses digits to cancellation where the shunt current
    # (i - A)/g dwarfs Vd; since w + ln(w) = x it equals s*a*(ln(w) - c), exact there.
    with np.errstate(divide="ignore"):
        return np.where(w > 1.0, s * a * (np.log(np.maximum(w, 1.0)) - c),
                        (i - A) / g - s * a * w)


def junction_current(vd, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K):
    """Current through the junction and shunt [A] at junction voltage vd [V]."""
    a = params.N * thermal_voltage(temperature_K)
    vd = np.asarray(vd, dtype=float)
    g = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    log_k = _breakdown_log_k(params, a)
    shunt = _times(g, vd)
    breakdown = _k_exp(log_k, -vd / a) - _k(log_k)
    return params.IS * np.expm1(np.clip(vd / a, -_EXP_CAP, _EXP_CAP)) + shunt - breakdown


def junction_conductance(vd, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K):
    """dIj/dVd [S] of the junction alone (no shunt): IS*exp(Vd/a)/a + breakdown slope."""
    a = params.N * thermal_voltage(temperature_K)
    vd = np.asarray(vd, dtype=float)
    log_k = _breakdown_log_k(params, a)
    return (params.IS * _exp(vd / a) + _k_exp(log_k, -vd / a)) / a


def current(v, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K):
    """Terminal current [A] at terminal voltage v [V] (array or scalar)."""
    a = params.N * thermal_voltage(temperature_K)
    shape = np.shape(v)
    v_arr = np.atleast_1d(np.asarray(v, dtype=float)).ravel()
    g = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    rs = params.RS
    log_is, log_k = math.log(params.IS), _breakdown_log_k(params, a)
    offset = -params.IS + _k(log_k)
    if log_k == -math.inf:
        return _shaped(_explicit_current(v_arr, offset, g, log_is, +1, rs, a), shape)

    def residual(i, idx=slice(None)):
        return i - junction_current(v_arr[idx] - i * rs, params, temperature_K)

    def g_total(i, idx=slice(None)):
        return g + junction_conductance(v_arr[idx] - i * rs, params, temperature_K)

    def tolerance(i, idx=slice(None)):
        # What a residual can be trusted to: 1e-13 relative, or the rounding of
        # Vd = V - I*RS (a few ulps of the larger term) times the conductance there.
        scale = np.abs(v_arr[idx]) + np.abs(i * rs)
        return 1e-13 * np.maximum(np.abs(i), params.IS) + 8 * _EPS * scale * g_total(i, idx)

    # Each explicit branch leaves out one exponential. Below -BV/2 (where Vd is too) the
    # forward one is below IS*exp(-BV/(2a)), above it the breakdown one is below
    # IBV*exp(-BV/(2a)): take the branch of each side, then check every point.
    deep = v_arr < -0.5 * params.BV
    i = np.empty_like(v_arr)
    i[~deep] = _explicit_current(v_arr[~deep], offset, g, log_is, +1, rs, a)
    i[deep] = _explicit_current(v_arr[deep], offset, g, log_k, -1, rs, a)
    # One pass for the check: both exponentials once, for residual and tolerance.
    vd = v_arr - i * rs
    e_fwd, e_bd = params.IS * _exp(vd / a), _exp(log_k - vd / a)
    ij = (e_fwd - params.IS) + _times(g, vd) - (e_bd - _k(log_k))
    trusted = (1e-13 * np.maximum(np.abs(i), params.IS)
               + 8 * _EPS * (np.abs(v_arr) + np.abs(i * rs)) * (g + (e_fwd + e_bd) / a))
    need = np.flatnonzero(np.abs(i - ij) > trusted)
    if need.size:
        # Near a low breakdown knee both matter: the exact I lies in [i_bd, i_fwd].
        i_fwd = _explicit_current(v_arr[need], offset, g, log_is, +1, rs, a)
        i_bd = _explicit_current(v_arr[need], offset, g, log_k, -1, rs, a)
        better = np.where(np.abs(residual(i_bd, need)) < np.abs(residual(i_fwd, need)),
                          i_bd, i_fwd)
        i[need] = _newton(
            residual, lambda x, idx: 1.0 + rs * g_total(x, idx), tolerance, need,
            *_widened(np.minimum(i_bd, i_fwd), np.maximum(i_bd, i_fwd), 0.0), better,
        )
    return _shaped(i, shape)


def _widened(lo, hi, scale: float):
    """The bracket [lo, hi] opened by a little more than the rounding of its ends.

    The explicit branches can lose digits to cancellation (a large shunt with deep
    breakdown), so their ends may sit a few ulps on the wrong side of the root.
    """
    pad = 1e-9 * (np.abs(lo) + np.abs(hi)) + 1e-9 * scale
    return lo - pad, hi + pad


def _newton(f, df, tol, idx, lo, hi, x, iterations: int = 100):
    """Safeguarded Newton for increasing functions on brackets [lo, hi] (vectorized).

    f(x, idx), df(x, idx) and tol(x, idx) evaluate the residual, its slope and the
    residual that counts as zero for the points idx (indices into the caller's arrays);
    only points not yet converged are evaluated again.
    """
    lo, hi, x = lo.copy(), hi.copy(), x.copy()
    active = np.arange(x.size)
    for _ in range(iterations):
        xa, ia = x[active], idx[active]
        r = f(xa, ia)
        settled = np.abs(r) <= tol(xa, ia)
        lo_a = np.where(r < 0, xa, lo[active])
        hi_a = np.where(r > 0, xa, hi[active])
        step = xa - r / df(xa, ia)
        outside = ~((step >= lo_a) & (step <= hi_a))
        new = np.where(settled, xa, np.where(outside, 0.5 * (lo_a + hi_a), step))
        small = np.abs(new - xa) <= 4e-16 * np.abs(new) + 1e-300
        x[active], lo[active], hi[active] = new, lo_a, hi_a
        active = active[~(settled | small)]
        if active.size == 0:
            break
    return x


def junction_voltage(
    i_junction, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K
):
    """Junction voltage Vd [V] at which junction + shunt carry i_junction [A].

    Currents at or below -IS are reachable only through a shunt or breakdown; without
    either the result is -inf there.
    """
    a = params.N * thermal_voltage(temperature_K)
    shape = np.shape(i_junction)
    i = np.atleast_1d(np.asarray(i_junction, dtype=float)).ravel()
    g = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    log_is, log_k = math.log(params.IS), _breakdown_log_k(params, a)
    offset = -params.IS + _k(log_k)

    def branch(current, s):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            x = _explicit_vd(current, offset, g, log_is if s > 0 else log_k, s, a)
        # No solution: the forward branch never gets down there, the breakdown branch
        # never gets up there.
        return np.where(np.isnan(x), -np.inf * s, x)

    if log_k == -math.inf:
        return _shaped(branch(i, +1), shape)

    def residual(x, idx=slice(None)):
        return junction_current(x, params, temperature_K) - i[idx]

    def slope(x, idx=slice(None)):
        return g + junction_conductance(x, params, temperature_K)

    def tolerance(x, idx=slice(None)):
        # 1e-13 relative, or the rounding of Vd (a few ulps) times the conductance there.
        return (1e-13 * np.maximum(np.abs(i[idx]), params.IS)
                + 8 * _EPS * np.abs(x) * slope(x))

    # As in `current`: the breakdown branch below the current at -BV/2, the forward
    # branch above it, then a check of every point.
    deep = i < float(junction_current(-0.5 * params.BV, params, temperature_K))
    vd = np.empty_like(i)
    vd[~deep], vd[deep] = branch(i[~deep], +1), branch(i[deep], -1)
    with np.errstate(invalid="ignore"):
        need = np.flatnonzero(~np.isfinite(vd) | ~(np.abs(residual(vd)) <= tolerance(vd)))
    if need.size == 0:
        return _shaped(vd, shape)
    # The exact Vd lies in [vd_fwd, vd_bd] (each branch leaves out one exponential); the
    # breakdown branch has no solution where the current is above -IS + K.
    ii = i[need]
    vd_fwd, vd_bd = branch(ii, +1), branch(ii, -1)
    hi = np.minimum(vd_bd, np.where(ii < 0, 0.0, np.inf))
    lo = np.where(np.isfinite(vd_fwd), vd_fwd, hi - 60 * a)
    # Above -IS the breakdown branch gives no upper end; above lo the breakdown current
    # is at most d = K*exp(-lo/a), so the forward branch at i + d is one.
    open_top = ~np.isfinite(hi) & np.isfinite(lo)
    if np.any(open_top):
        hi[open_top] = branch(ii[open_top] + _k_exp(log_k, -lo[open_top] / a), +1)
    candidates = [np.where(np.isfinite(lo), lo, 0.0), np.where(np.isfinite(hi), hi, 0.0)]
    res = [np.abs(residual(c, need)) for c in candidates]
    start = np.where(res[0] <= res[1], candidates[0], candidates[1])
    vd[need] = start
    ok = np.isfinite(hi) & ~(np.minimum(res[0], res[1]) <= tolerance(start, need))
    if np.any(ok):
        vd[need[ok]] = _newton(residual, slope, tolerance, need[ok],
                               *_widened(lo[ok], hi[ok], a), start[ok])
    return _shaped(vd, shape)


def voltage(i, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K):
    """Terminal voltage [V] at which the device carries current i [A]."""
    i_arr = np.asarray(i, dtype=float)
    v = junction_voltage(i_arr, params, temperature_K) + i_arr * params.RS
    return v if i_arr.ndim else float(v)
