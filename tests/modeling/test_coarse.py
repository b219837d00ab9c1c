"""Coarse to fine (modeling/coarse.py): decisions on an even subset, the result from every
point. Compared with `lsq.fit` over every point on invented devices with Gaussian noise
(a comparison within the project, no outside source): estimates within 0.05 standard
errors, standard errors within 2 %."""

from __future__ import annotations

import numpy as np
import pytest
from test_describing import VALUES, _network_data

from pnbench.modeling import coarse, fit_iv, junction, lsq, network
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.stated import StatedNoise


def _agree(fast, full):
    assert fast.success and full.success
    assert fast.names == full.names
    for name in full.names:
        sd = full.sigmas[name]
        assert abs(fast.values[name] - full.values[name]) < 0.05 * sd, name
        assert fast.sigmas[name] == pytest.approx(sd, rel=0.02), name


def test_a_fit_of_few_rows_is_lsq_fit_itself(monkeypatch):
    calls = []
    monkeypatch.setattr(lsq, "fit", lambda *a, **k: calls.append(len(a[1])) or "lsq")
    x = np.zeros((100, 1))
    out = coarse.fit(None, x, x, np.ones((100, 1), dtype=bool), np.zeros(2),
                     np.ones(2, dtype=bool), max_rows=50)
    assert out == "lsq" and calls == [100]


def test_a_parameter_the_subset_drops_is_taken_back_on_every_point(monkeypatch):
    """A diffusion capacitance too small for a twentieth of the points (TT dropped
    there) but about 7 standard errors from none on all of them."""
    monkeypatch.setitem(VALUES, "TT", 1e-12)
    v, f, c, g, level = _network_data(3000, seed=3)
    fixed = {k: VALUES[k] for k in network.DC_NAMES}

    def fit(rows: slice = slice(None)):
        return network.fit_network(v[rows], f[rows], c[rows], g[rows], fixed=fixed,
                                   ac_level_V=level[rows], with_series=False)

    monkeypatch.setattr(coarse, "MAX_ROWS", 10**9)
    full = fit()
    subset = fit(slice(None, None, 20))
    monkeypatch.setattr(coarse, "MAX_ROWS", 150)
    fast = fit()
    assert "TT" not in subset.names and "TT" in full.names
    assert full.values["TT"] / full.sigmas["TT"] > 5
    _agree(fast, full)
    assert "TT not determined" not in fast.message


#: A stated SMU noise with the voltage reading's own (invented figures).
STATED = StatedNoise(1e-3, 1e-12, voltage=StatedNoise(2e-5, 1e-5))


@pytest.mark.parametrize(("rsh", "noise"), [(np.inf, None), (2e5, None), (np.inf, STATED)])
def test_forward_iv_fit_finished_on_every_point_agrees_with_the_full_fit(monkeypatch, rsh,
                                                                         noise):
    """Estimated noise, and a stated one whose voltage part is weighted by the slope
    dI/dV (taken from the subset's fit on the fast path)."""
    p = DiodeParams(IS=4e-15, N=1.03, RS=0.42, RSH=rsh)
    rng = np.random.default_rng(11)
    v = np.tile(np.linspace(0.05, 0.8, 600), 10)
    i = junction.current(v, p) * (1 + 1e-3 * rng.standard_normal(v.size)) \
        + 1e-12 * rng.standard_normal(v.size)
    monkeypatch.setattr(coarse, "MAX_ROWS", 10**9)
    full = fit_iv.fit_forward(v, i, noise=noise)
    monkeypatch.setattr(coarse, "MAX_ROWS", 300)
    fast = fit_iv.fit_forward(v, i, noise=noise)
    assert {"IS", "N", "RS"} <= set(full.names)
    _agree(fast, full)


def test_a_stated_noise_per_point_is_taken_at_the_subset_rows(monkeypatch):
    """A stated meter noise varies per point (noise_scale: readings averaged); the
    subset, the blocks and the finish each use the rows' own figures."""
    v, f, c, g, level = _network_data(3000, seed=4)
    fixed = {k: VALUES[k] for k in network.DC_NAMES}
    scale = np.where(np.arange(v.size) % 4 == 0, 0.5, 1.0)  # every 4th point averaged 4x
    held = np.diag([(1e-3 * VALUES["IS"]) ** 2, 1e-4**2, 1e-3**2, (0.01 * VALUES["RSH"])**2])

    def fit():
        return network.fit_network(v, f, c, g, fixed=fixed, ac_level_V=level,
                                   noise=(1e-3, 2e-16), noise_scale=scale,
                                   held_covariance=held)

    monkeypatch.setattr(coarse, "MAX_ROWS", 10**9)
    full = fit()
    monkeypatch.setattr(coarse, "MAX_ROWS", 300)
    fast = fit()
    _agree(fast, full)
    sub = coarse.rows_of(lsq.Noise((0.0,), (1.0,), floor_rows=np.arange(10.0)[:, None],
                                   scale_rows=np.arange(10.0)), slice(2, 8, 3))
    assert sub.floor_rows[:, 0].tolist() == [2.0, 5.0] and sub.scale_rows.tolist() == [2, 5]
