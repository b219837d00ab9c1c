"""Normal equations summed over blocks of rows (modeling/blocked.py): a long run's final
fit never holds a Jacobian larger than one block, and gives the values and sigmas of the
whole-array products (one block). Invented devices with Gaussian noise; a comparison
within the project, no outside source."""

from __future__ import annotations

import numpy as np
import pytest

from pnbench.modeling import blocked, joint, junction, lsq
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.stated import StatedNoise


def _run(n: int, seed: int = 4) -> dict:
    """n forward I-V points (ten sweeps) and n reverse C-V points, as a run holds them."""
    rng = np.random.default_rng(seed)
    p = DiodeParams(IS=4e-15, N=1.03, RS=0.42, RSH=2e5)
    v = np.tile(np.linspace(0.05, 0.8, n // 10), 10)
    i = junction.current(v, p) * (1 + 1e-3 * rng.standard_normal(v.size)) \
        + 1e-12 * rng.standard_normal(v.size)
    vr = np.tile(np.linspace(-10, 0, n // 10), 10)
    c = 50e-12 / (1 - vr / 0.7) ** 0.45
    c = c * (1 + 1e-3 * rng.standard_normal(vr.size)) + 1e-15 * rng.standard_normal(vr.size)
    f = np.where(np.arange(vr.size) % 2, 1e5, 1e6)
    g = 1e-9 + 2 * np.pi * f * c * 1e-3 * np.abs(rng.standard_normal(vr.size))
    return {"iv": {"voltage_V": v, "current_A": i, "noise_scale": np.full(v.size, 0.5)},
            "cv": {"voltage_V": vr, "frequency_Hz": f, "capacitance_F": c,
                   "conductance_S": g}}


@pytest.mark.parametrize("noise", [None, {"iv": StatedNoise(1e-3, 1e-12,
                                                            voltage=StatedNoise(2e-5, 1e-5))}])
def test_blocked_sums_give_the_whole_array_fit(monkeypatch, noise):
    """50 000 points of each kind: estimates within 0.01 sigma, sigmas within 0.5 %, and
    no Jacobian over more rows than a block (the whole array's was before)."""
    data = _run(50_000)
    monkeypatch.setattr(blocked, "BLOCK_ROWS", 10**9)  # one block: the whole arrays
    whole = joint.fit_all(data, noise=noise).results
    biggest = [0]
    inner = blocked.weighted_rows

    def recorded(model, t, idx, x, *a, want_jac=True, **k):
        if want_jac:
            biggest[0] = max(biggest[0], len(x))
        return inner(model, t, idx, x, *a, want_jac=want_jac, **k)

    monkeypatch.setattr(blocked, "weighted_rows", recorded)
    monkeypatch.setattr(lsq, "weighted_rows", recorded)
    monkeypatch.setattr(blocked, "BLOCK_ROWS", 8192)
    parts = joint.fit_all(data, noise=noise).results
    assert 0 < biggest[0] <= 8192
    assert set(parts) == set(whole) == {"iv_forward", "cv"}
    for kind, ref in whole.items():
        got = parts[kind]
        assert got.success == ref.success and got.names == ref.names, kind
        assert got.message == ref.message, kind
        for name in ref.names:
            sd = ref.sigmas[name]
            assert abs(got.values[name] - ref.values[name]) < 0.01 * sd, (kind, name)
            assert got.sigmas[name] == pytest.approx(sd, rel=5e-3), (kind, name)
    assert whole["iv_forward"].success and "RSH" in whole["iv_forward"].names
    assert {"CJO", "VJ", "M"} <= set(whole["cv"].names)


def test_a_long_forward_run_reads_its_start_values_off_an_even_subset(monkeypatch):
    """The start values' window sums are made over at most ~2*MAX_ROWS points of a long
    run, and the fit ends where a start from every point ends (within 0.01 sigma)."""
    from pnbench.modeling import coarse, fit_iv

    iv = _run(30_000)["iv"]
    sizes = []
    inner = fit_iv.start_values
    monkeypatch.setattr(fit_iv, "start_values",
                        lambda v, *a, **k: sizes.append(v.size) or inner(v, *a, **k))
    thinned = fit_iv.fit_forward(iv["voltage_V"], iv["current_A"])
    assert sizes and max(sizes) <= 2 * coarse.MAX_ROWS
    limit = 2 * coarse.MAX_ROWS
    sizes.clear()
    monkeypatch.setattr(coarse, "MAX_ROWS", 20_000)  # every point's start, lsq.fit on all
    every = fit_iv.fit_forward(iv["voltage_V"], iv["current_A"])
    assert max(sizes) > limit
    assert every.names == thinned.names and every.success
    for name in every.names:
        assert abs(thinned.values[name] - every.values[name]) < 0.01 * every.sigmas[name]


def test_a_long_fit_s_model_values_come_in_blocks(monkeypatch):
    """The finishing rounds of a long fit (coarse.fit over every row) evaluate the model
    without a Jacobian over one block of rows at a time (`blocked.InBlocks`), giving the
    same fit as one evaluation over every row: the rows are independent."""
    from pnbench.modeling import coarse, fit_iv

    data = _run(30_000)["iv"]
    model = fit_iv.ForwardModel(300.15)
    x, y = data["voltage_V"][:, None], data["current_A"][:, None]
    elig = (x > 0) & np.isfinite(y)
    t0 = fit_iv.start_values(x[:, 0][::10], y[:, 0][::10], 300.15)
    active = np.ones(4, dtype=bool)
    monkeypatch.setattr(blocked, "BLOCK_ROWS", 4000)
    sizes = []
    inner = fit_iv.ForwardModel.predict

    def recorded(self, t, xs, act):
        if act is None:
            sizes.append(len(xs))
        return inner(self, t, xs, act)

    monkeypatch.setattr(fit_iv.ForwardModel, "predict", recorded)
    parts = coarse.fit(model, x, y, elig, t0, active)
    assert sizes and max(sizes) <= 4000 and sum(s == 4000 for s in sizes) > 2
    monkeypatch.setattr(coarse.blocked, "InBlocks", lambda m: m)  # every row at once
    sizes.clear()
    whole = coarse.fit(model, x, y, elig, t0, active)
    assert max(sizes) == len(x)
    np.testing.assert_allclose(parts.t, whole.t, rtol=1e-12, atol=0)
    np.testing.assert_array_equal(parts.active, whole.active)
    assert parts.chi2 == pytest.approx(whole.chi2, rel=1e-12)
