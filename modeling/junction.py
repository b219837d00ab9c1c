"""DC model of a junction diode: thermal voltage, I(V) and V(I).

Model (see PHYSICS.md §2): junction current

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

from .params import DEFAULT_TEMPERATURE_K, DiodeParams

#: Largest exponent used before clipping (exp(700) ~ 1e304 is still finite).
_EXP_CAP = 700.0


def thermal_voltage(temperature_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """kT/q in volts, from scipy.constants (CODATA, exact since the 2019 SI)."""
    if not temperature_K > 0:
        raise ValueError(f"temperature must be > 0 K, got {temperature_K!r}")
    return constants.k * temperature_K / constants.e


def saturation_current(params: DiodeParams, temperature_K: float,
                       nominal_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """IS [A] at temperature_K of a model whose values hold at nominal_K (PHYSICS.md §7):

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
    """``params`` with IS moved from nominal_K to temperature_K; nothing else changes.

    Simulators also move VJ, CJO and (with their temperature coefficients) BV and RS;
    this model does not, so away from nominal_K capacitances and breakdown stay at
    their nominal values.
    """
    if temperature_K == nominal_K:
        return params
    return params.with_values(IS=saturation_current(params, temperature_K, nominal_K))


def _shaped(x, shape: tuple):
    """Array x given back in ``shape``; a Python float when the input was a scalar."""
    x = np.asarray(x, dtype=float).reshape(shape)
    return x if shape else float(x)


def _times(g: float, v):
    """g*v, exactly 0 where there is no shunt (g = 0) even at v = -inf."""
    return g * v if g != 0.0 else np.zeros_like(v)


def _exp(x):
    return np.exp(np.minimum(x, _EXP_CAP))


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
    return params.IS * np.expm1(np.minimum(vd / a, _EXP_CAP)) + shunt - breakdown


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
    offset = -params.IS + _k(_breakdown_log_k(params, a))
    i_fwd = _explicit_current(v_arr, offset, g, math.log(params.IS), +1, rs, a)
    log_k = _breakdown_log_k(params, a)
    if log_k == -math.inf:
        return _shaped(i_fwd, shape)
    i_bd = _explicit_current(v_arr, offset, g, log_k, -1, rs, a)

    def residual(i, v_):
        return i - junction_current(v_ - i * rs, params, temperature_K)

    # The exact I lies in [i_bd, i_fwd]: each explicit branch leaves out one exponential.
    # Keep the better one; refine only where neither is exact (near a low breakdown knee).
    r_fwd, r_bd = residual(i_fwd, v_arr), residual(i_bd, v_arr)
    use_bd = np.abs(r_bd) < np.abs(r_fwd)
    i = np.where(use_bd, i_bd, i_fwd)
    r = np.where(use_bd, r_bd, r_fwd)
    need = np.abs(r) > 1e-13 * np.maximum(np.abs(i), params.IS)
    if np.any(need):
        i = np.array(i, dtype=float, copy=True)
        i[need] = _newton(
            lambda x, k=need: residual(x, v_arr[k]),
            lambda x, k=need: 1.0 + rs * (g + junction_conductance(v_arr[k] - x * rs,
                                                                   params, temperature_K)),
            *_widened(np.minimum(i_bd, i_fwd)[need], np.maximum(i_bd, i_fwd)[need], 0.0),
            i[need],
        )
    return _shaped(i, shape)


def _widened(lo, hi, scale: float):
    """The bracket [lo, hi] opened by a little more than the rounding of its ends.

    The explicit branches can lose digits to cancellation (a large shunt with deep
    breakdown), so their ends may sit a few ulps on the wrong side of the root.
    """
    pad = 1e-9 * (np.abs(lo) + np.abs(hi)) + 1e-9 * scale
    return lo - pad, hi + pad


def _newton(f, df, lo, hi, x, iterations: int = 100):
    """Safeguarded Newton for an increasing f on the bracket [lo, hi] (vectorized)."""
    lo, hi, x = lo.copy(), hi.copy(), x.copy()
    for _ in range(iterations):
        r = f(x)
        lo = np.where(r < 0, x, lo)
        hi = np.where(r > 0, x, hi)
        step = x - r / df(x)
        outside = ~((step >= lo) & (step <= hi))
        new = np.where(r == 0, x, np.where(outside, 0.5 * (lo + hi), step))
        done = np.abs(new - x) <= 4e-16 * np.abs(new) + 1e-300
        x = new
        if np.all(done):
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
    log_k = _breakdown_log_k(params, a)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        offset = -params.IS + _k(log_k)
        vd_fwd = _explicit_vd(i, offset, g, math.log(params.IS), +1, a)
        vd_fwd = np.where(np.isnan(vd_fwd), -np.inf, vd_fwd)
        if log_k == -math.inf:
            return _shaped(vd_fwd, shape)
        vd_bd = _explicit_vd(i, offset, g, log_k, -1, a)
    # The exact Vd lies in [vd_fwd, vd_bd] (each branch leaves out one exponential); the
    # breakdown branch has no solution where the current is above -IS + K.
    vd_bd = np.where(np.isnan(vd_bd), np.inf, vd_bd)
    hi = np.minimum(vd_bd, np.where(i < 0, 0.0, np.inf))
    lo = np.where(np.isfinite(vd_fwd), vd_fwd, hi - 60 * a)
    # Above -IS the breakdown branch gives no upper end; above lo the breakdown current
    # is at most d = K*exp(-lo/a), so the forward branch at i + d is one.
    open_top = ~np.isfinite(hi) & np.isfinite(lo)
    if np.any(open_top):
        d = _k_exp(log_k, -lo[open_top] / a)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            hi[open_top] = _explicit_vd(i[open_top] + d, offset, g, math.log(params.IS),
                                        +1, a)

    def residual(x, k):
        return junction_current(x, params, temperature_K) - i[k]

    candidates = np.stack([np.where(np.isfinite(lo), lo, 0.0), np.where(np.isfinite(hi), hi, 0.0)])
    everywhere = np.ones(i.shape, dtype=bool)
    res = np.abs(np.stack([residual(c, everywhere) for c in candidates]))
    pick = np.argmin(res, axis=0)
    vd = np.where(pick == 0, candidates[0], candidates[1])
    r = np.min(res, axis=0)
    need = (r > 1e-13 * np.maximum(np.abs(i), params.IS)) & np.isfinite(hi)
    if np.any(need):
        vd = np.array(vd, dtype=float, copy=True)
        vd[need] = _newton(
            lambda x, k=need: residual(x, k),
            lambda x: g + junction_conductance(x, params, temperature_K),
            *_widened(lo[need], hi[need], a),
            vd[need],
        )
    return _shaped(vd, shape)


def voltage(i, params: DiodeParams, temperature_K: float = DEFAULT_TEMPERATURE_K):
    """Terminal voltage [V] at which the device carries current i [A]."""
    i_arr = np.asarray(i, dtype=float)
    v = junction_voltage(i_arr, params, temperature_K) + i_arr * params.RS
    return v if i_arr.ndim else float(v)
