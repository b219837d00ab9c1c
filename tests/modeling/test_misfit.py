"""Misfit made visible, and the figures several fits contribute to (combine module)."""

from __future__ import annotations

import math

import numpy as np

from pnbench.modeling import combine, fit_cv, fit_iv, junction, misfit, smallsignal
from pnbench.modeling.params import DiodeParams

P = DiodeParams(IS=1e-14, N=1.0, RS=0.5, CJO=2e-11, VJ=0.7, M=0.5)


def _cv(rng, cfix=0.0, rel=2e-4):
    v = np.linspace(-20.0, 0.0, 41)
    f = np.full(v.size, 1e6)
    c = np.asarray(smallsignal.depletion_capacitance(v, P)) + cfix
    return v, f, c * (1 + rel * rng.standard_normal(v.size))


def test_a_wrong_model_says_so_and_widens_its_sigmas():
    """A fixture of 2 pF fitted as junction only (with_fixture=False): the residuals run
    in long streaks, the message says the model does not describe the data and the
    sigmas are inflated (runs test: Wald & Wolfowitz 1940)."""
    rng = np.random.default_rng(11)
    v, f, c = _cv(rng, cfix=2e-12)
    wrong = fit_cv.fit_cv(v, f, c, with_fixture=False)
    assert "does not describe the data" in wrong.message
    lof = wrong.extras["lack_of_fit"]
    assert lof["misfit"] and lof["sigma_inflation"] > 1.5 and lof["runs_z"] < -misfit.Z_RUNS
    right = fit_cv.fit_cv(v, f, c)
    assert "does not describe the data" not in right.message
    assert right.extras["lack_of_fit"]["misfit"] is False


def test_honest_fits_are_rarely_flagged():
    """Over 40 noisy data sets the right model is flagged at most twice (the threshold
    is a one-sided p of ~5e-4; common practice, no source)."""
    rng = np.random.default_rng(5)
    v = np.linspace(0.3, 0.9, 60)
    i0 = np.asarray(junction.current(v, P))
    flagged = 0
    for _ in range(40):
        r = fit_iv.fit_forward(v, i0 * (1 + 1e-3 * rng.standard_normal(v.size)))
        flagged += bool(r.extras["lack_of_fit"]["misfit"])
    assert flagged <= 2


def test_stated_noise_judges_the_chi_square():
    """With the instrument's noise stated, residuals ten times larger are a misfit."""
    rng = np.random.default_rng(2)
    v = np.linspace(0.3, 0.9, 60)
    i = np.asarray(junction.current(v, P)) * (1 + 1e-2 * rng.standard_normal(v.size))
    r = fit_iv.fit_forward(v, i, noise=(1e-3, 1e-15))
    assert r.extras["lack_of_fit"]["chi2_probability"] < misfit.P_MISFIT
    assert "exceed the stated instrument noise" in r.message
    ok = fit_iv.fit_forward(v, i, noise=(1e-2, 1e-15))
    assert ok.extras["lack_of_fit"]["chi2_probability"] > misfit.P_MISFIT


def test_rsh_estimates_combine_by_inverse_variance_or_the_better_wins():
    """Consistent estimates average on 1/RSH; inconsistent ones: the better determined."""
    r, s, how = combine.combine_shunt([("iv_forward", 1.0e5, 1e4), ("iv_reverse", 1.0e5, 1e3)])
    assert math.isclose(r, 1.0e5) and s < 1e3 and "combined" in how
    r, s, how = combine.combine_shunt([("iv_forward", 1.75e5, 5e3), ("iv_reverse", 1.5e5, 1e3)])
    assert r == 1.5e5 and "disagree" in how


def test_leakage_below_the_noise_is_a_bound_never_negative():
    leak = combine.leakage_figure({"leakage_voltage_V": -30.0, "leakage_A": -5.8e-13,
                                   "leakage_sigma_A": 3.0e-13})
    assert "current_A" not in leak and math.isclose(leak["below_A"], 6e-13)
    leak = combine.leakage_figure({"leakage_voltage_V": -5.0, "leakage_A": 2e-9,
                                   "leakage_sigma_A": 1e-11})
    assert leak["current_A"] == 2e-9


def test_bv_at_the_junction_is_the_terminal_value_less_ibv_rs():
    bv, sd = combine.junction_bv(34.2, 0.002, 5e-3, 16.0, 0.1)
    assert math.isclose(bv, 34.2 - 0.08) and math.isclose(sd, math.hypot(0.002, 5e-4))


def test_the_meters_test_level_is_modelled_at_forward_bias():
    """5 mV rms on a junction at forward bias raises the read gd and Cd by ~1 % (the
    describing function of the exponential). Readings made by the simulated bench's
    large-signal model: with the level given, the network fit recovers TT within 0.2 %;
    taken as small-signal it is ~1 % high."""
    from pnbench.drivers.sim import physics
    from pnbench.modeling import network

    p = DiodeParams(IS=4e-15, N=1.03, RS=0.42, CJO=3.2e-11, VJ=0.72, M=0.5, TT=2e-9)
    v = np.concatenate([np.linspace(-20.0, 0.0, 21), np.linspace(0.5, 0.7, 9)])
    f = np.full(v.size, 1e6)
    level = np.where(v > 0, 0.005, 0.02)
    y = np.array([physics.fundamental_admittance(a, b, c, p, 300.15)
                  for a, b, c in zip(v, f, level, strict=True)])
    c, g = y.imag / (2 * np.pi * f), y.real
    fixed = {"IS": p.IS, "N": p.N, "RS": p.RS}
    good = network.fit_network(v, f, c, g, fixed=fixed, ac_level_V=level)
    plain = network.fit_network(v, f, c, g, fixed=fixed)
    assert abs(good.values["TT"] / p.TT - 1) < 2e-3
    assert plain.values["TT"] / p.TT - 1 > 5e-3


def test_the_run_is_judged_against_the_stated_instrument_noise():
    """joint.fit_all with the instruments' noise stated: honest data pass the
    chi-square check; the same data with readings ten times noisier are flagged."""
    from pnbench.modeling import joint

    rng = np.random.default_rng(8)
    v = np.linspace(0.3, 0.9, 60)
    i0 = np.asarray(junction.current(v, P))
    noise = {"iv": (1e-3, 1e-15)}
    good = joint.fit_all({"iv_forward": {"voltage_V": v, "current_A": i0 * (
        1 + 1e-3 * rng.standard_normal(v.size))}}, noise=noise)
    bad = joint.fit_all({"iv_forward": {"voltage_V": v, "current_A": i0 * (
        1 + 1e-2 * rng.standard_normal(v.size))}}, noise=noise)
    assert good.results["iv_forward"].extras["lack_of_fit"]["misfit"] is False
    assert "exceed the stated instrument noise" in bad.results["iv_forward"].message


def test_rsh_from_pa_level_reverse_data_is_unbiased_with_honest_sigma():
    """A 150 GOhm shunt read from 3..200 pA of reverse current under 1 pA of noise: over
    60 draws the mean is within 2 % and the rms of (RSH - truth)/sigma within 0.7..1.4
    (the line is weighted by the noise its residuals show, not relatively)."""
    from pnbench.modeling import fit_reverse

    p = DiodeParams(IS=1e-15, N=1.0, RSH=1.5e11)
    v = np.linspace(-0.5, -30.0, 40)
    i0 = np.asarray(junction.current(v, p))
    rng = np.random.default_rng(3)
    vals, zs = [], []
    for _ in range(60):
        r = fit_reverse.fit_reverse(v, i0 + (1e-3 * np.abs(i0) + 1e-12)
                                    * rng.standard_normal(v.size))
        vals.append(r.values["RSH"])
        zs.append((r.values["RSH"] - p.RSH) / r.sigmas["RSH"])
    assert abs(np.mean(vals) / p.RSH - 1) < 0.02
    assert 0.7 < math.sqrt(np.mean(np.square(zs))) < 1.4


def test_model_says_when_its_ibv_would_move_the_knee_in_a_simulator():
    """IBV below IS*BV/Vt: the model's extras carry the caution the card prints."""
    from pnbench.modeling import joint
    from pnbench.modeling.fitresult import FitResult

    def result(kind, **values):
        names = tuple(values)
        return FitResult(kind=kind, names=names, values=values,
                         sigmas={k: abs(v) * 0.01 for k, v in values.items()},
                         covariance=np.diag([(abs(v) * 0.01) ** 2 for v in values.values()]),
                         correlation=np.eye(len(names)), used=np.ones(5, bool), n_points=5,
                         reduced_chi2=1.0, success=True, message="by hand",
                         extras={"IBV_A": 1e-7} if kind == "iv_reverse" else {})

    m = joint.model_from_results({"iv_forward": result("iv_forward", IS=1e-8, N=1.8),
                                  "iv_reverse": result("iv_reverse", BV=200.0)}, 300.0)
    assert "IS*BV/Vt" in m.extras["card_caution"]
