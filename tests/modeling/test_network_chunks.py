"""The meter model's describing function is evaluated in chunks of points for long runs:
the values must be exactly those of one evaluation over every point (the rows are
independent; a comparison within the project, no outside source)."""

from __future__ import annotations

import numpy as np

from pnbench.modeling import network


def test_chunked_describing_function_gives_the_same_values(monkeypatch):
    model = network.network_model(300.15, 0.5, True)
    values = dict(IS=4e-15, N=1.03, RS=0.42, RSH=1e9, CJO=3.2e-11, VJ=0.72, M=0.5,
                  TT=2e-9, CFIX=1e-13)
    t = np.array([p.to_t(values[p.name]) for p in model.params])
    rng = np.random.default_rng(1)
    n = 5000
    x = np.column_stack([rng.uniform(-20, 0.75, n), rng.choice([1e5, 1e6], n),
                         np.where(rng.uniform(size=n) < 0.9, 0.02, np.nan)])
    model.exact = True  # the phase grid, which is what is chunked
    monkeypatch.setattr(network, "_CHUNK", 10 * n)
    whole = model._y(t, x)
    monkeypatch.setattr(network, "_CHUNK", 777)  # several chunks, the last one short
    chunked = model._y(t, x)
    assert chunked.shape == (n, 2) and np.array_equal(whole, chunked)
    assert np.isfinite(whole).all() and not np.array_equal(whole[:, 0], 0 * whole[:, 0])
