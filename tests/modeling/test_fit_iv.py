"""Forward and reverse I-V fits against ngspice data of four invented devices.

Reference: ngspice level-1 diode in batch mode (tests/spicehelp.py), which adds GMIN
(1e-12 S) across the junction; where RSH is compared, the truth is the shunt with GMIN
folded in (spicehelp.reference_params).
"""

from __future__ import annotations

import math

import fitdevices as fd
import numpy as np
import pytest
from spicehelp import dc_sweep, reference_params

from pnbench.modeling import fit_iv, junction
from pnbench.modeling.fitresult import FitResult
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

TOL = {"IS": 0.02, "N": 0.005, "RS": 0.02, "RSH": 0.05, "BV": 0.01}




@pytest.mark.parametrize("name", sorted(fd.DEVICES))
def test_forward_fit_recovers_the_card_of_each_device(data, name):
    """Noise-free ngspice I-V: IS within 2 %, N 0.5 %, RS 2 % (and RSH 5 % where set)."""
    d = data[name]
    r = fit_iv.fit_forward(d.forward_v, d.forward_i)
    assert r.success, r.message
    truth = reference_params(d.params)
    for key in ("IS", "N", "RS"):
        assert fd.rel(r.values[key], getattr(truth, key)) < TOL[key], (key, r.values[key])
    if math.isfinite(d.params.RSH):
        assert fd.rel(r.values["RSH"], truth.RSH) < TOL["RSH"]
    assert r.used.shape == d.forward_v.shape and r.n_used == d.forward_v.size


def test_power_rectifier_is_series_resistance_limited_above_100mA(data):
    """The rectifier's RS exceeds rd = N*Vt/I above 100 mA (the point of that device):
    checked on the ngspice data with the trade rule rd = N*Vt/I (common practice, no
    source) and the fitted RS."""
    d = data["rec"]
    r = fit_iv.fit_forward(d.forward_v, d.forward_i)
    vt = junction.thermal_voltage(DEFAULT_TEMPERATURE_K)
    rd_at_100mA = r.values["N"] * vt / 0.1
    assert r.values["RS"] > rd_at_100mA
    assert d.forward_i.max() > 0.5
    assert fd.rel(r.values["RS"], d.params.RS) < TOL["RS"]


def test_rs_is_absent_when_the_data_never_leave_the_exponential(data):
    """Below 0.1 uA the sig diode's I*RS is below a microvolt: with 0.1 % of reading
    noise RS is not reported, and the message says why."""
    d = data["sig"]
    low = d.forward_i < 1e-7
    rng = np.random.default_rng(11)
    i = fd.instrument_noise(rng, d.forward_i[low], 1e-3, 1e-13)
    r = fit_iv.fit_forward(d.forward_v[low], i)
    assert r.success, r.message
    assert "RS" not in r.values and "RS" not in r.names
    assert "RS not determined: the data never leave the exponential region" in r.message
    assert fd.rel(r.values["N"], d.params.N) < TOL["N"]


def test_shunt_is_absent_when_it_stays_under_the_measurement_floor(data):
    """With a 1 pA floor, ngspice's GMIN shunt (pA at 0.1 V) is not visible: no RSH."""
    d = data["sig"]
    rng = np.random.default_rng(3)
    i = fd.instrument_noise(rng, d.forward_i, 1e-3, 1e-12)
    r = fit_iv.fit_forward(d.forward_v, i)
    assert r.success
    assert "RSH" not in r.values
    assert "RSH not determined" in r.message
    # floor points were dropped automatically
    assert not r.used[d.forward_i < 1e-12].any()


def test_points_in_compliance_are_left_out(data):
    """A clamped reading flagged in compliance changes nothing; without the flag it would
    distort the fit."""
    d = data["sch"]
    i = d.forward_i.copy()
    clamp = i > 0.2
    i[clamp] = 0.2  # what a source-measure unit reports at its compliance limit
    clean = fit_iv.fit_forward(d.forward_v, d.forward_i)
    flagged = fit_iv.fit_forward(d.forward_v, i, compliance=clamp)
    assert not flagged.used[clamp].any()
    assert fd.rel(flagged.values["RS"], clean.values["RS"]) < 0.01
    raw = fit_iv.fit_forward(d.forward_v, i)
    assert fd.rel(raw.values["RS"], d.params.RS) > 0.05


def test_override_mask_chooses_the_points(data):
    """The mask replaces the automatic choice: only those points enter, and a fit on the
    top of the curve alone still finds the card."""
    d = data["lky"]
    use = d.forward_v > 0.7
    r = fit_iv.fit_forward(d.forward_v, d.forward_i, use=use)
    assert np.array_equal(r.used, use)
    for key in ("IS", "N", "RS"):
        assert fd.rel(r.values[key], getattr(d.params, key)) < TOL[key]


def test_start_values_come_from_the_data_alone(data):
    """Steepest ln I stretch and Cheung-Cheung line land near the truth with no guess."""
    for name, d in data.items():
        t = fit_iv.start_values(d.forward_v, d.forward_i, DEFAULT_TEMPERATURE_K)
        assert abs(t[1] / d.params.N - 1) < 0.15, name
        assert abs(t[0] - math.log(d.params.IS)) < math.log(20), name
        assert 0.3 * d.params.RS < t[2] < 3 * d.params.RS, name


def test_fit_result_is_frozen_and_consistent(data):
    d = data["sig"]
    r = fit_iv.fit_forward(d.forward_v, d.forward_i)
    assert isinstance(r, FitResult)
    assert set(r.names) == set(r.values) == set(r.sigmas)
    assert r.covariance.shape == (len(r.names),) * 2
    assert np.allclose(np.diag(r.correlation), 1.0)
    with pytest.raises(ValueError):
        r.used[0] = False
    with pytest.raises(TypeError):
        r.values["IS"] = 1.0
    assert r.settled(0.5)["IS"] and not r.settled(1e-30)["IS"]
    assert r.settled(0.5, names=["BV"]) == {"BV": False}


@pytest.mark.parametrize("name", ["sig", "sch", "lky"])
def test_breakdown_voltage_at_the_stated_ibv(data, name):
    """BV within 1 % at the IBV reported; ngspice's breakdown current at -BV is IBV (the
    simulator convention, Nagel 1975) up to IS*BV/Vt, negligible for these cards."""
    d = data[name]
    r = fit_iv.fit_reverse(d.reverse_v, d.reverse_i, ibv_A=d.params.IBV)
    assert r.extras["IBV_A"] == d.params.IBV
    assert fd.rel(r.values["BV"], d.params.BV) < TOL["BV"], r.message
    assert r.sigmas["BV"] < 0.01 * d.params.BV


@pytest.mark.parametrize("seed", range(6))
def test_breakdown_through_scattered_voltage_readings(seed):
    """A sweep through a soft knee (N = 1.82) in 20 mV steps, stopped at the 10 uA guard,
    with 8 mV of scatter on the measured voltages: BV is read over several points with
    a finite sigma and lies within four of them of the true voltage at 10 uA (the
    breakdown term is IBV at -BV, the simulator convention, docs/physics.md §2); the leakage
    is read before the knee, where the reverse current is IS (Sze & Ng, ch. 2)."""
    p = DiodeParams(IS=2.9e-9, N=1.82, RS=0.62, BV=105.0, IBV=1e-7)
    rng = np.random.default_rng(seed)
    applied = np.arange(-100.0, -106.0, -0.02)
    i = np.asarray(junction.current(applied, p, DEFAULT_TEMPERATURE_K), dtype=float)
    stop = int(np.argmax(-i >= 1e-5)) + 1
    measured = applied[:stop] + 0.008 * rng.standard_normal(stop)
    i = i[:stop] * (1 + 1e-3 * rng.standard_normal(stop))
    r = fit_iv.fit_reverse(measured, i, ibv_A=1e-5)
    truth = -float(junction.voltage(-1e-5, p, DEFAULT_TEMPERATURE_K))
    assert r.extras["BV_points"] >= 4 and math.isfinite(r.sigmas["BV"]), r.message
    assert abs(r.values["BV"] - truth) < 4 * r.sigmas["BV"]
    assert fd.rel(r.extras["leakage_A"], p.IS) < 0.02, r.extras


def test_nothing_is_invented_when_breakdown_is_not_reached(data):
    d = data["rec"]
    r = fit_iv.fit_reverse(d.reverse_v, d.reverse_i, ibv_A=1e-5)
    assert "BV" not in r.values
    assert "BV not determined" in r.message and "1e-05 A" in r.message
    assert r.success  # the leakage is still measured


def test_reverse_shunt_and_leakage_of_the_leaky_diode(data, ngspice):
    """RSH within 5 % from the slope before breakdown; leakage at -10 V matches an
    ngspice point computed there to 1 %."""
    d = data["lky"]
    r = fit_iv.fit_reverse(d.reverse_v, d.reverse_i, reference_V=-10.0)
    truth = reference_params(d.params)
    assert fd.rel(r.values["RSH"], truth.RSH) < TOL["RSH"]
    _, i_ref = dc_sweep(ngspice, d.params, [-10.0])
    assert r.extras["leakage_voltage_V"] == -10.0
    assert fd.rel(r.extras["leakage_A"], -i_ref[0]) < 0.01


def test_leakage_outside_the_measured_range_is_not_made_up(data):
    d = data["rec"]
    r = fit_iv.fit_reverse(d.reverse_v, d.reverse_i, reference_V=-400.0)
    assert "leakage_A" not in r.extras
    assert "not determined" in r.message


def _crb(v, p, rel, floor, h=1e-6):
    """Cramér-Rao bound of (ln IS, N, RS) for Gaussian readings of sigma = rel*I + floor
    (in quadrature): (J^T W J)^-1 at the truth (docs/physics.md §9; Kay, 1993, ch. 3), J by
    central differences of junction.current, independent of the fitter's own derivatives."""
    base = np.array([math.log(p.IS), p.N, p.RS])

    def cur(t):
        return junction.current(v, p.with_values(IS=math.exp(t[0]), N=t[1], RS=t[2]))

    cols = []
    for k in range(3):
        dt = np.zeros(3)
        dt[k] = h * max(1.0, abs(base[k]))
        cols.append((cur(base + dt) - cur(base - dt)) / (2 * dt[k]))
    return fd.inverse_fisher(np.column_stack(cols), cur(base), rel, floor)


def test_monte_carlo_sigma_is_honest_and_near_the_cramer_rao_bound(ngspice):
    """200 draws of 0.1 % of reading + 1 pA noise on ngspice data (GMIN set negligible):
    the truth lies within 2 sigma in about 95 % of draws, the reported sigma and the
    spread both match the Cramér-Rao bound at the truth within ~12 %."""
    p = fd.DEVICES["sch"]
    v = np.linspace(0.02, fd.FORWARD_TOP_V["sch"], 80)
    v, i_true = dc_sweep(ngspice, p, v, gmin=1e-18)
    rel, floor = 1e-3, 1e-12
    rng = np.random.default_rng(20261201)
    draws = fd.instrument_noise(rng, i_true, rel, floor, draws=200)
    truth = np.array([math.log(p.IS), p.N, p.RS])
    est, sig = [], []
    for i in draws:
        r = fit_iv.fit_forward(v, i)
        assert r.success and {"IS", "N", "RS"} <= set(r.values), r.message
        est.append([math.log(r.values["IS"]), r.values["N"], r.values["RS"]])
        sig.append([r.sigmas["IS"] / r.values["IS"], r.sigmas["N"], r.sigmas["RS"]])
    inside, sigma, spread = fd.draw_stats(est, sig, truth,
                                          np.sqrt(np.diag(_crb(v, p, rel, floor))))
    assert np.all((inside > 0.89) & (inside < 0.995)), inside
    assert np.all(np.abs(sigma - 1) < 0.12), sigma
    assert np.all(np.abs(spread - 1) < 0.15), spread
