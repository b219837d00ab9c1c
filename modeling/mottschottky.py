"""Mott–Schottky doping and built-in voltage from a run's C–V points (docs/physics.md §7).

The reverse-bias readings are first freed of what the fitted network adds to Cj (the
diffusion capacitance and RS, network.non_depletion_capacitance) and of the meter's
test level: the meter reads the describing function of Cj(V) over its test signal,
mean(2 sin²φ · Cj(V + a cos φ)), which exceeds Cj(V) by about Cj''·a²/8 (§6). What is
left is Cj plus any fixture capacitance, and for the one-sided abrupt junction the
Mott–Schottky analysis assumes,

    C = CFIX + 1/sqrt(slope*(V - V0)),     1/Cj² = slope*(V - V0),  V0 = Vbi - kT/q
                                           (slope < 0: the Mott–Schottky slope)

is fitted to it by weighted least squares: each point weighted by the meter's noise as the
C–V fit found it (relative + floor), the covariance scaled by the reduced chi-square.
The fixture capacitance is fitted in the same line when the C–V fit kept one and its M
agrees with 1/2 (the assumption under which a constant offset and the curvature of
1/C² separate); otherwise it is held at the C–V fit's value, its sigma carried into
both results by shifting it one sigma. Then N = -2/(q*eps*A²*slope) and Vbi = V0 + kT/q.

Why not the plain line through 1/C²: its noise grows as 1/C³ toward deep reverse bias
(about 40 times over a 0 to -30 V sweep of an abrupt junction), so an unweighted line is
set by the deepest points and extrapolates poorly to the intercept, and a fixture's
constant offset, not removed with the line, bends it.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants, optimize

from pnbench.modeling import depletion
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.junction import thermal_voltage

#: Samples of the test signal's period for its effect on Cj (a smooth periodic integrand).
_PHASES = 32
#: |M - 1/2| below which the junction counts as abrupt for fitting CFIX with the line.
ABRUPT_M_TOLERANCE = 0.02
MIN_POINTS = 4


def band_gap_flag(vbi_V: float, semiconductor) -> str | None:
    """A note when a Mott–Schottky built-in voltage exceeds the band gap (no junction in
    the material can hold that: a measurement artefact such as stray capacitance or
    series resistance bent the 1/C^2 line)."""
    from pnbench.modeling.materials import material

    if not isinstance(semiconductor, str):
        return None
    try:
        gap = material(semiconductor).bandgap_eV.value
    except Exception:  # noqa: BLE001  an unknown material: nothing to compare with
        return None
    if vbi_V > gap:
        return (f"built-in voltage {vbi_V:.3g} V is above the band gap of {semiconductor} "
                f"({gap:.3g} eV): a measurement artefact (stray capacitance, series "
                f"resistance), not doping")
    return None


def level_excess(values: dict, voltage_V, ac_level_V) -> np.ndarray:
    """What the meter's test signal (rms, per point; NaN or 0: none) adds to Cj at V:
    mean(2 sin²φ · Cj(V + a cos φ)) - Cj(V), a = sqrt(2)*level."""
    from pnbench.modeling.params import DiodeParams
    from pnbench.modeling.smallsignal import depletion_capacitance

    v = np.asarray(voltage_V, dtype=float)
    amp = math.sqrt(2.0) * np.nan_to_num(np.broadcast_to(
        np.asarray(np.nan if ac_level_V is None else ac_level_V, dtype=float), v.shape))
    if not np.any(amp > 0) or not all(k in values for k in ("CJO", "VJ", "M")):
        return np.zeros(v.shape)
    p = DiodeParams(CJO=values["CJO"], VJ=values["VJ"], M=values["M"])
    phase = 2 * np.pi * (np.arange(_PHASES) + 0.5) / _PHASES
    grid = v[:, None] + amp[:, None] * np.cos(phase)[None, :]
    described = np.mean(2 * np.sin(phase) ** 2 * depletion_capacitance(grid, p), axis=1)
    out = described - depletion_capacitance(v, p)
    return np.where(np.isfinite(out), out, 0.0)


def _noise(fit: FitResult | None, stated) -> tuple[float, float, bool]:
    """(relative, floor [F], estimated) of the reverse-bias readings: the meter's stated
    noise (relative of |Y|, which at reverse bias is w*C), else the C–V fit's estimate."""
    from pnbench.modeling.stated import as_stated

    stated = as_stated(stated)
    if stated is not None and stated.relative + stated.floor > 0:
        return stated.relative, stated.floor, False
    extras = fit.extras if fit is not None else {}
    noise = extras.get("noise_0") or extras.get("noise")
    if isinstance(noise, dict) and noise.get("channel", "lin") == "lin" \
            and noise.get("estimated", True):  # a stated one is per point: given above
        rel, floor = float(noise.get("relative", 0.0)), float(noise.get("floor", 0.0))
        if rel >= 0 and floor >= 0 and rel + floor > 0:
            return rel, floor, bool(noise.get("estimated", True))
    return 1e-3, 0.0, True


def _line(v, y, sigma, cfix: float, free: bool):
    """(slope, V0, CFIX), covariance, reduced chi-square of C = CFIX + (slope*(V-V0))^-1/2."""
    first = depletion.mott_schottky_line(v, np.maximum(y - cfix, 1e-300))
    t0 = np.array([first.slope, first.intercept_V, cfix])
    scale = np.array([abs(first.slope), 1.0, max(abs(cfix), 1e-3 * float(np.min(y)))])

    def residual(u):
        b, v0, c0 = (u * scale) if free else (*(u[:2] * scale[:2]), cfix)
        with np.errstate(all="ignore"):
            model = c0 + 1.0 / np.sqrt(b * (v - v0))
        r = (model - y) / sigma
        return np.where(np.isfinite(r), r, 1e6)

    n_free = 3 if free else 2
    u0 = (t0 / scale)[:n_free]
    sol = optimize.least_squares(residual, u0, method="lm", xtol=1e-12, ftol=1e-12)
    dof = max(len(y) - n_free, 1)
    chi2 = float(np.sum(sol.fun**2)) / dof
    s = scale[:n_free]
    cov = np.linalg.pinv(sol.jac.T @ sol.jac)
    cov = cov * np.outer(s, s)  # from u = t/scale to t
    t = np.append(sol.x * scale[:n_free], [] if free else [cfix])
    return t, cov, chi2


def corrected_doping(cv: dict, fit: FitResult | None, *, area_m2: float,
                     temperature_K: float, semiconductor, noise=None) -> dict | None:
    """Doping and built-in voltage (a dict for model.json) from the reverse-bias points of
    ``cv`` (columns voltage_V, frequency_Hz, capacitance_F, compliance, optionally
    ac_level_V and noise_scale) with the C–V fit ``fit`` (its values correct the
    readings; see the module notes). ``noise``: the meter's stated noise (a
    StatedNoise or (relative, floor [F])), else the C–V fit's estimate weights the
    points. "message" says why when they cannot be read."""
    from pnbench.errors import BadInput
    from pnbench.modeling.network import non_depletion_capacitance

    v = np.asarray(cv["voltage_V"], dtype=float).ravel()
    f = np.asarray(cv["frequency_Hz"], dtype=float).ravel()
    c = np.asarray(cv["capacitance_F"], dtype=float).ravel()
    ok = np.isfinite(v) & np.isfinite(c) & (c > 0) & (v <= 0) & np.isfinite(f)
    if cv.get("compliance") is not None:
        ok &= ~np.asarray(cv["compliance"], dtype=bool).ravel()
    level = cv.get("ac_level_V")
    level = None if level is None else np.broadcast_to(
        np.asarray(level, dtype=float).ravel(), v.shape)[ok]
    scale = cv.get("noise_scale")
    scale = np.ones(np.count_nonzero(ok)) if scale is None else np.broadcast_to(
        np.asarray(scale, dtype=float).ravel(), v.shape)[ok]
    scale = np.where(np.isfinite(scale) & (scale > 0), scale, 1.0)
    v, f, c = v[ok], f[ok], c[ok]
    try:
        area = depletion._check_area(area_m2)
        eps, name = depletion._permittivity_of(semiconductor)
        if np.unique(v).size < MIN_POINTS:
            raise BadInput(f"need at least {MIN_POINTS} distinct reverse biases, found "
                           f"{np.unique(v).size}")
    except BadInput as exc:
        return {"message": f"doping not determined: {exc}", "area_m2": area_m2}
    values = dict(fit.values) if fit is not None and fit.success else None
    y, cfix, sd_cfix, free = c, 0.0, math.inf, False
    if values is not None:
        rest = {k: x for k, x in values.items() if k != "CFIX"}
        y = c - non_depletion_capacitance(rest, v, f, temperature_K) \
            - level_excess(values, v, level)
        if "CFIX" in values:
            cfix, sd_cfix = float(values["CFIX"]), float(fit.sigmas.get("CFIX", math.inf))
            free = abs(values.get("M", 0.5) - 0.5) <= ABRUPT_M_TOLERANCE
    rel, floor, estimated = _noise(fit, noise)
    sigma = (rel * np.abs(y) + floor) * scale
    try:
        t, cov, chi2 = _line(v, y, sigma, cfix, free)
    except (BadInput, ValueError, np.linalg.LinAlgError) as exc:
        return {"message": f"doping not determined: {exc}", "area_m2": area_m2}
    cov = cov * (chi2 if estimated else max(chi2, 1.0))
    slope, v0 = float(t[0]), float(t[1])
    if not slope < 0:  # 1/Cj² must fall as V rises
        return {"message": "doping not determined: 1/C^2 does not fall with voltage; "
                           "these points are not a depletion capacitance", "area_m2": area_m2}
    q = constants.e
    doping = -2.0 / (q * eps * area**2 * slope)
    out = {"doping_per_m3": doping,
           "doping_sigma_per_m3": doping * math.sqrt(max(cov[0, 0], 0.0)) / -slope,
           "built_in_voltage_V": v0 + thermal_voltage(temperature_K),
           "built_in_sigma_V": math.sqrt(max(cov[1, 1], 0.0)),
           "material": name, "area_m2": area, "n_points": int(v.size),
           "relative_rms_residual": _rms_residual(v, y, t),
           "method": "weighted fit of C = CFIX + (slope*(V - V0))^-1/2 to the reverse-bias "
                     "points" + (", CFIX fitted with the line" if free else "")}
    if free:
        out["fixture_capacitance_F"] = {"value": float(t[2]),
                                        "sigma": math.sqrt(max(cov[2, 2], 0.0))}
    elif cfix and math.isfinite(sd_cfix) and sd_cfix > 0:
        shifted, _, _ = _line(v, y, sigma, cfix + sd_cfix, False)
        out["doping_sigma_per_m3"] = math.hypot(
            out["doping_sigma_per_m3"], doping + 2.0 / (q * eps * area**2 * shifted[0]))
        out["built_in_sigma_V"] = math.hypot(out["built_in_sigma_V"], shifted[1] - v0)
    if values is not None:
        out["corrected"] = ("diffusion, series-resistance and test-level parts of the fitted "
                            "network removed, the fixture capacitance "
                            + ("fitted with the line" if free else "held at the C-V fit's"))
    gap = band_gap_flag(out["built_in_voltage_V"], semiconductor)
    if gap:
        out["artefact"] = gap
    return out


def _rms_residual(v, y, t) -> float:
    """rms of (fit - data)/data in 1/Cj² (the line's relative misfit)."""
    inv = 1.0 / (y - t[2]) ** 2
    line = t[0] * (v - t[1])
    return float(np.sqrt(np.mean(((line - inv) / inv) ** 2)))
