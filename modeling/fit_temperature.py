"""One model from measurements at several temperatures: EG, XTI and the coefficients.

Order of work:

1. Each temperature on its own: ``joint.fit_all`` (I–V, C–V, admittance as they come).
2. One global fit of every forward I–V point of every temperature together
   (fit_global): EG, XTI (when three temperatures or more separate it from EG), ln IS
   and N at TNOM, RS and TRS, with sigmas and their correlation. Two temperatures give
   two values of IS for three unknowns (IS, EG, XTI): XTI is then held at the
   simulator's default 3 and left off the model (so a simulator uses the same 3).
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
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pnbench.modeling import joint
from pnbench.modeling import temperature as tm
from pnbench.modeling.fit_global import SIGNIFICANT, Forward, forward_points, global_iv_fit
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams


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


def _line_fit(t: np.ndarray, y: np.ndarray, s: np.ndarray, tnom: float):
    """Weighted line y = a + b*(t - tnom): (a, b, cov); sigma scaled by the scatter when
    there are more points than parameters."""
    known = np.isfinite(s) & (s > 0)
    w = 1.0 / np.where(known, s, np.max(s[known]) if known.any() else 1.0) ** 2
    x = np.column_stack([np.ones_like(t), t - tnom]) * np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(x, y * np.sqrt(w), rcond=None)
    r_inv = np.linalg.inv(np.linalg.qr(x, mode="r"))  # stable when one sigma is tiny
    cov = r_inv @ r_inv.T
    dof = t.size - 2
    if dof > 0:  # the scatter speaks; stated sigmas only as a floor
        r = (y - coef[0] - coef[1] * (t - tnom)) * np.sqrt(w)
        s2 = float(r @ r) / dof
        cov = cov * (max(s2, 1.0) if known.all() else s2)
    elif not known.all():
        cov = np.full((2, 2), math.inf)
    return float(coef[0]), float(coef[1]), cov


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
    fixture = jf.model.extras.get("fixture_capacitance_F")
    if isinstance(fixture, dict) and isinstance(fixture.get("value"), (int, float)):
        row["CFIX"], row["CFIX_sigma"] = fixture["value"], fixture.get("sigma")
    return row


def fit_over_temperature(sets: Sequence[tuple[float, Mapping[str, Mapping[str, Any]]]], *,
                         tnom_K: float | None = None, area_m2: float | None = None,
                         ibv_A: float | None = None, reference_V: float | None = None,
                         extras: Mapping[str, Any] | None = None,
                         noise: Mapping[str, Any] | None = None) -> TemperatureFit:
    """One model from (temperature_K, data) pairs; ``data`` as joint.fit_all takes it,
    ``noise`` the instruments' stated noise (joint.fit_all) at every temperature.

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
                                        reference_V=reference_V, ibv_A=ibv_A,
                                        noise=noise))
                      for t in temps)
    forward = [f for f in (forward_points(pooled[t], t) for t in temps) if f is not None]
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


def _n_drift(forward: list[Forward], tnom: float, notes: list[str]) -> dict | None:
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
