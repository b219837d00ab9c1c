"""Reverse I–V: leakage at a reference voltage, the shunt RSH, and BV at a stated IBV.

* BV: the voltage at which the reverse current reaches IBV (the simulator convention,
  docs/physics.md §2), read where the data cross IBV by a straight line through ln|I| against
  V over the points within a decade either side (the breakdown current is exponential in
  V, so the line is the right interpolant); with only the two bracketing points, the line
  through them. If the data never reach IBV, BV is absent and the message says how far
  they got; nothing is extrapolated.
* RSH: the slope of |I| against |V| before breakdown (points where the breakdown
  exponential, extrapolated back, is below a thousandth of the current and |V| is above
  ten Vt), kept only when it stands three standard errors above zero.
* leakage: the current at the reference voltage from a local straight line through the
  nearest points (reported as a positive magnitude with its standard error).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import chdtrc

from pnbench.modeling.fitnoise import Noise, as_stated, estimate_noise
from pnbench.modeling.fitresult import FitResult, correlation_from_covariance, empty_result
from pnbench.modeling.junction import thermal_voltage
from pnbench.modeling.misfit import P_MISFIT
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: IBV when the caller states none (the common simulator default, 1 mA).
DEFAULT_IBV_A = 1e-3


def _line(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None, stated: bool = False):
    """Weighted straight line y = a + b x: (a, b, cov 2x2, reduced chi2). ``stated``:
    the weights are 1/sigma**2 of a stated noise, which sets the scale; only residuals
    that chi-square says exceed it (misfit.P_MISFIT) widen the covariance."""
    w = np.ones_like(x) if w is None else w
    design = np.column_stack([np.ones_like(x), x]) * np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(design, y * np.sqrt(w), rcond=None)
    resid = (y - coef[0] - coef[1] * x) * np.sqrt(w)
    dof = len(x) - 2
    s2 = float(resid @ resid) / dof if dof > 0 else math.nan
    if stated:  # wider only where chi-square says the residuals exceed it
        s2 = s2 if math.isfinite(s2) and chdtrc(dof, s2 * dof) < P_MISFIT else 1.0
    try:
        cov = np.linalg.inv(design.T @ design) * s2
    except np.linalg.LinAlgError:
        cov = np.full((2, 2), math.inf)
    return float(coef[0]), float(coef[1]), cov, s2


def _breakdown(x, mag, ibv):
    """(BV, sigma, slope of ln I per volt, n points) where ``mag`` crosses ``ibv`` as |V|
    (``x``) grows, or None when it never does (or the crossing is not bracketed)."""
    order = np.argsort(x, kind="stable")
    vv, ii = x[order], mag[order]
    above = ii >= ibv
    if not above.any():
        return None
    k = int(np.argmax(above))  # first point at or beyond IBV
    if k == 0 or ii[k - 1] <= 0:
        return None  # no point below IBV on the way: the crossing is not bracketed
    def rate(a, b):  # growth of ln I per volt between points a < b
        return math.log(ii[b] / ii[a]) / (vv[b] - vv[a]) if vv[b] > vv[a] else math.inf

    # The growth rate at the crossing, from a line through up to two points either side
    # within the decade (measured voltages scatter: two close points alone may give any
    # rate); then widen over the decade either side while the current still grows
    # exponentially, judged over the span to the crossing, which noise upsets far less
    # than the step between neighbours (a leakage plateau still stops it).
    near = [j for j in range(max(k - 2, 0), min(k + 2, len(ii)))
            if ibv / 10 <= ii[j] <= ibv * 10 or j in (k - 1, k)]
    b0 = rate(k - 1, k)
    if len(near) >= 3 and np.ptp(vv[near]) > 0:
        b0 = float(np.polyfit(vv[near], np.log(ii[near]), 1)[0])
    lo = k - 1
    while lo > 0 and ibv / 10 <= ii[lo - 1] < ibv and rate(lo - 1, k) >= b0 / 3:
        lo -= 1
    hi = k
    while hi + 1 < len(ii) and ibv <= ii[hi + 1] <= ibv * 10 and rate(k - 1, hi + 1) >= b0 / 3:
        hi += 1
    x, y = vv[lo:hi + 1], np.log(ii[lo:hi + 1])
    if len(x) >= 4:
        a, b, cov, _ = _line(x, y)
        # a sigma read from the scatter of a few points is itself uncertain: the error
        # over it follows Student's t, whose rms is sqrt(dof/(dof - 2)); scale by that
        # (by sqrt(3) at 2 dof) so BV's sigma is an honest rms with a short knee
        dof = len(x) - 2
        cov = cov * (dof / (dof - 2) if dof > 2 else 3.0)
    else:  # the two bracketing points
        x, y = vv[k - 1:k + 1], np.log(ii[k - 1:k + 1])
        b = (y[1] - y[0]) / (x[1] - x[0]) if x[1] != x[0] else math.inf
        a = y[0] - b * x[0]
        cov = np.full((2, 2), math.inf)
    if not (b > 0 and math.isfinite(b)):
        return None
    bv = (math.log(ibv) - a) / b
    # delta method: BV = (ln IBV - a)/b; between two readings only, the crossing lies
    # somewhere in their span: the sigma of a uniform spread over it, span/sqrt(12)
    grad = np.array([-1.0 / b, -(math.log(ibv) - a) / b**2])
    var = float(grad @ cov @ grad) if np.all(np.isfinite(cov)) else \
        float(x[-1] - x[0]) ** 2 / 12.0
    return bv, math.sqrt(var) if var >= 0 else math.inf, b, len(x)


class _OneLinearChannel:
    channels = ("lin",)


def _leakage_line(x, mag, pre, sigma=None):
    """Weighted straight line |I| = I0 + G*|V| over ``pre``: with the instrument's stated
    noise (``sigma`` per point) weighted by it; else relative weights first, then (six
    points or more) weights from the noise the residuals show, percent of reading plus
    a floor (fitnoise): at pA currents the floor dominates, and relative weights would
    trust the smallest, noisiest readings most."""
    if np.count_nonzero(pre) < 3:
        return None
    xx, y = x[pre], mag[pre]
    if sigma is not None:
        return _line(xx, y, 1.0 / sigma[pre] ** 2, stated=True)
    w = 1.0 / np.maximum(np.abs(y), 1e-3 * np.median(np.abs(y)) + 1e-300) ** 2
    line = _line(xx, y, w)
    if y.size < 6:
        return line
    noise = Noise((1.0,), (0.0,))
    for _ in range(2):
        fit = line[0] + line[1] * xx
        noise = estimate_noise(_OneLinearChannel, y[:, None], fit[:, None],
                               np.ones((y.size, 1), dtype=bool), noise)
        sig = noise.sigma(np.abs(fit)[:, None])[:, 0]
        if not np.all(np.isfinite(sig) & (sig > 0)):
            break
        line = _line(xx, y, 1.0 / sig**2)
    return line


def _analyse(x, mag, ibv, vt, sigma=None):
    """Breakdown and the region before it, each refined by the other (two passes).

    BV is read on the breakdown current alone (the measured current less the leakage
    line), which is what the model card's BV means (simulator convention: the breakdown
    term is IBV at -BV); with negligible leakage it is where the measured current
    reaches IBV.
    """
    bd = _breakdown(x, mag, ibv)
    pre = np.ones(x.size, dtype=bool)
    line = None
    for _ in range(2):
        if bd is None:
            break
        bv, _, slope, _ = bd
        # where the breakdown exponential, extrapolated back, is below 1e-3 of the current
        pre = ibv * np.exp(-slope * (bv - x)) < 1e-3 * np.abs(mag)
        line = _leakage_line(x, mag, pre & (x >= 10 * vt), sigma)
        if line is None:
            break
        excess = mag - (line[0] + line[1] * x)
        refined = _breakdown(x, excess, ibv)
        if refined is None:
            break
        bd = refined
    pre &= x >= 10 * vt
    if line is None or bd is None:
        line = _leakage_line(x, mag, pre, sigma)
    return bd, pre, line


def fit_reverse(voltage_V, current_A, *, compliance=None,
                temperature_K: float = DEFAULT_TEMPERATURE_K,
                reference_V: float | None = None, ibv_A: float | None = None,
                use=None, series_ohm: float | None = None,
                series_sigma_ohm: float | None = None, noise=None,
                noise_scale=None) -> FitResult:
    """Leakage at ``reference_V`` (default: the deepest bias before breakdown), RSH, and
    BV at ``ibv_A`` (default 1 mA) from reverse I–V points (V < 0).

    With ``series_ohm`` (RS from a forward fit) the breakdown is read on the junction
    voltage V - I*RS, where ln I grows linearly (on the terminal voltage the I*RS drop
    bends it over a decade of current), BV is the junction's and extras carry the
    terminal value "BV_terminal_V"; RS's sigma is carried into BV's. ``noise``: the
    SMU's stated noise (fitnoise.StatedNoise or (relative, floor_A)), times
    ``noise_scale`` per point: the leakage line and the leakage figure are weighted by
    it (else the noise is estimated from their residuals).
    """
    v = np.asarray(voltage_V, dtype=float).ravel()
    i = np.asarray(current_A, dtype=float).ravel()
    n = v.size
    ok = np.isfinite(v) & np.isfinite(i) & (v < 0)
    if compliance is not None:
        ok &= ~np.asarray(compliance, dtype=bool)
    if use is not None:
        ok &= np.asarray(use, dtype=bool)
    ibv = DEFAULT_IBV_A if ibv_A is None else float(ibv_A)
    if not ibv > 0:
        raise ValueError(f"IBV must be > 0, got {ibv_A!r}")
    if np.count_nonzero(ok) < 2:
        return empty_result("iv_reverse", n, f"too few reverse points "
                            f"({np.count_nonzero(ok)}; need 2)", used=ok)
    vt = thermal_voltage(temperature_K)
    vr, mag = v[ok], -i[ok]  # reverse current as a positive magnitude where it flows
    sigma = _stated_sigma(noise, noise_scale, i, ok)
    rs = float(series_ohm) if series_ohm is not None and math.isfinite(series_ohm) \
        and series_ohm > 0 else 0.0
    names, values, sig, notes = [], {}, {}, []
    extras: dict = {"IBV_A": ibv}
    bd, pre, line = _analyse(-vr, mag, ibv, vt, sigma)
    if rs > 0:  # the breakdown on the junction voltage; leakage and RSH stay terminal
        bd_j, _, line_j = _analyse(-(vr + mag * rs), mag, ibv, vt, sigma)
        if bd_j is not None and bd is not None:
            sd = math.hypot(bd_j[1], ibv * (series_sigma_ohm or 0.0))
            extras["BV_terminal_V"] = bd_j[0] + ibv * rs
            extras["BV_at_junction"] = True
            bd, line_bd = (bd_j[0], sd, bd_j[2], bd_j[3]), line_j
        else:
            line_bd = line
    else:
        line_bd = line
    if bd is not None and line_bd is not None and math.isfinite(bd[1]):
        # the leakage line subtracted at the knee is uncertain too: an error dL in it
        # moves the breakdown current by dL, and BV by dL/(IBV * growth rate)
        cov_l = line_bd[2]
        at = np.array([1.0, bd[0]])
        var_l = float(at @ cov_l @ at) if np.all(np.isfinite(cov_l)) else 0.0
        bd = (bd[0], math.hypot(bd[1], math.sqrt(max(var_l, 0.0)) / (ibv * bd[2])),
              bd[2], bd[3])
    deepest = float(-vr.min())
    if bd is None:
        reached = float(np.max(mag))
        notes.append(f"BV not determined: the reverse current never crossed IBV = {ibv:.3g} A "
                     f"(largest {reached:.3g} A at up to {deepest:.4g} V)")
    else:
        bv, bv_sd, slope, npts = bd
        names.append("BV")
        values["BV"], sig["BV"] = bv, bv_sd
        extras["BV_points"] = npts
        if npts == 2:
            notes.append("BV read between two points only (sigma from their spacing)")
    used = np.zeros(n, dtype=bool)
    if line is not None:
        _, g, cov, _ = line
        g_sd = math.sqrt(cov[1, 1]) if np.isfinite(cov[1, 1]) and cov[1, 1] >= 0 else math.inf
        if g > 0 and g > 3 * g_sd:
            names.append("RSH")
            values["RSH"], sig["RSH"] = 1.0 / g, g_sd / g**2
        else:
            notes.append("RSH not determined: the reverse current does not grow in "
                         "proportion to the voltage before breakdown")
        used[np.flatnonzero(ok)[pre]] = True
    else:
        notes.append("RSH not determined: fewer than 3 reverse points between 10 Vt and "
                     "the breakdown knee")
    _leakage(vr[pre], mag[pre], reference_V, extras, notes,
             None if sigma is None else sigma[pre])
    if bd is not None:
        used[np.flatnonzero(ok)[np.abs(mag - ibv) <= 9 * ibv]] = True
    cov = np.diag([sig[nm] ** 2 for nm in names]) if names else np.zeros((0, 0))
    success = bool(names) or "leakage_A" in extras
    head = (f"{' '.join(names) or 'leakage only'} from {int(ok.sum())} reverse points"
            if success else "nothing determined from the reverse points")
    return FitResult(kind="iv_reverse", names=tuple(names), values=values, sigmas=sig,
                     covariance=cov, correlation=correlation_from_covariance(cov), used=used,
                     n_points=n, reduced_chi2=math.nan, success=success,
                     message="; ".join([head] + notes), extras=extras)


def _stated_sigma(noise, scale, i, ok) -> np.ndarray | None:
    """The stated noise of each reverse reading (ok rows), or None."""
    if noise is None:
        return None
    stated = as_stated(noise)
    rows = np.ones(i.size) if scale is None else np.broadcast_to(
        np.asarray(scale, dtype=float).ravel(), (i.size,))
    rows = np.where(np.isfinite(rows) & (rows > 0), rows, 1.0)
    sigma = stated.sigma(i[ok]) * rows[ok]
    return sigma if np.all(sigma > 0) else None


def _leakage(vr, mag, reference_V, extras, notes, sigma=None) -> None:
    if vr.size < 2:
        notes.append("leakage not determined: fewer than 2 reverse points before breakdown")
        return
    ref = -abs(float(reference_V)) if reference_V is not None else float(vr.min())
    if ref < vr.min() - 1e-9 * abs(ref) or ref > vr.max() + 1e-9 * abs(ref):
        notes.append(f"leakage at {ref:.4g} V not determined: the reverse points before "
                     f"breakdown span {vr.min():.4g} V to {vr.max():.4g} V")
        return
    near = np.argsort(np.abs(vr - ref), kind="stable")[: min(5, vr.size)]
    if near.size >= 3:
        w = None if sigma is None else 1.0 / sigma[near] ** 2
        a, b, cov, _ = _line(vr[near] - ref, mag[near], w, stated=sigma is not None)
        value = a
        sd = math.sqrt(cov[0, 0]) if np.isfinite(cov[0, 0]) and cov[0, 0] >= 0 else None
    else:
        value = float(np.interp(ref, np.sort(vr), mag[np.argsort(vr)]))
        sd = None
    extras["leakage_voltage_V"] = ref
    extras["leakage_A"] = float(value)
    extras["leakage_sigma_A"] = sd
