"""The C–V fit on the two-terminal network the LCR meter sees (DC part known from I–V).

At each bias and frequency the meter reads the whole network, not the junction: RS in
series with gd + 1/RSH + j*w*(Cj + Cd), Cd = TT*gd, with the fixture's stray
capacitance CFIX across the terminals (docs/physics.md §4-5; the meter reports
the parallel C = Im Y / w). Taking the reading as Cj biases CJO, VJ and M wherever gd*RS,
w*RS*C, Cd or CFIX is not negligible: a rectifier's diffusion capacitance at 0 V, a hot
Schottky's RS*gd, a fixture's fraction of a picofarad. So the capacitance of every C–V
point (reverse and forward, every frequency) is fitted with that network, IS, N, RS and
RSH held at the I–V fit's values (their uncertainty carried into the result by
``heldcov``), and CJO, VJ, M, TT and CFIX free. TT and CFIX are kept only when the data
set them three standard errors apart from zero (the rule RS and RSH follow); the
message says which way each went and why.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from pnbench.modeling import fit_cv, heldcov, junction, lsq
from pnbench.modeling.fitresult import FitResult, empty_result
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K

#: The DC parameters an I–V fit supplies and the network fit holds.
DC_NAMES = ("IS", "N", "RS", "RSH")
TT_ABSENT = ("TT not determined: the diffusion capacitance never stands three standard "
             "errors above the depletion capacitance")


def network_model(temperature_K: float, fc: float,
                  with_fixture: bool | None) -> fit_cv.AdmittanceModel:
    """The admittance model with CFIX optional (None), forced (True) or absent (False)."""
    model = MeterModel(temperature_K, fc, fixture=with_fixture)
    params = [dataclasses.replace(p, absent_reason=TT_ABSENT) if p.name == "TT" else p
              for p in model.params]
    model.params = tuple(params)
    return model


class SplitModel:
    """The network's parallel C in two channels: points at V <= 0 and at V > 0.

    Each channel gets its own noise model (estimated from its residuals when not
    stated): forward readings carry the test signal's distortion of the exponential
    conductance and diffusion capacitance (a relative error of order (a/(N*Vt))**2/8
    at an AC amplitude a), which must not set the weights of the reverse points that
    fix CJO, VJ, M and CFIX.

    The forward channel is scaled per point by w/|Y| of the reading: a meter's noise is
    a fraction of |Y|, so on C it is rel*|Y|/w, which grows with the conductance; on
    C*w/|Y| it is the constant rel, which the noise model's floor takes. The scale is
    read from the data, not the model, so it only sets weights.
    """

    channels = ("lin", "lin")

    def __init__(self, inner: fit_cv.AdmittanceModel, scale: np.ndarray):
        self.inner = inner
        self.params = inner.params
        self.index = inner.index
        self.scale = scale

    def predict(self, t, x, active):
        y, jac = self.inner.predict(t, x, active)
        y2 = np.column_stack([y[:, 0], y[:, 0] * self.scale])
        if jac is None:
            return y2, None
        return y2, np.stack([jac[:, 0, :], jac[:, 0, :] * self.scale[:, None]], axis=1)


#: Points evaluated at once in the describing function: its grids are points x phases
#: complex values, which for a long run's C-V points would take gigabytes at once.
_CHUNK = 16_384
#: Samples of the test signal's period in the describing function (the integrand is
#: periodic and smooth, so the trapezoid rule converges fast; amplitude <~ 2 N*Vt).
_PHASES = 16


class MeterModel(fit_cv.AdmittanceModel):
    """The admittance the meter reads at its test-signal level: x = (V, f, a_rms).

    A test signal of amplitude a on the exponential junction is not small against
    N*Vt at forward bias: the fundamental of the current is the describing function
    Y = mean(2 sin(t)**2 * Yj(Vd + a_j cos t)) over one period (the in-phase and
    quadrature parts of a conductance and charge driven by a cosine), with a_j the part
    of the amplitude across the junction (RS takes the rest); its relative change of gd
    and Cd is ~(a_j/(N*Vt))**2/8. Where a is 0 or unknown (NaN) the small-signal form.
    """

    def _y(self, t, x):
        if x.shape[1] < 3 or not np.any(np.nan_to_num(x[:, 2]) > 0):
            return super()._y(t, x)
        if len(x) > _CHUNK:  # the same values, with temporaries of a bounded size
            return np.concatenate([self._described(t, x[k:k + _CHUNK])
                                   for k in range(0, len(x), _CHUNK)])
        return self._described(t, x)

    def _described(self, t, x):
        """The describing-function admittance of the rows of x (see the class notes)."""
        from pnbench.modeling.smallsignal import junction_admittance

        p = self.diode(t)
        v, f = x[:, 0], x[:, 1]
        amp = np.sqrt(2.0) * np.nan_to_num(x[:, 2])
        i0 = np.asarray(junction.current(v, p, self.temperature_K), dtype=float)
        vd0 = v - i0 * p.RS
        y_small = junction_admittance(vd0, f, p, self.temperature_K)
        a_j = amp / np.abs(1.0 + p.RS * y_small)
        phase = 2 * np.pi * (np.arange(_PHASES) + 0.5) / _PHASES
        weight = 2.0 * np.sin(phase) ** 2
        grid = vd0[:, None] + a_j[:, None] * np.cos(phase)[None, :]
        yj = junction_admittance(grid, f[:, None], p, self.temperature_K)
        y_eff = np.where(amp > 0, (yj * weight).mean(axis=1), y_small)
        y = y_eff / (1.0 + p.RS * y_eff)
        w = 2 * np.pi * f
        c = y.imag / w + (t[8] if len(t) > 8 else 0.0)
        return np.column_stack([c, y.real])


def _tt_start(model, t0, x, y, use) -> float:
    """TT from the forward excess capacitance over the TT = 0 prediction (least squares
    of the excess against dC/dTT)."""
    k = model.index["TT"]
    t_lo, t_hi = t0.copy(), t0.copy()
    t_lo[k], t_hi[k] = 0.0, 1e-9
    c0 = model.predict(t_lo, x, None)[0][:, 0]
    d = (model.predict(t_hi, x, None)[0][:, 0] - c0) / 1e-9
    sel = use & (x[:, 0] > 0) & (d > 0) & np.isfinite(d)
    if not sel.any():
        return 0.0
    excess = y[sel, 0] - c0[sel]
    tt = float(excess @ d[sel] / (d[sel] @ d[sel]))
    return max(tt, 0.0) if math.isfinite(tt) else 0.0


def fit_network(voltage_V, frequency_Hz, capacitance_F, conductance_S=None, *,
                fixed: dict[str, float], ac_level_V=None,
                noise: tuple[float, float] | None = None,
                held_covariance: np.ndarray | None = None, compliance=None, use=None,
                temperature_K: float = DEFAULT_TEMPERATURE_K,
                with_fixture: bool | None = None, fc: float = 0.5,
                kind: str = "cv") -> FitResult:
    """CJO, VJ, M, TT, CFIX from the parallel capacitance of every C–V point.

    ``fixed`` holds IS, N and RS (and RSH; RS = 0 and RSH = inf hold them absent) from
    the I–V fit; ``held_covariance`` is their covariance in the order of DC_NAMES that
    are in ``fixed`` and finite (values' units), carried into the sigmas.
    ``ac_level_V``: the meter's test-signal level (rms) per point or one value; where
    known its distortion of the forward readings is modelled (MeterModel). ``noise``:
    the meter's stated noise (relative of |Y|, floor as a capacitance in F), else it is
    estimated from the residuals.
    """
    x, y, elig = fit_cv.cv_arrays(voltage_V, frequency_Hz, capacitance_F, conductance_S,
                                   compliance, use)
    y, elig = y.copy(), elig.copy()
    level = np.full(len(x), np.nan) if ac_level_V is None else np.broadcast_to(
        np.asarray(ac_level_V, dtype=float).ravel(), (len(x),))
    x = np.column_stack([x, level])
    w = 2 * np.pi * x[:, 1]
    with np.errstate(all="ignore"):
        k_phase = w / np.abs(y[:, 1] + 1j * w * y[:, 0])  # w/|Y|: C*w/|Y| has even noise
    k_phase = np.where(np.isfinite(k_phase) & (k_phase > 0) & np.isfinite(y[:, 1]),
                       k_phase, 1.0 / np.maximum(np.abs(y[:, 0]), 1e-300))
    elig[:, 1] = False  # the conductance is not needed: the DC part is held
    elig[:, 0] &= y[:, 0] > 0
    n = len(x)
    if np.count_nonzero(elig[:, 0]) < fit_cv.MIN_CV_POINTS:
        return empty_result(kind, n, f"too few C-V points ({np.count_nonzero(elig[:, 0])}; "
                                     f"need {fit_cv.MIN_CV_POINTS})")
    model = network_model(temperature_K, fc, with_fixture)
    k = model.index
    v = x[:, 0]
    t0 = np.zeros(len(model.params))
    rev = elig[:, 0] & (v <= 0)
    if np.count_nonzero(rev) < 3:
        rev = elig[:, 0] & (v <= np.sort(v[elig[:, 0]])[min(3, int(elig[:, 0].sum())) - 1])
    t0[k["CJO"]:k["M"] + 1] = fit_cv.depletion_start(v[rev], y[rev, 0], fc)
    active = np.ones(len(model.params), dtype=bool)
    for name in DC_NAMES:
        value = fixed.get(name, {"RS": 0.0, "RSH": math.inf}.get(name))
        if value is None:
            return empty_result(kind, n, f"network fit needs {name} from an I-V fit")
        t0[k[name]] = model.params[k[name]].to_t(value)
        active[k[name]] = False
    t0[k["TT"]] = _tt_start(model, t0, x, y, elig[:, 0])
    split = SplitModel(model, k_phase)
    y = np.column_stack([y[:, 0], y[:, 0] * k_phase])
    elig = np.column_stack([elig[:, 0] & (v <= 0), elig[:, 0] & (v > 0)])
    known = None
    if noise is not None:
        # reverse: rel*C + floor; forward, scaled by w/|Y|: rel + floor*w/|Y|, the last
        # ~ (floor/C)*(C*w/|Y|) with C's median there
        rel, floor = float(noise[0]), float(noise[1])
        fwd = elig[:, 1] & (y[:, 0] > 0)
        c_typ = float(np.median(y[fwd, 0] / k_phase[fwd])) if fwd.any() else math.inf
        known = lsq.Noise((rel, floor / c_typ), (floor, rel), estimated=False, linear=True)
    state = lsq.fit(split, x, y, elig, t0, active, noise=known)
    model = split
    held = [k[nm] for nm in DC_NAMES if nm in fixed and _finite_held(model, k[nm], fixed[nm])]
    extra_cov = None
    if held_covariance is not None and held:
        extra_cov = heldcov.propagated(model, state, x, y, np.array(held),
                                       heldcov.to_t_space(model, state.t, held,
                                                          held_covariance))
    out = lsq.to_result(model, state, kind, n, extras=fit_cv.held_extras(model, fixed),
                        min_rows=fit_cv.MIN_CV_POINTS, x=x, y=y,
                        extra_cov_t=extra_cov)
    return _with_fixture_note(out, model, state)


def _finite_held(model, j: int, value: float) -> bool:
    p = model.params[j]
    return math.isfinite(value) and not (p.optional and p.to_t(value) == p.null)


def _with_fixture_note(result: FitResult, model, state: lsq.FitState) -> FitResult:
    """Say in the message what CFIX is and how firmly the data set it."""
    if "CFIX" not in result.values or not result.success:
        return result
    value, sd = result.values["CFIX"], result.sigmas["CFIX"]
    z = abs(value) / sd if sd > 0 and math.isfinite(sd) else math.inf
    note = (f"fixture capacitance CFIX = {value * 1e12:.4g} pF +- {sd * 1e12:.2g} pF fitted "
            f"({z:.0f} standard errors from none): the bench's, not the device's; an open "
            f"correction removes it")
    return dataclasses.replace(result, message=f"{result.message}; {note}")


def non_depletion_capacitance(values, voltage_V, frequency_Hz,
                              temperature_K: float = DEFAULT_TEMPERATURE_K,
                              fc: float = 0.5) -> np.ndarray:
    """What the fitted network adds to Cj in the meter's parallel C (fixture, diffusion
    capacitance, the effect of RS): subtract it from readings to get Cj."""
    from pnbench.modeling.params import DiodeParams
    from pnbench.modeling.smallsignal import depletion_capacitance, device_admittance

    if not all(k in values for k in ("CJO", "VJ", "M")):
        return np.zeros(np.shape(voltage_V))
    p = DiodeParams(IS=values.get("IS", 1e-300), N=values.get("N", 1.0),
                    RS=values.get("RS", 0.0), RSH=values.get("RSH", math.inf),
                    CJO=values["CJO"], VJ=values["VJ"], M=values["M"],
                    TT=values.get("TT", 0.0), FC=fc)
    v = np.asarray(voltage_V, dtype=float)
    f = np.asarray(frequency_Hz, dtype=float)
    with np.errstate(all="ignore"):
        y = device_admittance(v, f, p, temperature_K)
        cp = np.imag(y) / (2 * np.pi * f) + values.get("CFIX", 0.0)
        out = cp - depletion_capacitance(v, p)
    return np.where(np.isfinite(out), out, 0.0)


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


def corrected_doping(cv: dict, fit: FitResult | None, *, area_m2: float,
                     temperature_K: float, semiconductor) -> dict | None:
    """Mott–Schottky doping and Vbi on the capacitance less what the fitted network adds
    to Cj (fixture, diffusion, RS), CFIX's uncertainty carried into both sigmas; a Vbi
    above the band gap is flagged as an artefact."""
    from pnbench.modeling.fit_cv import doping

    def run(values):
        c = cv["capacitance_F"]
        if values is not None:
            c = c - non_depletion_capacitance(values, cv["voltage_V"], cv["frequency_Hz"],
                                              temperature_K)
        return doping(cv["voltage_V"], c, area_m2=area_m2, temperature_K=temperature_K,
                      semiconductor=semiconductor, compliance=cv["compliance"])

    values = dict(fit.values) if fit is not None and fit.success else None
    out = run(values)
    if out is None or "doping_per_m3" not in out:
        return out
    if values is not None:
        out["corrected"] = ("fixture, diffusion and series-resistance parts of the fitted "
                            "network removed before the line")
        sd = fit.sigmas.get("CFIX", math.inf)
        if "CFIX" in values and math.isfinite(sd) and sd > 0:
            shifted = run({**values, "CFIX": values["CFIX"] + sd})
            if shifted is not None and "doping_per_m3" in shifted:
                for key, sig in (("doping_per_m3", "doping_sigma_per_m3"),
                                 ("built_in_voltage_V", "built_in_sigma_V")):
                    out[sig] = math.hypot(out[sig], shifted[key] - out[key])
    gap = band_gap_flag(out["built_in_voltage_V"], semiconductor)
    if gap:
        out["artefact"] = gap
    return out
