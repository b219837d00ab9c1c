"""The C–V fit on the two-terminal network the LCR meter sees (DC part known from I–V).

At each bias and frequency the meter reads the whole network, not the junction: RS in
series with gd + 1/RSH + j*w*(Cj + Cd), Cd = TT*gd, with the fixture's stray
capacitance CFIX across the terminals and the fixture's series resistance RFIX (its
leads and contacts) between that and the meter (docs/physics.md §4-5; the meter reports
the parallel C = Im Y / w; the order is the one open/short correction assumes).
Taking the reading as Cj biases CJO, VJ and M wherever gd*RS, w*RS*C, Cd or CFIX is not
negligible: a rectifier's diffusion capacitance at 0 V, a hot Schottky's RS*gd, a
fixture's fraction of a picofarad. So the capacitance of every C–V
point (reverse and forward, every frequency) is fitted with that network, IS, N, RS and
RSH held at the I–V fit's values (their uncertainty carried into the result by
``heldcov``), and CJO, VJ, M, TT, CFIX and RFIX free. TT, CFIX and RFIX are kept only when
the data set them three standard errors apart from zero (the rule RS and RSH follow);
the message says which way each went and why.

RFIX is the bench's, never the device's: a four-wire I-V measures RS alone, while the
meter's two terminal pairs see RS plus the fixture's leads, so without the I-V fit's RS
held the two cannot be told apart and RFIX is not offered. The meter's DC bias is taken
as reaching the device (the small DC drop in RFIX is not modelled).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from pnbench.modeling import coarse, cvmodels, describing, fit_cv, heldcov, junction, lsq
from pnbench.modeling.fitresult import FitResult, empty_result
from pnbench.modeling.meternoise import meter_noise
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K
from pnbench.modeling.precision import drop_unresolved

#: The DC parameters an I–V fit supplies and the network fit holds.
DC_NAMES = ("IS", "N", "RS", "RSH")
TT_ABSENT = ("TT not determined: the diffusion capacitance never stands three standard "
             "errors above the depletion capacitance")
#: Why the fixture's series resistance is left out (the 3-sigma rule, as for CFIX).
RFIX_ABSENT = ("RFIX (fixture series resistance) not fitted: the readings need no series "
               "resistance beyond the device's RS three standard errors from none")
#: The fixture's series resistance, fitted beside the held RS (see the module notes).
#: Where a fit of RFIX starts (a small fraction of an ohm; the fit goes on from there).
RFIX_START_OHM = 0.05
RFIX_PARAM = lsq.Param("RFIX", "lin", lower=0.0, upper=1e6, optional=True, step=1e-9,
                       absent_reason=RFIX_ABSENT)


def network_model(temperature_K: float, fc: float, with_fixture: bool | None,
                  with_series: bool | None = False) -> cvmodels.AdmittanceModel:
    """The admittance model with CFIX, and the fixture's series resistance RFIX, each
    optional (None: kept when the data determine it), forced (True) or absent (False)."""
    model = MeterModel(temperature_K, fc, fixture=with_fixture, series=with_series)
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
    read from the data, not the model, so it only sets weights; it rides along as the
    fourth column of x (`network_rows`), so streamed points carry their own.
    """

    channels = ("lin", "lin")

    def __init__(self, inner: cvmodels.AdmittanceModel):
        self.inner = inner
        self.params = inner.params
        self.index = inner.index

    def predict(self, t, x, active):
        """x = (V, f, a_rms, w/|Y| of the reading): the last column is the scale."""
        scale = x[:, 3]
        # the inner arrays are fresh: their unused G channel is overwritten, not copied
        y, jac = self.inner.predict(t, x, active)
        y[:, 1] = y[:, 0] * scale
        if jac is not None:
            np.multiply(jac[:, 0, :], scale[:, None], out=jac[:, 1, :])
        return y, jac

    @staticmethod
    def readings(x, y):
        """The capacitances read, from the channels' values (`precision`)."""
        out = np.array(y, dtype=float)
        out[:, 1] = out[:, 1] / x[:, 3]
        return out

    @staticmethod
    def lend_noise(rel: list, floor: list, sparse: list, yhat, eligible) -> list[str]:
        """Noise for a channel with too few points to estimate its own (`fitnoise`),
        from the other's: both are one meter's readings, whose noise is a share of |Y|
        plus a floor on C. On C*w/|Y| that is the constant share plus the floor times
        w/|Y| (at the median of the channel's points); at reverse bias, where |Y| ~ w*C,
        the share of |Y| is the share of C. Without it a few forward points kept the
        first round's weights (100 % of reading) and TT was never determined."""
        if sparse == [1]:
            ok = eligible[:, 1] & np.isfinite(yhat[:, 1]) & (np.abs(yhat[:, 0]) > 0)
            k = float(np.median(np.abs(yhat[ok, 1] / yhat[ok, 0]))) if ok.any() else 0.0
            rel[1], floor[1] = 0.0, math.hypot(rel[0], floor[0] * k)
            which = "forward"
        elif sparse == [0]:
            rel[0], floor[0] = math.hypot(rel[1], floor[1]), 0.0
            which = "reverse"
        else:
            return []
        return [f"estimated noise: the {which}-bias points are too few to estimate their "
                f"own, so they are weighted by the other points' noise (the same share of "
                f"|Y|)"]


#: Points evaluated at once in the describing function: its grids are points x phases
#: complex values, which for a long run's C-V points would take gigabytes at once.
_CHUNK = 16_384
#: Samples of the test signal's period in the describing function (the integrand is
#: periodic and smooth, so the trapezoid rule converges fast; amplitude <~ 2 N*Vt).
_PHASES = 16


class MeterModel(describing.ClosedForm, cvmodels.AdmittanceModel):
    """The admittance the meter reads at its test-signal level: x = (V, f, a_rms, ...).

    A test signal of amplitude a on the exponential junction is not small against
    N*Vt at forward bias: the fundamental of the current is the describing function
    Y = mean(2 sin(t)**2 * Yj(Vd + a_j cos t)) over one period (the in-phase and
    quadrature parts of a conductance and charge driven by a cosine), with a_j the part
    of the amplitude across the junction (RS takes the rest); its relative change of gd
    and Cd is ~(a_j/(N*Vt))**2/8. Where a is 0 or unknown (NaN) the small-signal form.
    The fixture goes around the device: CFIX across it, then RFIX in series.

    Evaluated in closed form with an analytic Jacobian (`describing.ClosedForm`); on the
    phase grid (`_described`) where the swing crosses the depletion knee, or everywhere
    with ``exact = True`` (the reference the closed form is tested against).
    """

    def __init__(self, temperature_K: float = DEFAULT_TEMPERATURE_K, fc: float = 0.5,
                 fixture: bool | None = False, series: bool | None = False):
        super().__init__(temperature_K, fc, fixture)
        if series is not False:  # before CFIX: where the data cannot tell them apart at
            # all (no forward point), the 3-sigma rule drops the first of equals first
            self.params = (*self.params[:8],
                           dataclasses.replace(RFIX_PARAM, optional=not series),
                           *self.params[8:])
            self.index = {p.name: k for k, p in enumerate(self.params)}

    def _y(self, t, x):
        w = 2 * np.pi * x[:, 1]
        y = self.device_y(t, x)
        k = self.index
        if "CFIX" in k:
            y = y + 1j * w * t[k["CFIX"]]
        if "RFIX" in k and t[k["RFIX"]] != 0.0:
            y = y / (1.0 + t[k["RFIX"]] * y)
        return np.column_stack([y.imag / w, y.real])

    def device_y(self, t, x) -> np.ndarray:
        """The device's complex admittance at the meter's test level (no fixture)."""
        if not self.exact:
            return self._closed(t, x)[0]
        if x.shape[1] < 3 or not np.any(np.nan_to_num(x[:, 2]) > 0):
            from pnbench.modeling.smallsignal import device_admittance

            return device_admittance(x[:, 0], x[:, 1], self.diode(t), self.temperature_K)
        return self._on_grid(t, x)

    def _on_grid(self, t, x):
        if len(x) > _CHUNK:  # the same values, with temporaries of a bounded size
            return np.concatenate([self._described(t, x[k:k + _CHUNK])
                                   for k in range(0, len(x), _CHUNK)])
        return self._described(t, x)

    def predict(self, t, x, active):
        """Values and derivatives: the closed form's analytic ones (`describing`)."""
        if self.exact or active is None:
            return super().predict(t, x, active)
        return self.closed_predict(t, x, active)

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
        return y_eff / (1.0 + p.RS * y_eff)


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
                noise=None, noise_scale=None,
                held_covariance: np.ndarray | None = None, compliance=None, use=None,
                temperature_K: float = DEFAULT_TEMPERATURE_K,
                with_fixture: bool | None = None, with_series: bool | None = None,
                fc: float = 0.5, kind: str = "cv") -> FitResult:
    """CJO, VJ, M, TT, CFIX and RFIX from the parallel capacitance of every C–V point.

    ``fixed`` holds IS, N and RS (and RSH; RS = 0 and RSH = inf hold them absent) from
    the I–V fit; ``held_covariance`` is their covariance in the order of DC_NAMES that
    are in ``fixed`` and finite (values' units), carried into the sigmas.
    ``ac_level_V``: the meter's test-signal level (rms) per point or one value; where
    known its distortion of the forward readings is modelled (MeterModel). ``noise``:
    the meter's stated noise (a fitnoise.StatedNoise or (relative of |Y|, floor as a
    capacitance in F)), times ``noise_scale`` per point (1/sqrt(readings averaged)),
    else it is estimated from the residuals. ``with_fixture``/``with_series``: CFIX/RFIX kept when
    the data determine them (None), always (True) or never (False).
    """
    x, y, elig = network_rows(voltage_V, frequency_Hz, capacitance_F, conductance_S,
                              ac_level_V, compliance, use)
    if with_series is None and not elig[:, 1].any():
        # at reverse bias only, RFIX moves C by (w*RFIX*C)**2: it cannot be determined,
        # and offered it leaves the covariance singular, so the 3-sigma rule would see
        # CFIX as undetermined too and drop it
        with_series = False
    model = SplitModel(network_model(temperature_K, fc, with_fixture, with_series))
    state = network_state(model, x, y, elig, fixed, noise, noise_scale=noise_scale)
    if isinstance(state, str):
        return empty_result(kind, len(x), state)
    extra_cov = heldcov.held_covariance_t(model, state, x, y, fixed, held_covariance,
                                         DC_NAMES)
    out = lsq.to_result(model, state, kind, len(x), extras=cvmodels.held_extras(model, fixed),
                        min_rows=fit_cv.MIN_CV_POINTS, x=x, y=y,
                        extra_cov_t=extra_cov)
    return with_fixture_note(out)


def network_rows(voltage_V, frequency_Hz, capacitance_F, conductance_S=None,
                 ac_level_V=None, compliance=None, use=None):
    """The rows of the network fit: x = (V, f, a_rms, w/|Y| of the reading), y = (C,
    C*w/|Y|), eligible = (reverse C, forward C) (see SplitModel)."""
    x, y, elig = fit_cv.cv_arrays(voltage_V, frequency_Hz, capacitance_F, conductance_S,
                                   compliance, use)
    level = np.full(len(x), np.nan) if ac_level_V is None else np.broadcast_to(
        np.asarray(ac_level_V, dtype=float).ravel(), (len(x),))
    w = 2 * np.pi * x[:, 1]
    with np.errstate(all="ignore"):
        k_phase = w / np.abs(y[:, 1] + 1j * w * y[:, 0])  # w/|Y|: C*w/|Y| has even noise
        k_phase = np.where(np.isfinite(k_phase) & (k_phase > 0) & np.isfinite(y[:, 1]),
                           k_phase, 1.0 / np.maximum(np.abs(y[:, 0]), 1e-300))
    ok = elig[:, 0] & (y[:, 0] > 0)  # the conductance is not needed: the DC part is held
    v = x[:, 0]
    return (np.column_stack([x, level, k_phase]),
            np.column_stack([y[:, 0], y[:, 0] * k_phase]),
            np.column_stack([ok & (v <= 0), ok & (v > 0)]))


def network_state(model: SplitModel, x, y, elig, fixed: dict[str, float],
                  noise=None, start=None, noise_scale=None):
    """The least-squares state of the network fit over rows of `network_rows`, or why
    there is none (a string). ``fixed`` holds IS, N, RS, RSH (required) and any other
    parameter of the model (e.g. CJO, VJ, M, CFIX from an earlier fit); ``start``: t
    values to start from where finite (a warm start)."""
    ok = elig.any(axis=1)
    if np.count_nonzero(ok) < fit_cv.MIN_CV_POINTS:
        return f"too few C-V points ({np.count_nonzero(ok)}; need {fit_cv.MIN_CV_POINTS})"
    k = model.index
    v = x[:, 0]
    t0 = np.zeros(len(model.params))
    active = np.ones(len(model.params), dtype=bool)
    for name in DC_NAMES:
        value = fixed.get(name, {"RS": 0.0, "RSH": math.inf}.get(name))
        if value is None:
            return f"network fit needs {name} from an I-V fit"
        t0[k[name]] = model.params[k[name]].to_t(value)
        active[k[name]] = False
    for name, value in fixed.items():
        if name in k and name not in DC_NAMES:
            t0[k[name]] = model.params[k[name]].to_t(value)
            active[k[name]] = False
    if active[k["CJO"]]:
        rev = ok & (v <= 0)
        if np.count_nonzero(rev) < 3:
            rev = ok & (v <= np.sort(v[ok])[min(3, int(ok.sum())) - 1])
        t0[k["CJO"]:k["M"] + 1] = fit_cv.depletion_start(v[rev], y[rev, 0], model.inner.fc)
    if start is not None:
        t0 = np.where(np.isfinite(start) & active, start, t0)
    notes = []
    if not elig[:, 1].any():  # no forward point: nothing shows diffusion or RFIX
        for name in ("TT", "RFIX"):
            if name in k and active[k[name]] and model.params[k[name]].optional:
                active[k[name]] = False
                t0[k[name]] = model.params[k[name]].null
                notes.append(f"{model.params[k[name]].absent_reason} (no forward-bias "
                             f"point)")
    if active[k["TT"]] and (start is None or not np.isfinite(start[k["TT"]])):
        t0[k["TT"]] = _tt_start(model.inner, t0, x, y, ok)
    known = None if noise is None else meter_noise(noise, x[:, 3], noise_scale)
    if "RFIX" in k and active[k["RFIX"]] and (start is None
                                              or not np.isfinite(start[k["RFIX"]])):
        t0 = _without_series_start(model, x, y, elig, t0, active, known)
        # inside its bound: from none (its lower bound) a gradient that TT's coupling
        # turns around would hold it there and the 3-sigma rule would drop it unseen
        t0[k["RFIX"]] = RFIX_START_OHM
    state = coarse.fit(model, x, y, elig, t0, active, noise=known)
    state = drop_unresolved(  # on data without noise (e.g. a simulator's)
        model, state, x, y, ("CFIX", "RFIX"),
        lambda t, act: coarse.fit(model, x, y, elig, t, act, noise=known))
    state.notes = notes + state.notes
    return state


def _without_series_start(model, x, y, elig, t0, active, noise) -> np.ndarray:
    """A start for the fit with RFIX: the fit without it (on the coarse subset of a long
    run). From the rough start values RFIX's C**3-like effect on the reverse points
    trades against CJO, VJ, M and CFIX along a narrow valley; on precise data the
    solver followed it to a hundred ohms and more and stopped there unconverged, with TT
    dropped (clean ngspice data). RFIX is then offered from the solution without it."""
    k = model.index
    first = active.copy()
    first[k["RFIX"]] = False
    t1 = t0.copy()
    t1[k["RFIX"]] = model.params[k["RFIX"]].null
    pre = coarse.fit(model, x, y, elig, t1, first, noise=noise, finish=False)
    if not lsq.healthy(model, pre):
        return t0
    out = t0.copy()
    kept = first & pre.active  # a parameter the first fit dropped keeps its start value
    out[kept] = pre.t[kept]
    return out


def with_fixture_note(result: FitResult) -> FitResult:
    """Say in the message what CFIX and RFIX are and how firmly the data set them."""
    if not result.success:
        return result
    notes = []
    for name, what, unit, scale, remedy in (
            ("CFIX", "fixture capacitance", "pF", 1e12, "an open correction removes it"),
            ("RFIX", "fixture series resistance", "ohm", 1.0,
             "its leads, not the device's RS (which the four-wire I-V measured); a short "
             "correction removes it")):
        if name not in result.values:
            continue
        value, sd = result.values[name], result.sigmas[name]
        z = abs(value) / sd if sd > 0 and math.isfinite(sd) else math.inf
        notes.append(f"{what} {name} = {value * scale:.4g} {unit} +- {sd * scale:.2g} "
                     f"{unit} fitted ({z:.0f} standard errors from none): the bench's, not "
                     f"the device's; {remedy}")
    if not notes:
        return result
    return dataclasses.replace(result, message="; ".join([result.message, *notes]))


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
