"""Forward I–V fit of IS, N, RS (and RSH when the data show a shunt) on the exact model.

The model is the explicit Lambert-W solution of junction.current (docs/physics.md §2); the
residuals are in log current, so every decade of current counts by its relative error,
and IS is fitted as ln IS. Start values come from the data alone (no guess from the
user): the steepest straight stretch of ln I against V gives N and IS, the Cheung–Cheung
line dV/d(ln I) = N*Vt + I*RS (Cheung & Cheung, Appl. Phys. Lett. 49, 85, 1986) over the
points above it gives RS, and the excess current below it a shunt. Points in compliance,
at V <= 0, or at the measurement floor are left out (an override mask may choose).

Reverse-bias analysis (leakage, RSH, BV at IBV) is in fit_reverse and re-exported here.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import coarse, lsq
from pnbench.modeling.fit_reverse import fit_reverse  # noqa: F401  (part of this module's API)
from pnbench.modeling.fitnoise import as_stated
from pnbench.modeling.fitresult import FitResult, empty_result
from pnbench.modeling.junction import _EXP_CAP, thermal_voltage
from pnbench.modeling.junction import current as junction_current_total
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

#: Names of the forward fit, in the order of the fitted vector.
FORWARD_NAMES = ("IS", "N", "RS", "RSH")
RS_ABSENT = "RS not determined: the data never leave the exponential region"
RSH_ABSENT = "RSH not determined: no shunt current shows below the exponential region"
#: ln of the smallest IS a fit may reach: no floor that excludes real junctions (silicon
#: at 77 K has IS near 1e-69 A); 1e-300 A keeps exp(t) a normal double.
IS_LOWER_LN = math.log(1e-300)
#: The fewest usable points a forward fit starts with.
MIN_POINTS = 4


class ForwardModel:
    """I(V) of the exact DC model; t = (ln IS, N, RS, 1/RSH); one log channel."""

    channels = ("log",)

    def __init__(self, temperature_K: float = DEFAULT_TEMPERATURE_K):
        self.temperature_K = temperature_K
        self.vt = thermal_voltage(temperature_K)
        self.params = (
            lsq.Param("IS", "log", lower=IS_LOWER_LN, upper=math.log(10.0)),
            lsq.Param("N", "lin", lower=0.3, upper=20.0),
            lsq.Param("RS", "lin", lower=0.0, upper=1e9, optional=True, absent_reason=RS_ABSENT),
            lsq.Param("RSH", "inv", lower=0.0, upper=1e3, optional=True, absent_reason=RSH_ABSENT),
        )

    def diode(self, t: np.ndarray) -> DiodeParams:
        g = float(t[3])
        return DiodeParams(IS=math.exp(t[0]), N=float(t[1]), RS=float(t[2]),
                           RSH=math.inf if g <= 0 else 1.0 / g)

    def predict(self, t, x, active):
        v = x[:, 0]
        p = self.diode(t)
        i = np.asarray(junction_current_total(v, p, self.temperature_K), dtype=float)
        if active is None:
            return i[:, None], None
        a = p.N * self.vt
        vd = v - i * p.RS
        e = np.exp(np.minimum(vd / a, _EXP_CAP))
        gd = p.IS * e / a
        g_sh = max(float(t[3]), 0.0)
        gtot = gd + g_sh
        denom = 1.0 + p.RS * gtot
        cols = {
            0: p.IS * np.expm1(np.minimum(vd / a, _EXP_CAP)),
            1: -gd * vd / p.N,
            2: -gtot * i,
            3: vd,
        }
        jac = np.stack([cols[int(k)] / denom for k in active], axis=-1)
        return i[:, None], jac[:, None, :]

    def slope(self, t, v: np.ndarray) -> np.ndarray:
        """dI/dV at the terminals: gtot / (1 + RS gtot)."""
        p = self.diode(t)
        i = np.asarray(junction_current_total(v, p, self.temperature_K), dtype=float)
        a = p.N * self.vt
        gtot = p.IS * np.exp(np.minimum((v - i * p.RS) / a, _EXP_CAP)) / a \
            + max(float(t[3]), 0.0)
        return gtot / (1.0 + p.RS * gtot)


def _window_sums(x: np.ndarray, y: np.ndarray, w: int):
    c = [np.concatenate([[0.0], np.cumsum(a)]) for a in (x, y, x * x, x * y, y * y)]
    sx, sy, sxx, sxy, syy = (a[w:] - a[:-w] for a in c)
    sxx_c = sxx - sx * sx / w
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (sxy - sx * sy / w) / sxx_c
        ss = np.maximum(syy - sy * sy / w - slope**2 * sxx_c, 0.0)
        slope_sd = np.sqrt(ss / max(w - 2, 1) / sxx_c)
    return slope, (sy - slope * sx) / w, np.sqrt(ss / w), slope_sd


def start_values(v: np.ndarray, i: np.ndarray, temperature_K: float,
                 floor_A: float = 0.0) -> np.ndarray:
    """t = (ln IS, N, RS, 1/RSH) read off the data; no user guess.

    N and IS from the steepest straight stretch of ln I (a window of points whose line
    explains them to within ~10 %, steepness judged by slope minus two of its standard
    errors, and lying at V > 4*N*Vt so neither the -1 of the exponential nor a shunt bends
    it); RS from the Cheung–Cheung line above it (or the excess voltage at the top point);
    a shunt from the current in excess of the exponential below it.
    """
    vt = thermal_voltage(temperature_K)
    ok = np.isfinite(v) & np.isfinite(i) & (v > 0) & (i > max(floor_A, 0.0))
    order = np.argsort(v[ok], kind="stable")
    vv, ii = v[ok][order], i[ok][order]
    m = len(vv)
    if m < 2:
        raise ValueError("need two forward points above the floor")
    y = np.log(ii)
    w = int(max(3, min(m // 5, max(25, m // 20)))) if m >= 3 else 2
    best = None
    if m >= w:
        slope, icpt, rms, sd = _window_sums(vv, y, w)
        with np.errstate(divide="ignore", invalid="ignore"):
            n_win = 1.0 / (slope * vt)
        v_low = vv[: len(slope)]
        good = (slope > 0) & (n_win > 0.5) & (n_win < 15) & (v_low >= 4 * n_win * vt)
        for tol in (0.1, 0.3, math.inf):
            cand = np.flatnonzero(good & (rms < tol))
            if cand.size:
                score = slope[cand] - 2 * np.nan_to_num(sd[cand], nan=0.0)
                best = int(cand[np.argmax(score)])
                break
    if best is None:  # no clean window: the two-point slope of the top half
        lo, hi = m // 2, m - 1
        s = (y[hi] - y[lo]) / max(vv[hi] - vv[lo], 1e-12)
        n0 = float(np.clip(1.0 / (max(s, 1e-9) * vt), 0.8, 5.0))
        is0 = float(np.exp(y[lo] - vv[lo] / (n0 * vt)))
        first, last = lo, hi
    else:
        n0 = float(np.clip(1.0 / (slope[best] * vt), 0.5, 15.0))
        is0 = float(np.exp(icpt[best]))
        first, last = best, best + w - 1
    a = n0 * vt
    rs0 = _cheung_rs(vv[last:], ii[last:], a, is0)
    if rs0 * ii[-1] < 0.1 * a:  # bends even the top point by < 10 %: noise read as RS, and
        rs0 = 0.0  # a fit started there crawls the valley where RS, RSH, N and IS trade off
    below = slice(0, first)
    g0 = 0.0
    if first > 0:
        excess = ii[below] - is0 * np.expm1(vv[below] / a)
        share = excess / ii[below]
        if np.median(share) > 0.3:
            g0 = float(np.median(excess[share > 0.3] / vv[below][share > 0.3]))
    t = np.array([max(math.log(is0), IS_LOWER_LN) if is0 > 0 else math.nan, n0, rs0, max(g0, 0.0)])
    fallback = np.array([math.log(1e-14), 1.5, 0.0, 0.0])  # only for degenerate data
    return np.where(np.isfinite(t), t, fallback)


def _cheung_rs(v: np.ndarray, i: np.ndarray, a: float, is0: float) -> float:
    """RS from dV/d(ln I) = a + I*RS over points spaced >= 0.2 apart in ln I."""
    if len(v) < 2:
        return 0.0
    keep = [0]
    y = np.log(i)
    for k in range(1, len(v)):
        if y[k] - y[keep[-1]] >= 0.2:
            keep.append(k)
    if len(keep) >= 4:
        vk, ik, yk = v[keep], i[keep], y[keep]
        deriv = np.diff(vk) / np.diff(yk)
        i_mid = np.sqrt(ik[1:] * ik[:-1])
        slope, _ = np.polyfit(i_mid, deriv, 1)
        if slope > 0:
            return float(slope)
    excess = v[-1] - a * math.log1p(i[-1] / is0)
    return float(max(excess / i[-1], 0.0))


def _eligible(v, i, compliance, use):
    ok = np.isfinite(v) & np.isfinite(i) & (v > 0)
    if compliance is not None:
        ok &= ~np.asarray(compliance, dtype=bool)
    if use is not None:
        ok &= np.asarray(use, dtype=bool)
    return ok


def fit_forward(voltage_V, current_A, *, compliance=None,
                temperature_K: float = DEFAULT_TEMPERATURE_K, use=None,
                noise=None, shunt: bool = True,
                start: np.ndarray | None = None, noise_scale=None) -> FitResult:
    """Fit IS, N, RS (and RSH when a shunt shows) to forward I–V points.

    ``compliance`` flags points to leave out; ``use`` (bool mask) overrides the automatic
    choice of points (still only V > 0 and I > 0 can enter a log fit); ``noise`` = the
    instrument's stated noise (a fitnoise.StatedNoise, or (relative, floor_A)) when it is
    known, else it is estimated from the residuals; ``noise_scale`` (per point or one
    value) multiplies it (1/sqrt(NPLC x readings)). ``start`` (ln IS, N, RS, 1/RSH)
    skips the automatic start values.
    """
    v = np.asarray(voltage_V, dtype=float).ravel()
    i = np.asarray(current_A, dtype=float).ravel()
    if v.shape != i.shape:
        raise ValueError(f"voltage has {v.size} values, current {i.size}")
    model = ForwardModel(temperature_K)
    return fit_with_model(model, v, i, _eligible(v, i, compliance, use),
                          forced=use is not None, noise=noise, shunt=shunt, start=start,
                          noise_scale=noise_scale)


def stated_noise(model: ForwardModel, stated, v: np.ndarray, i: np.ndarray,
                 scale=None, t: np.ndarray | None = None) -> lsq.Noise:
    """The fits' noise model of a stated SMU noise (fitnoise.StatedNoise) for these
    points: the current's floor per point (its autoranged range), times ``scale`` per
    point, and, with a fitted ``t``, the voltage reading's noise through the model's
    slope dI/dV added in quadrature."""
    stated = as_stated(stated)
    n = v.size
    rows = np.ones(n) if scale is None else np.broadcast_to(
        np.asarray(scale, dtype=float).ravel(), (n,)).copy()
    rows = np.where(np.isfinite(rows) & (rows > 0), rows, 1.0)
    extra = None
    if stated.voltage is not None and t is not None:
        with np.errstate(all="ignore"):
            g = np.abs(model.slope(t, v))
            extra = ((g * stated.voltage.sigma(v) * rows) ** 2)[:, None]
        extra = np.where(np.isfinite(extra), extra, 0.0)
    return lsq.Noise((stated.relative,), (stated.smallest_floor,), estimated=False,
                     linear=True, floor_rows=stated.floors(i)[:, None], scale_rows=rows,
                     extra_var=extra)


def forward_state(model: ForwardModel, v: np.ndarray, i: np.ndarray,
                  eligible: np.ndarray, *, forced: bool = False,
                  noise=None, shunt: bool = True,
                  start: np.ndarray | None = None, noise_scale=None) -> lsq.FitState | str:
    """The least-squares state of a forward fit, or the reason there is none. With a
    stated noise that includes the voltage reading's, the fit runs twice: first with
    the noise estimated, for the slope dI/dV that carries the voltage noise into the
    current's, then against the stated noise from there."""
    pos = eligible & (i > 0)
    if np.count_nonzero(pos) < MIN_POINTS:
        return (f"too few forward points with positive current to fit "
                f"({np.count_nonzero(pos)}; need {MIN_POINTS})")
    x, y, elig = v[:, None], i[:, None], eligible[:, None]
    known = None if noise is None else stated_noise(model, noise, v, i, noise_scale)
    floor0 = known.floor[0] if known else lsq.initial_noise(model, y, elig).floor[0]
    above = i[pos] > floor0 * lsq.FLOOR_FACTOR
    floor_cut = floor0 * lsq.FLOOR_FACTOR if np.count_nonzero(above) >= 2 else 0.0
    sv, si = v[pos], i[pos]
    if sv.size > 2 * coarse.MAX_ROWS:  # a long run's start: an even subset's reading will do
        every = math.ceil(sv.size / coarse.MAX_ROWS)
        sv, si = sv[::every], si[::every]
    t0 = start_values(sv, si, model.temperature_K, floor_cut)
    if start is not None:  # warm start: keep the data's own guess where start has none
        t0 = np.where(np.isfinite(start), start, t0)
        if shunt and t0[3] <= 0:
            t0[3] = max(start_values(sv, si, model.temperature_K)[3], 0.0)
    t0 = _required_first(model, sv, si, t0)
    active = np.array([True, True, True, shunt])
    if not shunt:
        t0 = t0.copy()
        t0[3] = 0.0
    if known is not None and as_stated(noise).voltage is not None:
        # only the slope dI/dV is wanted of it (for the voltage noise): a subset's will do
        first = coarse.fit(model, x, y, elig, t0, active, forced_use=forced, finish=False)
        known = stated_noise(model, noise, v, i, noise_scale, first.t)
        t0 = np.where(active, first.t, t0)
    return coarse.fit(model, x, y, elig, t0, active, noise=known, forced_use=forced)


def _required_first(model: ForwardModel, v: np.ndarray, i: np.ndarray,
                    t0: np.ndarray) -> np.ndarray:
    """The start with IS and N solved first, RS and RSH held at their start values (on
    the start values' subset of points). Where the data do not determine RS and RSH,
    IS and N trade off against them along a nearly flat valley, and a solve of all four
    from a start off that valley's floor crawls along it to the iteration limit; from
    IS and N at their best it reaches the same minimum in a few steps."""
    x, y = v[:, None], i[:, None]
    elig = np.ones_like(y, dtype=bool)
    try:
        with np.errstate(all="ignore"):
            noise = lsq.initial_noise(model, y, elig)
            yhat, _ = model.predict(t0, x, None)
            use = lsq.usable_rows(model, y, yhat, elig, noise)
            if np.count_nonzero(use) < MIN_POINTS:
                return t0
            t, *_ = lsq.levenberg(model, t0, np.array([True, True, False, False]), x, y,
                                  use, noise, max_iter=20, yhat_ref=yhat)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError):
        return t0
    return t if np.all(np.isfinite(t)) else t0


def fit_with_model(model: ForwardModel, v, i, eligible, *, forced=False, noise=None,
                   shunt=True, start=None, noise_scale=None) -> FitResult:
    state = forward_state(model, v, i, eligible, forced=forced, noise=noise, shunt=shunt,
                          start=start, noise_scale=noise_scale)
    if isinstance(state, str):
        return empty_result("iv_forward", v.size, state)
    return lsq.to_result(model, state, "iv_forward", v.size, x=v[:, None], y=i[:, None])
