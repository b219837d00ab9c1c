"""The closed forms of the junction's describing function (modeling/describing.py) and
the network fit that uses them.

References: the factors are checked against adaptive quadrature of their defining
integrals (scipy.integrate.quad) and against scipy.special's modified Bessel function
I1 and Gauss hypergeometric function 2F1 (DLMF §10.35, §15.2; docs/physics.md §6); the
meter model's closed form against its own phase-grid evaluation (the reference it replaces), and the
fit on the closed form against the fit on the grid (a comparison within the project).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import hyp2f1, iv

from pnbench.modeling import coarse, cvmodels, describing, network


def _mean_2sin2(f) -> float:
    """<2 sin²t f(t)> over one period, by adaptive quadrature."""
    return quad(lambda t: 2 * math.sin(t) ** 2 * f(t), 0.0, 2 * math.pi,
                epsabs=0, epsrel=1e-13, limit=200)[0] / (2 * math.pi)


@pytest.mark.parametrize("x", [0.0, 1e-4, 0.3, 1.06, 2.5, 6.0, 40.0])
def test_exponential_factor_is_the_fundamental_of_exp_x_cos(x):
    got = float(describing.exponential_factor(np.array([x]))[0])
    want = _mean_2sin2(lambda t: math.exp(x * math.cos(t)))
    assert got == pytest.approx(want, rel=1e-12)
    if x > 0:
        assert got == pytest.approx(2 * iv(1, x) / x, rel=1e-12)


@pytest.mark.parametrize("m", [0.05, 0.33, 0.5, 1.0, 2.7])
@pytest.mark.parametrize("u", [0.0, 0.01, 0.06, 0.3, 0.5])
def test_depletion_factor_is_the_fundamental_of_the_power_law(m, u):
    got = float(describing.depletion_factor(m, np.array([u]))[0])
    want = _mean_2sin2(lambda t: (1 - u * math.cos(t)) ** -m)
    assert got == pytest.approx(want, rel=1e-12)
    assert got == pytest.approx(hyp2f1(m / 2, (m + 1) / 2, 2.0, u * u), rel=1e-12)


def test_depletion_factor_refuses_a_swing_beyond_its_series():
    with pytest.raises(ValueError, match="beyond the series"):
        describing.depletion_factor(0.5, np.array([0.1, 0.6]))


VALUES = dict(IS=4e-15, N=1.03, RS=0.42, RSH=1e9, CJO=3.2e-11, VJ=0.72, M=0.5, TT=2e-9,
              CFIX=1e-13)


def _t(model, values):
    return np.array([p.to_t(values[p.name]) for p in model.params])


@pytest.mark.parametrize("rs", [0.0, 0.42, 50.0])
@pytest.mark.parametrize("level_V", [0.005, 0.02])
def test_closed_form_matches_the_phase_grid_at_meter_levels(rs, level_V):
    """At the test levels meters use the closed form and the 16-phase grid agree to
    rounding: reverse, forward and across the depletion knee, with and without RS."""
    model = network.network_model(300.15, 0.5, True)
    t = _t(model, {**VALUES, "RS": rs})
    v = np.linspace(-20.0, 0.8, 4001)
    x = np.column_stack([v, np.where(np.arange(v.size) % 2, 1e5, 1e6),
                         np.where(np.arange(v.size) % 7, level_V, np.nan)])
    fast = model._y(t, x)
    model.exact = True
    grid = model._y(t, x)
    assert np.all(np.isfinite(fast))
    np.testing.assert_allclose(fast, grid, rtol=1e-12, atol=0)


def test_closed_form_is_the_exact_integral_where_the_grid_is_not():
    """At 100 mV rms (x ~ 5 at forward bias) the 16-phase trapezoid rule is off by ~1e-6;
    the closed form agrees with adaptive quadrature of the describing function."""
    model = network.network_model(300.15, 0.5, False)
    values = {**VALUES, "RS": 0.0, "RSH": math.inf, "CFIX": 0.0}
    t = _t(model, values)
    v, f, a = 0.66, 1e5, 0.1 * math.sqrt(2)
    x = np.array([[v, f, 0.1]])
    fast = model._y(t, x)[0]
    model.exact = True
    grid = model._y(t, x)[0]
    p = model.diode(t)
    from pnbench.modeling import junction
    from pnbench.modeling.smallsignal import depletion_capacitance

    def g(vv):
        return float(junction.junction_conductance(vv, p, 300.15))

    g_eff = _mean_2sin2(lambda s: g(v + a * math.cos(s)))
    c_eff = _mean_2sin2(lambda s: float(depletion_capacitance(v + a * math.cos(s), p))
                        + p.TT * g(v + a * math.cos(s)))
    assert fast[1] == pytest.approx(g_eff, rel=1e-10)
    assert fast[0] == pytest.approx(c_eff, rel=1e-10)
    assert abs(grid[1] / g_eff - 1) > 1e-8  # the grid's own error, which the form avoids


def _network_data(n: int, seed: int):
    """C-V points of an invented varactor from the grid model, with noise: reverse and
    forward bias, two frequencies, two test levels, a fixture and diffusion capacitance."""
    rng = np.random.default_rng(seed)
    model = network.network_model(300.15, 0.5, True)
    model.exact = True
    v = np.concatenate([np.linspace(-20, 0, n - n // 5), np.linspace(0.02, 0.72, n // 5)])
    f = np.where(np.arange(v.size) % 2, 1e5, 1e6)
    level = np.where(np.arange(v.size) % 3, 0.02, 0.05)
    x = np.column_stack([v, f, level])
    y = model._y(_t(model, VALUES), x)
    c = y[:, 0] * (1 + 1e-3 * rng.standard_normal(v.size)) + 2e-16 * rng.standard_normal(
        v.size)
    g = y[:, 1] * (1 + 1e-3 * rng.standard_normal(v.size))
    return v, f, c, g, level


def _fit(data, exact: bool, monkeypatch):
    """The fast path (closed form, decisions on a subset: `coarse`) or the exact full
    evaluation (phase grid, every point in every round)."""
    v, f, c, g, level = data
    monkeypatch.setattr(network.MeterModel, "exact", exact)
    monkeypatch.setattr(coarse, "MAX_ROWS", 10**9 if exact else 300)
    fixed = {k: VALUES[k] for k in network.DC_NAMES}
    held = np.diag([(1e-3 * VALUES["IS"]) ** 2, 1e-4**2, 1e-3**2, (0.01 * VALUES["RSH"])**2])
    return network.fit_network(v, f, c, g, fixed=fixed, ac_level_V=level,
                               held_covariance=held)


def test_the_fast_path_agrees_with_the_exact_full_fit(monkeypatch):
    data = _network_data(3000, seed=7)
    fast = _fit(data, False, monkeypatch)
    exact = _fit(data, True, monkeypatch)
    assert fast.success and exact.success
    assert fast.names == exact.names and {"CJO", "VJ", "M", "TT", "CFIX"} <= set(fast.names)
    for name in fast.names:
        sd = exact.sigmas[name]
        assert abs(fast.values[name] - exact.values[name]) < 0.05 * sd, name
        assert fast.sigmas[name] == pytest.approx(sd, rel=0.02), name
    # and the estimates are the invented part's, within the usual few sigma
    for name in ("CJO", "VJ", "M", "TT", "CFIX"):
        assert abs(fast.values[name] - VALUES[name]) < 5 * fast.sigmas[name], name


@pytest.mark.parametrize("rs", [0.0, 0.42, 300.0])
@pytest.mark.parametrize("level_V", [0.02, 0.1])
def test_analytic_derivatives_match_central_differences(rs, level_V):
    """The network fit's analytic Jacobian over CJO, VJ, M, TT, CFIX, RFIX against central
    differences of its values (the held IS, N, RS, RSH keep lsq's forward differences:
    the same numbers as the generic model's)."""
    model = network.network_model(300.15, 0.5, True, True)  # CFIX and RFIX
    t = _t(model, {**VALUES, "RS": rs, "TT": 5e-8, "RFIX": 2.5})
    v = np.concatenate([np.linspace(-20.0, 0.8, 300), [0.33, 0.36, 0.38]])  # knee at 0.36
    x = np.column_stack([v, np.where(np.arange(v.size) % 2, 1e5, 1e6),
                         np.where(np.arange(v.size) % 5, level_V, np.nan)])
    active = np.arange(len(model.params))
    y, jac = model.predict(t, x, active)
    np.testing.assert_array_equal(y, model._y(t, x))
    generic = cvmodels.AdmittanceModel.predict(model, t, x, active)[1]
    grid = model._closed(t, x)[1]
    assert grid.sum() >= 2  # the rows at the knee are there
    for j, k in enumerate(active):
        name = model.params[k].name
        if name in network.DC_NAMES:
            np.testing.assert_array_equal(jac[..., j], generic[..., j])
            continue
        h = 1e-5 * abs(t[k])
        up, down = t.copy(), t.copy()
        up[k] += h
        down[k] -= h
        want = (model._y(up, x) - model._y(down, x)) / (2 * h)
        # relative to the column's largest derivative, or to what rounding leaves of
        # the values over 2h where a channel hardly depends on the parameter
        scale = np.maximum(np.max(np.abs(want), axis=0),
                           1e-9 * np.max(np.abs(y), axis=0) / h)
        err = np.abs(jac[..., j] - want) / scale
        # rows averaged over the phase grid (swing across the knee) keep forward
        # differences: their truncation error is ~1e-5
        assert err[~grid].max() < 1e-6 and err[grid].max() < 1e-4, (name, err.max())


def test_values_and_derivatives_do_not_depend_on_the_block_size(monkeypatch):
    """Long runs are evaluated in blocks of rows (bounded temporaries); the rows are
    independent, so the numbers are exactly those of one block."""
    model = network.network_model(300.15, 0.5, True, True)
    t = _t(model, {**VALUES, "RFIX": 1.5})
    rng = np.random.default_rng(5)
    x = np.column_stack([rng.uniform(-20, 0.75, 3000), rng.choice([1e5, 1e6], 3000),
                         np.where(rng.uniform(size=3000) < 0.9, 0.02, np.nan)])
    active = np.arange(len(model.params))
    monkeypatch.setattr(describing, "BLOCK", 10**9)
    whole = model.predict(t, x, active)
    monkeypatch.setattr(describing, "BLOCK", 777)  # several blocks, the last one short
    blocks = model.predict(t, x, active)
    assert np.array_equal(whole[0], blocks[0]) and np.array_equal(whole[1], blocks[1])
