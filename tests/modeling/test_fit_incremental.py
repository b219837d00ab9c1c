"""The streaming fitter: same answer as a batch fit, bounded work, safe from two threads.

Reference data: ngspice (tests/spicehelp.py) with instrument-like noise added.
"""

from __future__ import annotations

import threading

import fitdevices as fd
import numpy as np
import pytest

from pnbench.modeling import fit_cv, fit_iv
from pnbench.modeling.incremental import IncrementalFitter


@pytest.fixture(scope="module")
def sig(ngspice):
    return fd.make(ngspice, "sig")


@pytest.fixture(scope="module")
def noisy_forward(sig):
    rng = np.random.default_rng(42)
    v = np.repeat(sig.forward_v, 5)
    i = fd.instrument_noise(rng, np.repeat(sig.forward_i, 5), 1e-3, 1e-12)
    return v, i


def _agree(stream, batch, names, within_sigma=0.1):
    for n in names:
        assert abs(stream.values[n] - batch.values[n]) < within_sigma * batch.sigmas[n], n
        assert abs(stream.sigmas[n] / batch.sigmas[n] - 1) < 0.05, n


@pytest.mark.parametrize("order", ["sweep", "shuffled"])
def test_one_point_at_a_time_ends_where_a_batch_fit_does(noisy_forward, order):
    """600 points fed one by one (in sweep order and shuffled) end within a tenth of a
    standard error of the batch fit of the same points, with the same sigmas."""
    v, i = noisy_forward
    idx = np.arange(v.size) if order == "sweep" else np.random.default_rng(1).permutation(
        v.size)
    f = IncrementalFitter("iv_forward")
    for k in idx:
        f.add(v[k], i[k])
        f.snapshot()
    stream = f.snapshot()
    batch = fit_iv.fit_forward(v[idx], i[idx])
    assert stream.names == batch.names
    _agree(stream, batch, batch.names)
    assert stream.n_points == v.size and stream.used.shape == (v.size,)


def test_batches_and_single_points_mix(noisy_forward):
    v, i = noisy_forward
    f = IncrementalFitter("iv_forward")
    f.add(v[:100], i[:100])
    for k in range(100, 120):
        f.add(v[k], i[k])
    f.add(v[120:], i[120:])
    _agree(f.snapshot(), fit_iv.fit_forward(v, i), ("IS", "N", "RS"))


def test_work_per_update_is_bounded(noisy_forward, monkeypatch):
    """Refits run on a geometric schedule: each one at least 4 % more points than the
    one before (25 % once the fit is healthy), so their count grows with log n. Most of
    them are warm; the full ones (noise model afresh, optional parameters re-decided)
    are fewer and on a geometric schedule of their own."""
    v, i = noisy_forward
    v, i = np.tile(v, 4), np.tile(i, 4)
    f = IncrementalFitter("iv_forward")
    stream = f._forward
    spec = stream.spec
    at, full = [], []
    real_full, real_refit = spec.full_state, stream._full_refit
    monkeypatch.setattr(spec, "full_state", lambda x, *a: full.append(len(x)) or
                        real_full(x, *a))
    monkeypatch.setattr(stream, "_full_refit", lambda: at.append(stream.n) or real_refit())
    for k in range(v.size):
        f.add(v[k], i[k])
    assert all(b >= max(a + 1, 1.04 * a) for a, b in zip(at, at[1:], strict=False)), at
    assert at[-1] > v.size / 1.25 - 1 and len(at) < 100
    assert sum(b >= 1.24 * a for a, b in zip(at[-10:], at[-9:], strict=False)) >= 8
    assert set(full) <= set(at) and stream.refits == {"full": len(full),
                                                      "warm": len(at) - len(full)}
    assert stream.refits["warm"] >= 5 and len(full) < len(at)
    assert all(b >= 1.24 * a for a, b in zip(full[-3:], full[-2:], strict=False)), full


def test_settled_flags(noisy_forward):
    v, i = noisy_forward
    f = IncrementalFitter("iv_forward", target_rel=0.05)
    assert f.settled() == {}  # nothing fitted yet
    assert f.settled(names=["IS"]) == {"IS": False}
    f.add(v[::50], i[::50])
    early = f.settled(1e-4)
    assert not all(early.values())
    f.add(v, i)
    late = f.settled(names=["IS", "N", "RS"])
    assert late == {"IS": True, "N": True, "RS": True}
    assert f.settled(names=["BV"]) == {"BV": False}


def test_snapshots_from_another_thread_while_points_arrive(noisy_forward):
    """One thread adds, another takes snapshots: no error, every snapshot is a
    consistent value, and the end result is the single-threaded one."""
    v, i = noisy_forward
    f = IncrementalFitter("iv_forward")
    errors, seen = [], []
    done = threading.Event()

    def reader():
        while not done.is_set():
            try:
                s = f.snapshot()
                assert s.used.shape == (s.n_points,)
                assert set(s.names) == set(s.values)
                seen.append(s.n_points)
            except Exception as exc:  # noqa: BLE001 - reported below
                errors.append(exc)
                return

    t = threading.Thread(target=reader)
    t.start()
    try:
        for k in range(0, v.size, 3):
            f.add(v[k:k + 3], i[k:k + 3])
    finally:
        done.set()
        t.join()
    assert not errors, errors
    assert len(seen) > 1 and seen == sorted(seen)
    single = IncrementalFitter("iv_forward")
    for k in range(0, v.size, 3):
        single.add(v[k:k + 3], i[k:k + 3])
    assert f.snapshot().values == single.snapshot().values


def test_iv_kind_routes_forward_and_reverse(sig):
    f = IncrementalFitter("iv", ibv_A=sig.params.IBV)
    f.add(sig.reverse_v, sig.reverse_i)
    f.add(sig.forward_v, sig.forward_i)
    s = f.snapshot()
    assert {"IS", "N", "RS", "BV"} <= set(s.values)
    assert abs(s.values["BV"] / sig.params.BV - 1) < 0.01
    assert s.n_points == sig.reverse_v.size + sig.forward_v.size
    assert "iv_forward:" in s.message and "iv_reverse:" in s.message


@pytest.mark.parametrize("kind", ["cv", "admittance"])
def test_cv_streams_reach_the_batch_answer(sig, kind):
    rng = np.random.default_rng(5)
    c = fd.instrument_noise(rng, sig.cv_c, 1e-3, 1e-16)
    g = fd.instrument_noise(rng, sig.cv_g, 1e-3, 1e-12)
    f = IncrementalFitter(kind)
    for k in range(sig.cv_v.size):
        f.add(sig.cv_v[k], frequency_Hz=sig.cv_f[k], capacitance_F=c[k], conductance_S=g[k])
    s = f.snapshot()
    if kind == "cv":
        batch = fit_cv.fit_cv(sig.cv_v, sig.cv_f, c)
    else:
        batch = fit_cv.fit_admittance(sig.cv_v, sig.cv_f, c, g)
    assert set(batch.names) <= set(s.names) | {"RSH"}
    _agree(s, batch, [n for n in batch.names if n != "RSH"], within_sigma=0.3)


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError, match="unknown fit kind"):
        IncrementalFitter("iv_both")
    f = IncrementalFitter("iv_forward")
    with pytest.raises(ValueError, match="current_A has 2 values"):
        f.add([0.1, 0.2, 0.3], [1e-9, 2e-9])


@pytest.mark.parametrize("kind", ["iv_forward", "cv", "admittance"])
def test_warm_refits_give_the_estimates_of_full_ones(noisy_forward, sig, kind, monkeypatch):
    """The same points in the same batches, once with warm refits between full ones and
    once with every refit full (the schedule before warm refits). At the end of the
    sweep (after `refit`, as the fit worker does at a step end) the estimates agree
    within a twentieth of a standard error, their sigmas within 2 %, and the same
    parameters are determined; live snapshots in between may miss an optional
    parameter until the next full refit, and agree within 2 sigma on the others. The
    warm schedule runs fewer full fits."""
    from pnbench.modeling import lsqstream

    rng = np.random.default_rng(7)
    if kind == "iv_forward":
        v, i = noisy_forward
        batches = [dict(voltage_V=v[k:k + 40], current_A=i[k:k + 40])
                   for k in range(0, v.size, 40)]
    else:
        c = fd.instrument_noise(rng, sig.cv_c, 1e-3, 1e-16)
        # a floor well above ngspice's GMIN (1e-12 S across the junction): at 1e-12 S
        # the shunt sits at the noise and every warm refit may call for RSH
        g = fd.instrument_noise(rng, sig.cv_g, 1e-3, 1e-11)
        batches = [dict(voltage_V=sig.cv_v[k:k + 10], frequency_Hz=sig.cv_f[k:k + 10],
                        capacitance_F=c[k:k + 10], conductance_S=g[k:k + 10])
                   for k in range(0, sig.cv_v.size, 10)]

    def stream(select_growth):
        monkeypatch.setattr(lsqstream, "SELECT_GROWTH", select_growth)
        f = IncrementalFitter(kind)
        snaps = []
        for b in batches:
            f.add(**b)
            snaps.append(f.snapshot())
        return snaps, (f._forward or f._small).refits, f

    warm, warm_refits, warm_fitter = stream(2.0)
    full, full_refits, full_fitter = stream(1.0)
    assert full_refits["warm"] == 0 and warm_refits["full"] < full_refits["full"]
    for a, b in zip(warm[len(warm) // 2:], full[len(full) // 2:], strict=True):
        for n in set(a.names) & set(b.names):  # live: a left-out parameter may lag
            assert a.values[n] == b.values[n] or \
                abs(a.values[n] - b.values[n]) < 2 * b.sigmas[n], (a.n_points, n)
    for f in (warm_fitter, full_fitter):
        f.refit()  # what the fit worker does at the end of a step
    a, b = warm_fitter.snapshot(), full_fitter.snapshot()
    assert a.names == b.names
    for n in b.names:
        va, vb, sa, sb = a.values[n], b.values[n], a.sigmas[n], b.sigmas[n]
        assert va == vb or abs(va - vb) < 0.05 * sb, n
        assert sa == sb or abs(sa / sb - 1) < 0.02, n
