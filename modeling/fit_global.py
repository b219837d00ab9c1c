"""The global forward I–V fit over temperature: every forward point of every
temperature in one least-squares fit with the card's temperature law.

Shared ln IS and N at TNOM, RS at TNOM with TRS, EG, and XTI when three temperatures or
more separate it from EG (modeling.temperature gives IS(T) and RS(T), the reference
simulator's laws). Residuals are in ln I. Round one weighs every temperature alike, round
two by the scatter round one left at that temperature (never below SCALE_FLOOR), so a
noisy temperature does not pull the others; sigmas and the correlation come from the
Jacobian, cov = s^2 (J^T J)^-1 (docs/physics.md §9). Parameters are searched within
_BOUNDS. RS and TRS that do not stand SIGNIFICANT sigmas from zero are refitted as absent.
Each temperature's own forward fit (fit_iv.fit_forward) gives the start values and the
floor below which its points are left out.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import optimize

from pnbench.modeling import fit_iv, junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.fitresult import FitResult, correlation_from_covariance, empty_result
from pnbench.modeling.params import DiodeParams

#: XTI held when only two temperatures are measured (the simulator default).
HELD_XTI = 3.0
#: A coefficient is kept when it stands this many sigmas from zero.
SIGNIFICANT = 3.0
#: Smallest scatter of ln I a temperature is weighted with (noise-free data).
SCALE_FLOOR = 1e-6
#: Where the global fit searches (ln IS, N, EG [eV], XTI, RS [ohm], TRS [1/K]).
_BOUNDS = {"lnIS": (-700.0, 30.0), "N": (0.3, 20.0), "EG": (0.05, 10.0),
           "XTI": (-100.0, 100.0), "RS": (0.0, 1e7), "TRS": (-0.05, 0.05)}
_IV_KINDS = ("iv", "iv_forward", "iv_reverse")


@dataclass
class Forward:
    """One temperature's forward points for the global fit (shunt held from its own
    fit as g_sh [S]; ``scale`` is the scatter of ln I it is weighted with)."""

    t: float
    v: np.ndarray
    i: np.ndarray
    g_sh: float
    scale: float
    fit: FitResult


def forward_points(data: Mapping[str, Mapping[str, Any]], t: float) -> Forward | None:
    """The forward points of one temperature's I–V data (columns as joint.fit_all takes
    them), or None when its own forward fit finds no IS."""
    parts = [data[k] for k in _IV_KINDS if data.get(k) is not None]
    if not parts:
        return None
    v = np.concatenate([np.asarray(p["voltage_V"], float).ravel() for p in parts])
    i = np.concatenate([np.asarray(p["current_A"], float).ravel() for p in parts])
    comp = np.concatenate([np.asarray(p["compliance"], bool).ravel()
                           if p.get("compliance") is not None else np.zeros(
                               np.asarray(p["voltage_V"]).size, bool) for p in parts])
    fwd = v > 0
    if np.count_nonzero(fwd) < fit_iv.MIN_POINTS:
        return None
    v, i, comp = v[fwd], i[fwd], comp[fwd]
    with np.errstate(all="ignore"):
        r = fit_iv.fit_forward(v, i, compliance=comp, temperature_K=t)
    if not r.success or "IS" not in r.values:
        return None
    # Every usable point above the floor the temperature's own fit found: that fit may
    # leave the top of the sweep out where it saw no RS, the global fit does not.
    ok = np.isfinite(v) & np.isfinite(i) & (i > 0) & ~comp
    used = np.asarray(r.used, bool) & ok
    floor = float(np.min(i[used])) if used.any() else 0.0
    keep = ok & (i >= floor)
    rsh = r.values.get("RSH", math.inf)
    return Forward(t, v[keep], i[keep], 0.0 if math.isinf(rsh) else 1.0 / rsh, 1.0, r)


class _Global:
    """Residuals of every forward point at every temperature for one parameter vector."""

    def __init__(self, sets: list[Forward], tnom: float, names: tuple[str, ...],
                 held: dict[str, float]):
        self.sets, self.tnom, self.names, self.held = sets, tnom, names, held

    def values(self, x: np.ndarray) -> dict[str, float]:
        out = dict(self.held)
        out.update(zip(self.names, (float(a) for a in x), strict=True))
        return out

    def residuals(self, x: np.ndarray) -> np.ndarray:
        p = self.values(x)
        rows = []
        for s in self.sets:
            n = p["N"]
            log_is = p["lnIS"] + tm.log_saturation_ratio(n, p["EG"], p["XTI"], s.t,
                                                          self.tnom)
            rs = max(p["RS"] * (1.0 + p["TRS"] * (s.t - self.tnom)), 0.0)
            try:
                d = DiodeParams(IS=math.exp(min(max(log_is, -690.0), 690.0)), N=n, RS=rs,
                                RSH=math.inf if s.g_sh == 0 else 1.0 / s.g_sh)
                with np.errstate(all="ignore"):
                    i = np.asarray(junction.current(s.v, d, s.t), float)
                r = (np.log(np.maximum(i, 1e-300)) - np.log(s.i)) / s.scale
            except (ValueError, OverflowError):
                r = np.full(s.v.size, 1e6)
            rows.append(np.where(np.isfinite(r), r, 1e6))
        return np.concatenate(rows)

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        cols = []
        for k in range(x.size):
            h = 1e-6 * max(abs(x[k]), 1e-3)
            up, dn = x.copy(), x.copy()
            up[k] += h
            dn[k] -= h
            cols.append((self.residuals(up) - self.residuals(dn)) / (2 * h))
        return np.column_stack(cols)


def _start(sets: list[Forward], tnom: float, with_xti: bool) -> dict[str, float]:
    """Start values from the per-temperature fits: one N, then ln IS(T) as a straight
    line in (1/Tn - 1/T) and ln(T/Tn) (EG and XTI over N)."""
    t = np.array([s.t for s in sets])
    n = float(np.median([s.fit.values["N"] for s in sets]))
    ln_is = np.array([math.log(s.fit.values["IS"]) for s in sets])
    k_q = junction.thermal_voltage(1.0)
    a = (1.0 / tnom - 1.0 / t) / k_q
    b = np.log(t / tnom)
    if with_xti:
        coef, *_ = np.linalg.lstsq(np.column_stack([np.ones_like(t), a, b]), ln_is,
                                   rcond=None)
        eg, xti = coef[1] * n, coef[2] * n
    else:
        coef, *_ = np.linalg.lstsq(np.column_stack([np.ones_like(t), a]),
                                   ln_is - HELD_XTI / n * b, rcond=None)
        eg, xti = coef[1] * n, HELD_XTI
    nearest = min(sets, key=lambda s: abs(s.t - tnom))
    ln_is_n = math.log(nearest.fit.values["IS"]) - tm.log_saturation_ratio(
        n, eg, xti, nearest.t, tnom)
    rs = [s.fit.values["RS"] for s in sets if "RS" in s.fit.values]
    return {"lnIS": ln_is_n, "N": n, "EG": float(eg), "XTI": float(xti),
            "RS": float(np.median(rs)) if rs else 0.0, "TRS": 0.0}


def global_iv_fit(sets: list[Forward], tnom: float) -> FitResult:
    """The global forward fit over temperature (see the module notes). RS and then TRS
    that do not stand SIGNIFICANT sigmas from zero are refitted as absent (0, the card
    default), and the message says so."""
    result = _global_iv_fit(sets, tnom, with_rs=True, with_trs=True)
    for name, options in (("RS", {"with_rs": False, "with_trs": False}),
                          ("TRS", {"with_rs": True, "with_trs": False})):
        if name in result.values and result.success and \
                abs(result.values[name]) < SIGNIFICANT * result.sigmas[name]:
            again = _global_iv_fit(sets, tnom, **options)
            if again.success:
                unit = "ohm" if name == "RS" else "/K"
                result = replace(again, message=again.message + (
                    f"; {name} not determined ({result.values[name]:.3g} +- "
                    f"{result.sigmas[name]:.2g} {unit}, within {SIGNIFICANT:g} sigma of 0)"))
    return result


def _global_iv_fit(sets: list[Forward], tnom: float, with_rs: bool,
                   with_trs: bool) -> FitResult:
    temps = sorted({s.t for s in sets})
    n_points = int(sum(s.v.size for s in sets))
    if len(temps) < 2:
        return empty_result("temperature", n_points, "one temperature: EG and XTI need "
                            "forward I-V at two temperatures or more")
    with_xti = len(temps) >= 3
    start = _start(sets, tnom, with_xti)
    names = ["lnIS", "N", "EG"] + (["XTI"] if with_xti else [])
    names += (["RS"] if with_rs else []) + (["TRS"] if with_rs and with_trs else [])
    held = {k: v for k, v in start.items() if k not in names}
    if not with_rs:
        held["RS"] = 0.0
    g = _Global(sets, tnom, tuple(names), held)
    x = np.array([start[k] for k in names])
    low = np.array([_BOUNDS[k][0] for k in names])
    high = np.array([_BOUNDS[k][1] for k in names])
    x = np.clip(x, low + 1e-9 * (high - low), high - 1e-9 * (high - low))
    for s in sets:  # round 1 weighs every temperature alike; round 2 by its own scatter
        s.scale = 1.0
    for _ in range(2):
        sol = optimize.least_squares(g.residuals, x, method="trf", bounds=(low, high),
                                     x_scale="jac", xtol=1e-13, ftol=1e-13, gtol=1e-13,
                                     max_nfev=2000)
        x = sol.x
        start_row = 0
        for s in sets:
            rows = g.residuals(x)[start_row:start_row + s.v.size] * s.scale
            start_row += s.v.size
            s.scale = max(float(np.sqrt(np.mean(rows ** 2))) if rows.size else 1.0,
                          SCALE_FLOOR)
    r = g.residuals(x)
    jac = g.jacobian(x)
    dof = r.size - x.size
    s2 = float(r @ r) / dof if dof > 0 else math.nan
    try:
        cov_x = np.linalg.inv(jac.T @ jac) * (s2 if math.isfinite(s2) else 1.0)
    except np.linalg.LinAlgError:
        cov_x = np.full((x.size, x.size), math.inf)
    fitted = g.values(x)
    card_names = tuple("IS" if k == "lnIS" else k for k in names)
    values = {c: (math.exp(fitted[k]) if k == "lnIS" else fitted[k])
              for c, k in zip(card_names, names, strict=True)}
    d = np.array([values["IS"] if k == "lnIS" else 1.0 for k in names])
    cov = cov_x * np.outer(d, d)
    sig = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    ok = bool(sol.success) and bool(np.all(np.isfinite(sig)))
    msg = (f"{len(temps)} temperatures from {temps[0]:.5g} K to {temps[-1]:.5g} K, "
           f"{n_points} forward points")
    if not with_xti:
        msg += (f"; XTI held at {HELD_XTI:g} (two temperatures cannot separate EG from "
                f"XTI; measure at a third)")
    extras = {"tnom_K": tnom, "temperatures_K": temps}
    if "XTI" in card_names:
        j_eg, j_xti = card_names.index("EG"), card_names.index("XTI")
        extras["EG_XTI_correlation"] = float(correlation_from_covariance(cov)[j_eg, j_xti])
    return FitResult(kind="temperature", names=card_names, values=values,
                     sigmas=dict(zip(card_names, sig.tolist(), strict=True)), covariance=cov,
                     correlation=correlation_from_covariance(cov),
                     used=np.ones(n_points, bool), n_points=n_points,
                     reduced_chi2=s2, success=ok,
                     message=msg if ok else f"global fit failed: {sol.message}",
                     extras=extras)
