"""Start values of the forward I–V fit on a dense, narrow low-bias stretch: the first
thousand points of a long forward step (0.30–0.32 V), where RS and RSH are not
determined and the fit with them active lies in a nearly flat valley.

The data are the exact DC model (modeling.junction) plus Gaussian noise of 0.01 % of
reading and a 0.5 pA floor (a simulated SMU's figures); the truth is the card used.
"""

from __future__ import annotations

import numpy as np
import pytest

from pnbench.modeling import blocked, fit_iv, incremental, lsq
from pnbench.modeling.junction import current
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

CARD = DiodeParams(IS=4e-15, N=1.03, RS=0.42)


def low_bias(n: int = 1000, seed: int = 7):
    v = np.linspace(0.30, 0.32, n)
    i0 = np.asarray(current(v, CARD, DEFAULT_TEMPERATURE_K))
    return v, i0 + np.random.default_rng(seed).normal(0.0, 1e-4 * i0 + 5e-13)


def test_start_reads_n_over_a_window_that_grows_with_the_points_and_rs_at_its_null():
    """A window of 25 of 1000 points spans 0.5 mV: its slope is noise and N started at
    0.93; RS read off the top point's excess voltage was ~1 MΩ (a drop of 0.4 mV)."""
    t = fit_iv.start_values(*low_bias(), DEFAULT_TEMPERATURE_K)
    assert abs(t[1] - CARD.N) < 0.06 * CARD.N
    assert t[2] == 0.0


def test_fit_from_the_data_start_needs_fewer_solver_evaluations(monkeypatch):
    """Counted trial evaluations of the whole fit (the solves, the drops of RS and RSH):
    367 from the old start, 79 now (IS and N solved first, RS and RSH held, then all
    four from there); the estimates are the same minimum."""
    calls = [0]
    residual_sum = blocked.residual_sum

    def counted(*args, **kwargs):
        calls[0] += 1
        return residual_sum(*args, **kwargs)

    monkeypatch.setattr(lsq, "residual_sum", counted)
    levenberg, stopped = lsq.levenberg, []

    def solve(*args, **kwargs):
        out = levenberg(*args, **kwargs)
        stopped.append(not out[4])
        return out

    monkeypatch.setattr(lsq, "levenberg", solve)
    v, i = low_bias()
    model = fit_iv.ForwardModel(DEFAULT_TEMPERATURE_K)
    state = fit_iv.forward_state(model, v, i, np.ones(v.size, bool))
    assert state.converged
    assert list(np.flatnonzero(state.active)) == [0, 1]  # IS and N: RS, RSH dropped
    assert calls[0] < 150
    assert not any(stopped)  # no solve stopped at its iteration limit


def test_a_called_but_refused_parameter_keeps_the_live_refits_warm(monkeypatch):
    """A forward step of 20 000 points from 0.30 to 0.70 V (current noise 0.01 % of
    reading + 0.5 pA, voltage noise 0.005 % + 40 µV: its dI/dV carries the larger part
    at low bias), fed in batches of 100 as the fit worker does. On the way to where RS
    shows, the score test calls for RS or RSH at 1.5 sigma while the 3 sigma rule leaves
    it out: fitted warm, such a call no longer costs a full refit. At the step's end
    (``refit``) the estimates and sigmas are those of the old schedule."""
    n = 20_000
    rng = np.random.default_rng(3)
    v = np.linspace(0.30, 0.70, n)
    i0 = np.asarray(current(v, CARD, DEFAULT_TEMPERATURE_K))
    i = i0 + rng.normal(0.0, 1e-4 * i0 + 5e-13)
    v = v + rng.normal(0.0, 5e-5 * v + 4e-5)
    runs = {}
    for warm in (False, True):
        monkeypatch.setattr(incremental._ForwardSpec, "refit_calls_warm", warm,
                            raising=False)
        f = incremental.IncrementalFitter("iv_forward")
        for a in range(0, n, 100):
            f.add(v[a:a + 100], i[a:a + 100])
        refits = dict(f._forward.refits)
        f.refit()
        runs[warm] = refits, f.snapshot()
    (old, before), (new, after) = runs[False], runs[True]
    assert new["full"] < old["full"]
    assert new["warm"] > old["warm"]
    assert after.names == before.names == ("IS", "N", "RS")
    for name in after.names:
        assert after.values[name] == pytest.approx(before.values[name], rel=1e-9, abs=0)
        assert after.sigmas[name] == pytest.approx(before.sigmas[name], rel=1e-6, abs=0)
