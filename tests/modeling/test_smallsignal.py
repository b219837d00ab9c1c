"""Small-signal equivalent at a Q-point and the LCR-meter conversions."""

from __future__ import annotations

import math

import numpy as np
import pytest

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.params import DiodeParams


def test_abrupt_junction_capacitance_scales_as_inverse_square_root():
    """Abrupt junction (M = 1/2): Cj ∝ (VJ - V)^-1/2, so quadrupling VJ - V halves Cj.

    Source: Sze & Ng, Physics of Semiconductor Devices, 3rd ed., ch. 2 (depletion
    capacitance of an abrupt junction).
    """
    p = DiodeParams(CJO=10e-12, VJ=0.8, M=0.5)
    v = np.array([-0.2, -3.2])           # VJ - V = 1.0 and 4.0
    c = smallsignal.depletion_capacitance(v, p)
    assert c[0] / c[1] == pytest.approx(2.0, rel=1e-12)
    vs = np.linspace(-20.0, 0.3, 30)
    c = smallsignal.depletion_capacitance(vs, p)
    slope = np.polyfit(np.log(p.VJ - vs), np.log(c), 1)[0]
    assert slope == pytest.approx(-0.5, abs=1e-12)


def test_linearization_above_fc_vj_is_continuous_with_matching_slope():
    """Above FC*VJ the simulator's straight line continues Cj with value and slope
    (Nagel, SPICE2, 1975; docs/physics.md §4)."""
    p = DiodeParams(CJO=5e-12, VJ=0.7, M=0.4, FC=0.5)
    knee = p.FC * p.VJ
    h = 1e-7
    below, above = smallsignal.depletion_capacitance(np.array([knee - h, knee + h]), p)
    assert above == pytest.approx(below, rel=1e-6)
    d_below = (smallsignal.depletion_capacitance(knee - h, p)
               - smallsignal.depletion_capacitance(knee - 2 * h, p)) / h
    d_above = (smallsignal.depletion_capacitance(knee + 2 * h, p)
               - smallsignal.depletion_capacitance(knee + h, p)) / h
    assert d_above == pytest.approx(d_below, rel=1e-4)


def test_rd_is_about_26_ohm_at_1_mA_and_gd_is_current_over_n_vt():
    """rd ~ 26 ohm at 1 mA for N = 1 (common practice, no source); gd = (I + IS)/(N*Vt)
    exactly (docs/physics.md §4)."""
    p = DiodeParams(IS=1e-14, N=1.0, RS=3.0, TT=4e-9)
    q = smallsignal.operating_point(p, current=1e-3)
    assert q.rd_ohm == pytest.approx(26.0, abs=0.3)
    assert q.gd_S == pytest.approx((1e-3 + 1e-14) / junction.thermal_voltage(), rel=1e-12)
    assert q.cd_F == pytest.approx(4e-9 * q.gd_S, rel=1e-15, abs=0)
    assert q.bias_voltage_V == pytest.approx(q.junction_voltage_V + 1e-3 * 3.0, rel=1e-15)


def test_operating_point_by_voltage_and_by_current_agree():
    p = DiodeParams(IS=2e-9, N=1.05, RS=0.7, RSH=1e5, CJO=80e-12, VJ=0.5, M=0.45, TT=1e-9)
    by_v = smallsignal.operating_point(p, voltage=0.35)
    by_i = smallsignal.operating_point(p, current=by_v.bias_current_A)
    assert by_i.bias_voltage_V == pytest.approx(0.35, rel=1e-12)
    assert by_i.gd_S == pytest.approx(by_v.gd_S, rel=1e-10)
    with pytest.raises(ValueError):
        smallsignal.operating_point(p)


def test_admittance_is_rs_in_series_with_the_junction():
    """Z = RS + 1/(gd + 1/RSH + j*w*(Cj + Cd)) (docs/physics.md §4), at the QPoint and in
    device_admittance alike."""
    p = DiodeParams(IS=1e-13, N=1.2, RS=2.5, RSH=2e6, CJO=20e-12, VJ=0.7, M=0.33, TT=5e-9)
    f = np.array([1e2, 1e5, 1e8])
    q = smallsignal.operating_point(p, voltage=0.55)
    yj = q.gd_S + 1 / p.RSH + 2j * np.pi * f * (q.cj_F + q.cd_F)
    expected = 1.0 / (p.RS + 1.0 / yj)
    np.testing.assert_allclose(q.admittance(f), expected, rtol=1e-13)
    np.testing.assert_allclose(smallsignal.device_admittance(0.55, f, p), expected, rtol=1e-12)
    np.testing.assert_allclose(q.impedance(f), 1.0 / expected, rtol=1e-13)


def test_meter_conversions_round_trip_and_follow_the_textbook_relations():
    """Cs = Cp*(1 + D^2), Rser = Gp/(Gp^2 + w^2*Cp^2), D = Gp/(w*Cp) = w*Cs*Rser
    (docs/physics.md §5; these follow from Z = 1/Y)."""
    f = np.array([1e3, 1e6])
    w = 2 * np.pi * f
    cp, gp = 47e-12, np.array([3e-6, 2e-4])
    y = smallsignal.admittance_from_parallel(cp, gp, f)
    cp2, gp2 = smallsignal.parallel_from_admittance(y, f)
    np.testing.assert_allclose(cp2, cp, rtol=1e-14)
    np.testing.assert_allclose(gp2, gp, rtol=1e-14)
    d = smallsignal.dissipation(y, f)
    np.testing.assert_allclose(d, gp / (w * cp), rtol=1e-14)
    cs, rser = smallsignal.series_from_admittance(y, f)
    np.testing.assert_allclose(cs, cp * (1 + d**2), rtol=1e-12)
    np.testing.assert_allclose(rser, gp / (gp**2 + w**2 * cp**2), rtol=1e-12)
    np.testing.assert_allclose(w * cs * rser, d, rtol=1e-12)
    np.testing.assert_allclose(smallsignal.admittance_from_series(cs, rser, f), y, rtol=1e-12)


def test_zero_conductance_gives_infinite_rd_not_an_error():
    p = DiodeParams(IS=1e-14, N=1.0)
    q = smallsignal.operating_point(p, voltage=-50.0)
    assert q.gd_S == 0.0 and math.isinf(q.rd_ohm)


def test_a_fixture_capacitance_adds_to_the_parallel_capacitance_and_leaves_gp():
    """Capacitances in parallel add and a lossless capacitor adds no conductance (circuit
    theory; common practice, no source): the meter's Cp of device plus fixture is the
    device's Cp plus the fixture's, at every bias and frequency, and Gp is unchanged."""
    p = DiodeParams(IS=1e-14, N=1.05, RS=2.0, CJO=20e-12, VJ=0.7, M=0.45, TT=5e-9)
    v = np.array([-10.0, -1.0, 0.0, 0.3, 0.6])[:, None]
    f = np.array([1e3, 1e5, 1e6])[None, :]
    bare = smallsignal.device_admittance(v, f, p, 300.0)
    with_fixture = smallsignal.device_admittance(v, f, p, 300.0, fixture_F=0.35e-12)
    cp0, gp0 = smallsignal.parallel_from_admittance(bare, f)
    cp1, gp1 = smallsignal.parallel_from_admittance(with_fixture, f)
    assert np.allclose(cp1 - cp0, 0.35e-12, rtol=0, atol=1e-20)
    assert np.allclose(gp1, gp0, rtol=1e-12, atol=0)
