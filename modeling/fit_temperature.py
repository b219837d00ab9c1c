"""One model from measurements at several temperatures: EG, XTI and the coefficients.

Order of work:

1. Each temperature on its own: ``joint.fit_all`` (I–V, C–V, admittance as they come).
2. One global fit of every forward I–V point of every temperature together, with the
   card's own temperature law (modeling.temperature, the reference simulator's): shared
   ln IS and N at TNOM, RS at TNOM with TRS when RS shows at two temperatures or more,
   EG, and XTI when three temperatures or more separate it from EG. Residuals are in
   ln I, each temperature weighted by the scatter its own fit left; sigmas and the
   correlation come from the Jacobian, cov = s^2 (J^T J)^-1 (docs/physics.md §9).
   Two temperatures give two values of IS for three unknowns (IS, EG, XTI): XTI is then
   held at the simulator's default 3 and left off the model (so a simulator uses the
   same 3), and the message says so.
3. Straight lines through the per-temperature results: BV(T) gives TCV (BV - TCV*dt,
   the simulator's TLEV = 0 form); N(T) gives N's drift, reported (the card has no
   N(T)) when it stands three sigma from zero.
4. Capacitance values from the temperature nearest TNOM that has them, referred to TNOM
   through the inverse of the simulator's VJ(T) and CJO(T) (temperature.params_at_tnom).

The ModelSet holds its values at TNOM (``temperature_K``), by default the measured
temperature nearest 300.15 K; ``extras["temperatures"]`` lists the per-temperature
results (the Arrhenius figure's points), ``extras["fits"]["temperature"]`` the global fit.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy import optimize

from pnbench.modeling import fit_iv, joint, junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.fitresult import FitResult, correlation_from_covariance, empty_result
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

#: XTI held when only two temperatures are measured (the simulator default).
HELD_XTI = 3.0
#: A drift or coefficient is reported when it stands this many sigmas from zero.
SIGNIFICANT = 3.0
_IV_KINDS = ("iv", "iv_forward", "iv_reverse")


@dataclass(frozen=True)
class TemperatureFit:
    """The model over temperature, the global fit and each temperature's own fit."""

    model: ModelSet
    result: FitResult
    per_temperature: tuple[tuple[float, joint.JointFit], ...]
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def message(self) -> str:
        return self.result.message


@dataclass
class _Forward:
    t: float
    v: np.ndarray
    i: np.ndarray
    g_sh: float
    scale: float
    fit: FitResult


def _forward_points(data: Mapping[str, Mapping[str, Any]], t: float) -> _Forward | None:
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
    used = np.asarray(r.used, bool) & (i > 0)
    rsh = r.values.get("RSH", math.inf)
    p = DiodeParams(IS=r.values["IS"], N=r.values["N"], RS=r.values.get("RS", 0.0),
                    RSH=rsh)
    resid = np.log(junction.current(v[used], p, t)) - np.log(i[used])
    scale = float(np.sqrt(np.mean(resid ** 2))) if resid.size else 1.0
    return _Forward(t, v[used], i[used], 0.0 if math.isinf(rsh) else 1.0 / rsh,
                    max(scale, 1e-9), r)


def _line_fit(t: np.ndarray, y: np.ndarray, s: np.ndarray, tnom: float):
    """Weighted line y = a + b*(t - tnom): (a, b, cov); sigma scaled by the scatter when
    there are more points than parameters."""
    known = np.isfinite(s) & (s > 0)
    w = 1.0 / np.where(known, s, np.max(s[known]) if known.any() else 1.0) ** 2
    x = np.column_stack([np.ones_like(t), t - tnom]) * np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(x, y * np.sqrt(w), rcond=None)
    cov = np.linalg.inv(x.T @ x)
    dof = t.size - 2
    if dof > 0:  # the scatter speaks; stated sigmas only as a floor
        r = (y - coef[0] - coef[1] * (t - tnom)) * np.sqrt(w)
        s2 = float(r @ r) / dof
        cov = cov * (max(s2, 1.0) if known.all() else s2)
    elif not known.all():
        cov = np.full((2, 2), math.inf)
    return float(coef[0]), float(coef[1]), cov


class _Global:
    """Residuals of every forward point at every temperature for one parameter vector."""

    def __init__(self, sets: list[_Forward], tnom: float, names: tuple[str, ...],
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


def _start(sets: list[_Forward], tnom: float, with_xti: bool) -> dict[str, float]:
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


def global_iv_fit(sets: list[_Forward], tnom: float) -> FitResult:
    """The global forward fit over temperature (see the module notes); a TRS that does
    not stand SIGNIFICANT sigmas from zero is refitted as absent (0, the card default)."""
    result = _global_iv_fit(sets, tnom, with_trs=True)
    if "TRS" in result.values and result.success and \
            abs(result.values["TRS"]) < SIGNIFICANT * result.sigmas["TRS"]:
        again = _global_iv_fit(sets, tnom, with_trs=False)
        if again.success:
            return replace(again, message=again.message + (
                f"; TRS not determined ({result.values['TRS']:.3g} +- "
                f"{result.sigmas['TRS']:.2g} /K, within {SIGNIFICANT:g} sigma of 0)"))
    return result


def _global_iv_fit(sets: list[_Forward], tnom: float, with_trs: bool) -> FitResult:
    temps = sorted({s.t for s in sets})
    n_points = int(sum(s.v.size for s in sets))
    if len(temps) < 2:
        return empty_result("temperature", n_points, "one temperature: EG and XTI need "
                            "forward I-V at two temperatures or more")
    with_xti = len(temps) >= 3
    n_rs = len({s.t for s in sets if "RS" in s.fit.values})
    start = _start(sets, tnom, with_xti)
    names = ["lnIS", "N", "EG"] + (["XTI"] if with_xti else [])
    names += (["RS"] if n_rs >= 1 else []) + (["TRS"] if n_rs >= 2 and with_trs else [])
    held = {k: v for k, v in start.items() if k not in names}
    if n_rs == 0:
        held["RS"] = 0.0
    g = _Global(sets, tnom, tuple(names), held)
    x0 = np.array([start[k] for k in names])
    sol = optimize.least_squares(g.residuals, x0, method="lm", x_scale="jac",
                                 xtol=1e-12, ftol=1e-12, max_nfev=4000)
    x = sol.x
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
    if n_rs == 1:
        msg += "; RS shows at one temperature only: TRS not determined"
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


def default_tnom(temperatures: Sequence[float]) -> float:
    """The measured temperature nearest the simulators' 300.15 K."""
    return min(temperatures, key=lambda t: abs(t - DEFAULT_TEMPERATURE_K))


def _sigma(r: FitResult, name: str) -> float | None:
    s = r.sigmas.get(name, math.inf)
    return float(s) if math.isfinite(s) else None


def _row(t: float, jf: joint.JointFit) -> dict[str, Any]:
    row: dict[str, Any] = {"temperature_K": t}
    for name, value in jf.model.values.items():
        row[name] = value
        row[f"{name}_sigma"] = jf.model.sigma(name)
    return row


def fit_over_temperature(sets: Sequence[tuple[float, Mapping[str, Mapping[str, Any]]]], *,
                         tnom_K: float | None = None, area_m2: float | None = None,
                         ibv_A: float | None = None, reference_V: float | None = None,
                         extras: Mapping[str, Any] | None = None) -> TemperatureFit:
    """One model from (temperature_K, data) pairs; ``data`` as joint.fit_all takes it.

    Pairs at the same temperature are fitted together. ValueError when ``sets`` is empty
    or a temperature is not above 0 K.
    """
    merged: dict[float, dict[str, list]] = {}
    for t, data in sets:
        t = float(t)
        if not (math.isfinite(t) and t > 0):
            raise ValueError(f"temperature must be above 0 K, got {t!r}")
        for kind, cols in data.items():
            if cols is not None:
                merged.setdefault(t, {}).setdefault(kind, []).append(cols)
    if not merged:
        raise ValueError("no data to fit")
    temps = sorted(merged)
    tnom = float(tnom_K) if tnom_K is not None else default_tnom(temps)
    pooled = {t: {k: _concat(parts) for k, parts in kinds.items()}
              for t, kinds in merged.items()}
    with np.errstate(all="ignore"):
        per_t = tuple((t, joint.fit_all(pooled[t], temperature_K=t, area_m2=area_m2,
                                        reference_V=reference_V, ibv_A=ibv_A))
                      for t in temps)
    forward = [f for f in (_forward_points(pooled[t], t) for t in temps) if f is not None]
    result = global_iv_fit(forward, tnom)
    notes: list[str] = []
    values: dict[str, float] = {}
    sigmas: dict[str, float | None] = {}
    base = min(per_t, key=lambda pair: abs(pair[0] - tnom))
    if base[0] == tnom:
        for name in ("RSH",):
            if name in base[1].model.values:
                values[name], sigmas[name] = base[1].model.values[name], base[1].model.sigma(
                    name)
    if result.success:
        for name in result.names:
            values[name], sigmas[name] = result.values[name], _sigma(result, name)
    elif len(per_t) == 1 or not forward:
        for name in ("IS", "N", "RS"):
            if name in base[1].model.values:
                values[name] = base[1].model.values[name]
                sigmas[name] = base[1].model.sigma(name)
    _breakdown(per_t, tnom, values, sigmas, notes)
    _capacitance(per_t, tnom, values, sigmas, notes)
    drift = _n_drift(forward, tnom, notes)
    fits = {"temperature": result.summary()}
    more: dict[str, Any] = {
        "fits": fits,
        "temperatures": [_row(t, jf) for t, jf in per_t],
        "tnom_K": tnom,
    }
    if drift is not None:
        more["N_drift"] = drift
    if notes:
        more["temperature_notes"] = notes
    if area_m2 is not None:
        more["area_m2"] = float(area_m2)
    more.update(extras or {})
    model = ModelSet(values=values, sigmas=sigmas, temperature_K=tnom, extras=more)
    return TemperatureFit(model=model, result=result, per_temperature=per_t,
                          notes=tuple(notes))


def _concat(parts: list[Mapping[str, Any]]) -> Mapping[str, Any]:
    if len(parts) == 1:
        return parts[0]
    n = [np.asarray(p["voltage_V"]).size for p in parts]
    out: dict[str, Any] = {}
    for name in set().union(*parts):
        out[name] = np.concatenate([
            np.asarray(p[name]).ravel() if p.get(name) is not None
            else np.full(k, False if name == "compliance" else np.nan)
            for p, k in zip(parts, n, strict=True)])
    return out


def _breakdown(per_t, tnom, values, sigmas, notes) -> None:
    pts = [(t, jf.model.values["BV"], jf.model.sigma("BV"), jf.model.values.get("IBV"))
           for t, jf in per_t if "BV" in jf.model.values]
    if not pts:
        return
    if len(pts) == 1:
        t, bv, s, ibv = pts[0]
        if t == tnom:
            values["BV"], sigmas["BV"] = bv, s
            if ibv is not None:
                values["IBV"], sigmas["IBV"] = ibv, None
        else:
            notes.append(f"BV measured at {t:g} K only, not at TNOM: left out of the card")
        return
    t = np.array([p[0] for p in pts])
    bv = np.array([p[1] for p in pts])
    s = np.array([p[2] if p[2] is not None else math.nan for p in pts])
    a, b, cov = _line_fit(t, bv, s, tnom)
    values["BV"], sigmas["BV"] = a, float(math.sqrt(cov[0, 0]))
    if pts[0][3] is not None:
        values["IBV"], sigmas["IBV"] = pts[0][3], None
    sd = float(math.sqrt(cov[1, 1]))
    if abs(b) > SIGNIFICANT * sd:
        values["TCV"], sigmas["TCV"] = -b, sd
    else:
        notes.append(f"BV moves by {-b:.3g} +- {sd:.2g} V/K between the temperatures, "
                     f"within {SIGNIFICANT:g} sigma of 0: TCV left out")


def _capacitance(per_t, tnom, values, sigmas, notes) -> None:
    with_cv = [(t, jf) for t, jf in per_t if "CJO" in jf.model.values]
    if not with_cv:
        return
    t, jf = min(with_cv, key=lambda pair: abs(pair[0] - tnom))
    m = jf.model
    p = DiodeParams(CJO=m.values["CJO"], VJ=m.values.get("VJ", 1.0),
                    M=m.values.get("M", 0.5))
    try:
        back = tm.params_at_tnom(p, t, tnom)
    except ValueError as exc:
        notes.append(f"C-V at {t:g} K cannot be referred to TNOM {tnom:g} K ({exc})")
        return
    for name in ("CJO", "VJ", "M", "TT"):
        if name not in m.values:
            continue
        value = getattr(back, name) if name in ("CJO", "VJ") else m.values[name]
        sigma = m.sigma(name)
        if sigma is not None and name == "CJO":
            sigma *= value / m.values[name]
        elif sigma is not None and name == "VJ":
            sigma *= tnom / t
        values[name], sigmas[name] = value, sigma
    if t != tnom:
        notes.append(f"CJO and VJ measured at {t:g} K, referred to TNOM {tnom:g} K with "
                     f"the simulator's VJ(T) and CJO(T)")


def _n_drift(forward: list[_Forward], tnom: float, notes: list[str]) -> dict | None:
    temps = {f.t for f in forward}
    if len(temps) < 3:
        return None
    t = np.array([f.t for f in forward])
    n = np.array([f.fit.values["N"] for f in forward])
    s = np.array([f.fit.sigmas["N"] for f in forward])
    _, b, cov = _line_fit(t, n, s, tnom)
    sd = float(math.sqrt(cov[1, 1]))
    significant = bool(abs(b) > SIGNIFICANT * sd)
    if significant:
        notes.append(f"N drifts by {b:.3g} per K (+- {sd:.2g}) across the temperatures; "
                     f"the card holds one N, as the simulator has no N(T)")
    return {"slope_per_K": float(b), "sigma_per_K": sd, "significant": significant}
