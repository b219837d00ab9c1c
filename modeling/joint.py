"""Everything a run holds, fitted into one model: I–V, C–V and admittance together.

Order of work (each stage uses the one before):

1. Forward I–V (V > 0): IS, N, RS, RSH (fit_iv.fit_forward).
2. Reverse I–V (V < 0): BV at IBV, RSH, leakage (fit_reverse.fit_reverse).
3. C–V / admittance: with a conductance column and forward points the whole small-signal
   model is fitted in complex admittance (fit_cv.fit_admittance), holding IS, N, RS and
   RSH as the I–V fits found them when the run has I–V data (``dc_holds``: DC data pin
   them far more tightly, and a series resistance or shunt the I–V fits did not see is
   held absent; their uncertainty is left out of TT's sigma); without I–V the
   conductance against bias supplies IS, N, RS. Without conductance, CJO, VJ, M from the
   C–V points alone.
4. Mott–Schottky doping when the device area is known (depletion module).

The model.json document carries the values with sigmas and, under "fits", one
FitResult.summary() per stage (message, points used, reduced chi-square, correlation).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pnbench.modeling import combine
from pnbench.modeling.fitresult import FitResult, correlation_from_covariance, empty_result
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: Which fit supplies each model-card parameter first (later ones fill gaps).
PRIORITY = {
    "IS": ("iv_forward", "admittance"), "N": ("iv_forward", "admittance"),
    "RS": ("iv_forward", "admittance"), "RSH": ("iv_forward", "iv_reverse", "admittance"),
    "BV": ("iv_reverse",), "CJO": ("cv", "admittance"), "VJ": ("cv", "admittance"),
    "M": ("cv", "admittance"), "TT": ("cv", "admittance"),
}
#: The I–V fits that speak for a DC parameter. When one of them succeeded, the parameter
#: comes from I–V or not at all: an admittance fit supplies it only without such
#: evidence (a conductance read by an LCR meter also carries dielectric and fixture
#: losses, which a shunt fitted to it would mistake for a DC path).
IV_EVIDENCE = {"IS": ("iv_forward",), "N": ("iv_forward",), "RS": ("iv_forward",),
               "RSH": ("iv_forward", "iv_reverse")}
#: The fixture's parameters a C-V fit may find, and their model.json extras (the bench's,
#: never on the card): stray capacitance across the device, series resistance to it.
FIXTURE_EXTRAS = {"CFIX": "fixture_capacitance_F", "RFIX": "fixture_resistance_ohm"}
_IV_KINDS = ("iv", "iv_forward", "iv_reverse")
_CV_KINDS = ("cv", "admittance")


@dataclass(frozen=True)
class JointFit:
    """The run's model and the fits it came from (by kind)."""

    model: ModelSet
    results: dict[str, FitResult] = field(default_factory=dict)

    @property
    def message(self) -> str:
        return "; ".join(f"{k}: {r.message}" for k, r in self.results.items())


def _col(columns: Mapping[str, Any], name: str, n: int | None = None) -> np.ndarray:
    if name not in columns or columns[name] is None:
        return np.full(n if n is not None else 0, np.nan)
    out = np.asarray(columns[name], dtype=float).ravel()
    if out.size == 1 and n is not None and n != 1:  # one value for every point
        out = np.full(n, out[0])
    return out


def _pool(data: Mapping[str, Mapping[str, Any]], kinds: Sequence[str]) -> dict | None:
    parts = [data[k] for k in kinds if k in data and data[k] is not None]
    if not parts:
        return None
    out: dict[str, np.ndarray] = {}
    for name in ("voltage_V", "current_A", "frequency_Hz", "capacitance_F",
                 "conductance_S", "ac_level_V", "noise_scale"):
        cols = [_col(p, name, len(_col(p, "voltage_V"))) for p in parts]
        out[name] = cols[0] if len(cols) == 1 else np.concatenate(cols)  # one: no copy
    out["compliance"] = np.concatenate([
        np.asarray(p["compliance"], dtype=bool).ravel() if p.get("compliance") is not None
        else np.zeros(len(_col(p, "voltage_V")), dtype=bool) for p in parts])
    return out if out["voltage_V"].size else None


def fit_all(data: Mapping[str, Mapping[str, Any]], *,
            temperature_K: float = DEFAULT_TEMPERATURE_K, area_m2: float | None = None,
            reference_V: float | None = None, ibv_A: float | None = None,
            with_fixture: bool | None = None, semiconductor: str | float = "Si",
            extras: Mapping[str, Any] | None = None,
            noise: Mapping[str, Any] | None = None) -> JointFit:
    """Fit every kind of data present; ``data`` maps a kind ("iv", "iv_forward",
    "iv_reverse", "cv", "admittance") to columns named as in points.csv
    (voltage_V, current_A, frequency_Hz, capacitance_F, conductance_S, compliance) and
    optionally ac_level_V (the LCR meter's test-signal level, rms, one value or one per
    point: its distortion of forward readings is then modelled).

    All I–V kinds are pooled (forward and reverse split by the sign of V), as are the
    C–V kinds. ``noise``: the instruments' stated noise, {"iv": ..., "cv": ...}, each a
    fitnoise.StatedNoise, its JSON form or (relative, floor) (I–V: of the current, floor
    in A; C–V: of |Y|, floor as a capacitance in F); a fit is then judged against it
    (chi-square) instead of estimating it. An optional column ``noise_scale`` scales it
    per point (1/sqrt(NPLC x readings averaged) of the point's step). ``with_fixture``:
    None fits a fixture capacitance when the data determine it (3-sigma rule, reason in
    the message), True always, False never.
    """
    with np.errstate(all="ignore"):  # extreme trial points inside the solvers are expected
        return _fit_all(data, temperature_K, area_m2, reference_V, ibv_A, with_fixture,
                        semiconductor, extras, dict(noise or {}))


def _fit_all(data, temperature_K, area_m2, reference_V, ibv_A, with_fixture, semiconductor,
             extras, noise=None) -> JointFit:
    from pnbench.modeling import fit_iv

    results: dict[str, FitResult] = {}
    iv = _pool(data, _IV_KINDS)
    if iv is not None:
        v, i, comp = iv["voltage_V"], iv["current_A"], iv["compliance"]
        if np.any(v > 0):
            results["iv_forward"] = fit_iv.fit_forward(v, i, compliance=comp,
                                                       temperature_K=temperature_K,
                                                       noise=(noise or {}).get("iv"),
                                                       noise_scale=iv["noise_scale"])
        if np.any(v < 0):
            fwd = results.get("iv_forward")
            rs = fwd.values.get("RS") if fwd is not None and fwd.success else None
            results["iv_reverse"] = fit_iv.fit_reverse(
                v, i, compliance=comp, temperature_K=temperature_K, reference_V=reference_V,
                ibv_A=ibv_A, series_ohm=rs,
                series_sigma_ohm=fwd.sigmas.get("RS") if rs is not None else None,
                noise=(noise or {}).get("iv"), noise_scale=iv["noise_scale"])
        iv = v = i = comp = None  # a long run's I-V columns are not needed past here
    cv = _pool(data, _CV_KINDS)
    if cv is not None:
        from pnbench.modeling import fit_cv

        fixed = dc_holds(results.values())
        results.update(fit_cv.fit_cv_data(
            cv["voltage_V"], cv["frequency_Hz"], cv["capacitance_F"], cv["conductance_S"],
            compliance=cv["compliance"], temperature_K=temperature_K,
            with_fixture=with_fixture, fixed=fixed or None,
            held_covariance=dc_hold_covariance(results, fixed),
            ac_level_V=cv["ac_level_V"], noise=(noise or {}).get("cv"),
            noise_scale=cv["noise_scale"]))
    more = dict(extras or {})
    if cv is not None and area_m2 is not None:
        from pnbench.modeling import mottschottky

        doping = mottschottky.corrected_doping(cv, results.get("cv"), area_m2=area_m2,
                                               temperature_K=temperature_K,
                                               semiconductor=semiconductor,
                                               noise=(noise or {}).get("cv"))
        if doping is not None:
            depl = results.get("cv")
            m = depl.values.get("M") if depl is not None and depl.success else None
            if m is not None and "doping_per_m3" in doping and abs(m - 0.5) > 0.05:
                doping["note"] = (
                    f"the C-V fit gives M = {m:.3g}, not 0.5: 1/C^2 is not a straight line, "
                    "and the Mott-Schottky doping and built-in voltage, which assume an "
                    "abrupt one-sided junction, describe only an average (see N(W))")
            more["doping"] = doping
    if area_m2 is not None:
        more["area_m2"] = float(area_m2)
    return JointFit(model=model_from_results(results, temperature_K, more), results=results)


def fit_run(data: Mapping[str, Mapping[str, Any]], **options: Any) -> ModelSet:
    """The run's ModelSet (see fit_all for ``data`` and the options)."""
    return fit_all(data, **options).model


def dc_holds(results: Iterable[FitResult]) -> dict[str, float]:
    """IS, N, RS, RSH for an admittance fit to hold, from the I–V fits among ``results``.

    A successful forward fit gives IS and N, and RS (0, i.e. none, when it found none);
    RSH comes from the forward fit, else from a reverse fit that determined it, else it
    is held absent (inf) when a successful I–V fit looked for a shunt and found none.
    Nothing is held without a successful I–V fit (the admittance fit then supplies them).
    """
    results = [r for r in results if r is not None and r.success]
    out: dict[str, float] = {}
    fwd = [r for r in results if r.kind == "iv_forward"]
    if fwd:
        f = fwd[-1]
        out.update({k: f.values[k] for k in ("IS", "N") if k in f.values})
        out["RS"] = f.values.get("RS", 0.0)
    # as in the model: the forward fit's shunt first, else the best reverse one
    shunts = ([f] if fwd and "RSH" in f.values else
              sorted((r for r in results if r.kind == "iv_reverse" and "RSH" in r.values),
                     key=lambda r: r.relative_sigma("RSH")))
    if shunts:
        out["RSH"] = shunts[0].values["RSH"]
    elif any(r.kind in IV_EVIDENCE["RSH"] for r in results):
        out["RSH"] = math.inf
    return out


def dc_hold_covariance(results: Mapping[str, FitResult],
                       fixed: Mapping[str, float]) -> np.ndarray | None:
    """Covariance of the held IS, N, RS, RSH (network.DC_NAMES present, finite and not
    held absent), from the I-V fits that supplied them (independent fits: zero across)."""
    from pnbench.modeling.network import DC_NAMES

    names = [n for n in DC_NAMES if n in fixed and math.isfinite(fixed[n])
             and not (n == "RS" and fixed[n] == 0.0)]
    if not names:
        return None
    cov = np.zeros((len(names), len(names)))
    fwd = results.get("iv_forward")
    for a, na in enumerate(names):
        for b, nb in enumerate(names):
            if fwd is not None and fwd.success and na in fwd.names and nb in fwd.names \
                    and fwd.values[na] == fixed[na] and fwd.values[nb] == fixed[nb]:
                cov[a, b] = fwd.covariance[fwd.names.index(na), fwd.names.index(nb)]
            elif a == b:
                for r in results.values():
                    if r.success and na in r.values and r.values[na] == fixed[na]:
                        cov[a, a] = r.sigmas[na] ** 2
                        break
    return np.where(np.isfinite(cov), cov, 0.0)


def _sources(name: str, results: Mapping[str, FitResult]) -> tuple[str, ...]:
    """PRIORITY's sources of a parameter, less the admittance fit where I–V speaks."""
    sources = PRIORITY[name]
    evidence = IV_EVIDENCE.get(name, ())
    if any((r := results.get(k)) is not None and r.success for k in evidence):
        sources = tuple(k for k in sources if k != "admittance")
    return sources


def model_from_results(results: Mapping[str, FitResult], temperature_K: float,
                       extras: Mapping[str, Any] | None = None) -> ModelSet:
    """One ModelSet from fits of several kinds: PRIORITY decides who supplies what, and
    for IS, N, RS and RSH a successful I–V fit (IV_EVIDENCE) excludes the admittance fit,
    also where the I–V fit found the parameter not determined."""
    values: dict[str, float] = {}
    sigmas: dict[str, float | None] = {}
    for name in PRIORITY:
        for kind in _sources(name, results):
            r = results.get(kind)
            if r is not None and r.success and name in r.values:
                values[name] = r.values[name]
                s = r.sigmas[name]
                sigmas[name] = s if math.isfinite(s) else None
                break
    rev = results.get("iv_reverse")
    out: dict[str, Any] = {"fits": {k: r.summary() for k, r in results.items()}}
    _shunt(values, sigmas, results, out)
    if "BV" in values and rev is not None:
        values["IBV"] = float(rev.extras["IBV_A"])
        sigmas["IBV"] = None  # stated, not measured
        if rev.extras.get("BV_at_junction"):
            out["BV_terminal_V"] = rev.extras["BV_terminal_V"]
        else:
            terminal = values["BV"]
            values["BV"], sigmas["BV"] = combine.junction_bv(
                terminal, sigmas.get("BV"), values["IBV"], values.get("RS"),
                sigmas.get("RS"))
            if values["BV"] != terminal:
                out["BV_terminal_V"] = terminal
    if rev is not None:
        leak = combine.leakage_figure(dict(rev.extras))
        if leak is not None:
            out["leakage"] = leak
    for name, key in FIXTURE_EXTRAS.items():  # the bench's, beside the card's values
        for kind in ("admittance", "cv"):
            r = results.get(kind)
            if r is not None and name in r.values:
                out[key] = {"value": r.values[name], "sigma": _finite_or_none(r.sigmas[name])}
                break
    out.update(extras or {})
    model = ModelSet(values=values, sigmas=sigmas, temperature_K=temperature_K, extras=out)
    caution = model.breakdown_caution()
    if caution:  # said where the fit is read, not only in the card's comments
        model.extras["card_caution"] = caution
    return model


def _shunt(values, sigmas, results, out) -> None:
    """RSH from the better determined of the I-V estimates, or their combination."""
    if "RSH" not in values or not any(k in results for k in ("iv_forward", "iv_reverse")):
        return
    est = [(k, r.values["RSH"], r.sigmas["RSH"]) for k in ("iv_forward", "iv_reverse")
           if (r := results.get(k)) is not None and r.success and "RSH" in r.values]
    got = combine.combine_shunt(est)
    if got is not None and len(est) > 1:
        values["RSH"], sigmas["RSH"] = got[0], got[1]
        out["RSH_source"] = got[2]


def _finite_or_none(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def merge_results(kind: str, results: Sequence[FitResult],
                  masks: Sequence[np.ndarray]) -> FitResult:
    """One FitResult from fits of disjoint point sets (``masks`` place each fit's points
    among all of them). A name fitted twice keeps the estimate with the smaller relative
    sigma; the covariance is block-diagonal (the point sets are independent)."""
    n = int(sum(np.count_nonzero(m) for m in masks))
    if n == 0 or not results:
        return empty_result(kind, n, "waiting for points")
    chosen: dict[str, tuple[int, int]] = {}
    for k, r in enumerate(results):
        for j, name in enumerate(r.names):
            if name not in chosen or r.relative_sigma(name) < results[chosen[name][0]]\
                    .relative_sigma(name):
                chosen[name] = (k, j)
    names = tuple(chosen)
    cov = np.zeros((len(names), len(names)))
    for a, na in enumerate(names):
        for b, nb in enumerate(names):
            (ka, ja), (kb, jb) = chosen[na], chosen[nb]
            if ka == kb:
                cov[a, b] = results[ka].covariance[ja, jb]
    used = np.zeros(n, dtype=bool)
    extras: dict[str, Any] = {}
    chi2, rows = 0.0, 0
    for r, m in zip(results, masks, strict=True):
        if r.n_points == np.count_nonzero(m):
            used[np.asarray(m, dtype=bool)] = r.used
        extras.update({k: v for k, v in r.extras.items() if k not in extras})
        if math.isfinite(r.reduced_chi2):
            chi2 += r.reduced_chi2 * r.n_used
            rows += r.n_used
    return FitResult(
        kind=kind, names=names, values={nm: results[chosen[nm][0]].values[nm] for nm in names},
        sigmas={nm: results[chosen[nm][0]].sigmas[nm] for nm in names},
        covariance=cov, correlation=correlation_from_covariance(cov), used=used, n_points=n,
        reduced_chi2=chi2 / rows if rows else math.nan,
        success=any(r.success for r in results),
        message="; ".join(f"{r.kind}: {r.message}" for r in results if r.n_points),
        extras=extras,
    )
