"""The noise model a fit estimates from its own residuals (modeling/fitnoise.py).

Data: an invented abrupt varactor's depletion C-V (docs/physics.md §4), 61 points from
0 to -30 V, read with Gaussian noise of 0.02 % of reading plus 2 fF added linearly, as
instrument specifications state accuracy (common practice, no source). Over that range C
falls only 6.5-fold and few points lie near 0 V, where CJO is decided: the case where the
plain maximum-likelihood estimate put the relative part on zero in about one draw in
four.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pnbench.modeling import fitnoise
from pnbench.modeling.fit_cv import fit_cv
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.smallsignal import depletion_capacitance

PART = DiodeParams(CJO=3.2e-11, VJ=0.72, M=0.5)
REL, FLOOR = 2e-4, 2e-15
DRAWS = 150


def test_estimated_noise_gives_honest_sigmas_over_draws():
    """rms of (value - truth)/sigma of CJO, VJ and M over 150 draws with the noise
    estimated: within 1 +- 3/sqrt(2*150) = 1 +- 0.17 (for unit-variance z, the mean of
    z**2 over n draws has a standard deviation of sqrt(2/n), so its root one of
    1/sqrt(2n)). The estimator before the bound gave 1.55, 1.33 and 1.20. No draw's
    relative part falls below a tenth of the truth (it fell to ~1e-11 in a quarter of
    the draws), and a draw whose bound applied says so in its message."""
    v = -np.linspace(0.0, 30.0, 61)
    f = np.full(v.size, 1e6)
    c_true = depletion_capacitance(v, PART)
    rng = np.random.default_rng(11)
    z, rel, held = [], [], 0
    for _ in range(DRAWS):
        c = c_true + (REL * c_true + FLOOR) * rng.standard_normal(v.size)
        r = fit_cv(v, f, c, with_fixture=False)
        assert r.success, r.message
        z.append([(r.values[n] - getattr(PART, n)) / r.sigmas[n] for n in ("CJO", "VJ", "M")])
        rel.append(r.extras["noise"]["relative"])
        held += "held at its standard error" in r.message
    rms = np.sqrt(np.mean(np.square(z), axis=0))
    tol = 3 / math.sqrt(2 * DRAWS)
    assert np.all(np.abs(rms - 1) < tol), (rms, tol)
    assert min(rel) > 0.1 * REL, min(rel)
    assert 0 < held < DRAWS, held


def _channel(kind: str):
    class One:
        channels = (kind,)
    return One


def test_a_relative_part_the_data_cannot_see_is_held_at_its_standard_error():
    """Residuals of pure floor noise over values spanning a decade: the likelihood's
    relative part is zero, and the estimate holds it at its standard error from the
    Fisher information of the two parts (computed here independently, by numeric
    second derivatives of the log-likelihood), saying so."""
    rng = np.random.default_rng(3)
    yhat = np.geomspace(1.0, 10.0, 40)[:, None]
    y = yhat + 0.01 * rng.standard_normal(yhat.shape)
    elig = np.ones(yhat.shape, dtype=bool)
    got = fitnoise.estimate_noise(_channel("lin"), y, yhat, elig,
                                  fitnoise.Noise((1.0,), (0.0,)))
    a, b = got.rel[0] ** 2, got.floor[0] ** 2
    y2 = yhat[:, 0] ** 2
    e2 = (y - yhat)[:, 0] ** 2

    def nll(p):
        s2 = p[0] * y2 + p[1]
        return 0.5 * float(np.sum(np.log(s2) + e2 / s2))

    # Fisher information = expected Hessian; at the estimate, with e2 replaced by s2
    def expected_hessian(p):
        s2 = p[0] * y2 + p[1]
        g = np.stack([y2, np.ones_like(y2)])
        return 0.5 * (g / s2**2) @ g.T

    se_a = math.sqrt(np.linalg.inv(expected_hessian((a, b)))[0, 0])
    assert abs(a / se_a - 1) < 1e-2, (a, se_a)  # the bound settles to ~0.1 %
    assert nll((a, b)) < nll((a, b * 1.01)) and nll((a, b)) < nll((a, b * 0.99))
    assert got.notes and "relative part" in got.notes[0]


def test_values_too_close_to_tell_the_parts_apart_give_a_relative_noise():
    """All values equal: a relative part and a floor cannot be told apart, and the noise
    is taken as relative alone, its size the rms residual over the value (the floor at
    the estimate's lower bound, 1e-15 of the largest value)."""
    rng = np.random.default_rng(4)
    yhat = np.full((30, 1), 5.0)
    y = yhat + 0.02 * rng.standard_normal(yhat.shape)
    got = fitnoise.estimate_noise(_channel("lin"), y, yhat, np.ones(yhat.shape, bool),
                                  fitnoise.Noise((1.0,), (0.0,)))
    want = math.sqrt(float(np.mean((y - yhat) ** 2))) / 5.0
    assert got.floor[0] < 1e-14 * 5.0 and abs(got.rel[0] / want - 1) < 1e-9
    assert "relative alone" in got.notes[0]


def test_a_long_fit_s_noise_sums_run_over_blocks(monkeypatch):
    """A night's final fit estimates the noise of 10^5-10^6 rows: the likelihood's sums
    run over blocks of SUM_ROWS rows, giving the same components as one pass over every
    row (to rounding), while the temporaries the estimate holds stay under four arrays
    as long as the data (the one-pass sums held five to six). Synthetic residuals of
    0.01 % of reading plus a floor (common practice, no source)."""
    import tracemalloc

    rng = np.random.default_rng(3)
    n = 4 * fitnoise.SUM_ROWS + 123
    y2 = rng.uniform(1e-4, 1.0, n) ** 2
    e2 = (y2 * 1e-8 + 1e-9) * rng.chisquare(1, n)
    tracemalloc.start()
    try:
        base = tracemalloc.get_traced_memory()[0]
        tracemalloc.reset_peak()
        blocked = fitnoise._components(e2, y2)
        extra = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
    monkeypatch.setattr(fitnoise, "SUM_ROWS", 10 * n)
    whole = fitnoise._components(e2, y2)
    assert blocked[0] == pytest.approx(whole[0], rel=1e-9, abs=0)
    assert blocked[1] == pytest.approx(whole[1], rel=1e-6, abs=0)
    assert math.sqrt(blocked[0]) == pytest.approx(1e-4, rel=0.02)
    assert extra < 4 * e2.nbytes
