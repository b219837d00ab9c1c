"""The exact DC model: constants, rules of thumb, inverse, and properties over wide ranges."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, optimize

from pnbench.modeling import junction
from pnbench.modeling.params import DiodeParams


def test_thermal_voltage_at_27_celsius_from_scipy_constants():
    """Vt(300.15 K) = 25.865 mV; Vt(300 K) = 25.852 mV.

    Source: scipy.constants (CODATA 2018, k and e exact since the 2019 SI); docs/physics.md §1.
    """
    assert junction.thermal_voltage(300.15) == pytest.approx(25.865e-3, abs=0.5e-6)
    assert junction.thermal_voltage(300.0) == pytest.approx(25.852e-3, abs=0.5e-6)
    assert junction.thermal_voltage(300.15) == constants.k * 300.15 / constants.e


def test_thermal_voltage_is_about_26_mV_at_room_temperature():
    """Vt ~ 26 mV at room temperature (25-30 °C round to 26 mV). Common practice, no source."""
    for t_c in (25.0, 27.0, 30.0):
        assert round(junction.thermal_voltage(t_c + 273.15) * 1e3) == 26


def test_thermal_voltage_rejects_non_positive_temperature():
    with pytest.raises(ValueError):
        junction.thermal_voltage(0.0)


def test_shockley_without_rs_is_the_plain_formula():
    """RS = 0: I = IS*(exp(V/(N*Vt)) - 1) exactly (Shockley 1949; Sze & Ng ch. 2)."""
    p = DiodeParams(IS=3e-14, N=1.2)
    v = np.linspace(-1.0, 0.8, 50)
    a = 1.2 * junction.thermal_voltage()
    np.testing.assert_allclose(junction.current(v, p), 3e-14 * np.expm1(v / a), rtol=1e-14)


@pytest.mark.parametrize("p", [
    DiodeParams(IS=1e-14, N=1.0, RS=1.5),
    DiodeParams(IS=2e-9, N=1.03, RS=0.3, RSH=1e4),
    DiodeParams(IS=1e-12, N=1.6, RS=5.0, RSH=1e6, BV=8.0, IBV=1e-4),
    DiodeParams(IS=1e-14, N=1.0, RS=0.0, BV=3.0, IBV=1e-3),
])
def test_current_solves_the_implicit_equation_like_brentq(p):
    """The explicit Lambert-W current equals a bracketing root solve of the implicit
    equation I = Ij(V - I*RS) (scipy.optimize.brentq as the independent reference)."""
    v = np.concatenate([np.linspace(-(min(p.BV, 20.0) + 2.0), 0.0, 15),
                        np.linspace(0.05, 1.0, 15)])
    got = junction.current(v, p)
    for vk, ik in zip(v, got, strict=True):
        def f(i, vk=vk):
            return i - junction.junction_current(vk - i * p.RS, p)
        span = 10 * abs(ik) + 1e-6
        ref = optimize.brentq(f, ik - span, ik + span, xtol=1e-300, rtol=1e-15)
        assert ik == pytest.approx(ref, rel=1e-10, abs=1e-22)


def test_rd_is_about_26_ohm_at_1_mA_for_n_1():
    """rd = N*Vt/I ~ 26 ohm at 1 mA for N = 1. Common practice, no source."""
    p = DiodeParams(IS=1e-14, N=1.0)
    vd = junction.voltage(1e-3, p)
    rd = 1.0 / float(junction.junction_conductance(vd, p))
    assert rd == pytest.approx(26.0, abs=0.3)


def test_voltage_is_minus_infinity_below_minus_is_without_shunt_or_breakdown():
    p = DiodeParams(IS=1e-14)
    assert junction.voltage(-2e-14, p) == -math.inf


def test_scalar_in_scalar_out_and_shapes_kept():
    p = DiodeParams(IS=2.5e-9, N=1.03, RS=0.8, BV=40.0, IBV=1e-5)
    assert isinstance(junction.current(0.3, p), float)
    assert isinstance(junction.voltage(-1.0, p), float)
    assert junction.current(np.zeros((2, 3)), p).shape == (2, 3)
    assert junction.voltage(np.full((4, 1), 1e-3), p).shape == (4, 1)


def test_saturation_current_follows_the_simulator_temperature_law():
    """IS(T) = IS*(T/Tn)**(XTI/N)*exp(EG/(N*k/q)*(1/Tn - 1/T)) (docs/physics.md §3, Antognetti &
    Massobrio 1988); silicon IS roughly doubles every 5 K near room temperature
    (common practice, no source): here within 4.5-5.5 K per doubling."""
    p = DiodeParams(IS=1e-14, N=1.0, EG=1.11, XTI=3.0)
    ratio = junction.saturation_current(p, 310.15, 300.15) / p.IS
    assert 2 ** (10 / 5.5) < ratio < 2 ** (10 / 4.5)
    assert junction.saturation_current(p, 300.15, 300.15) == p.IS
    assert junction.params_at_temperature(p, 300.15, 300.15) is p


# --- properties over wide ranges (hypothesis) ----------------------------------------

def _params():
    return st.builds(
        DiodeParams,
        IS=st.floats(-16, -6).map(lambda e: 10.0**e),
        N=st.floats(0.9, 2.5),
        RS=st.one_of(st.just(0.0), st.floats(-3, 2).map(lambda e: 10.0**e)),
        RSH=st.one_of(st.just(math.inf), st.floats(2, 10).map(lambda e: 10.0**e)),
        BV=st.one_of(st.just(math.inf), st.floats(1.0, 1000.0)),
        IBV=st.floats(-9, -2).map(lambda e: 10.0**e),
    )


def _span(p: DiodeParams) -> np.ndarray:
    """Voltages from -(BV + 10 V) (or -100 V) to the voltage that carries 10 A."""
    low = -(p.BV + 10.0) if math.isfinite(p.BV) else -100.0
    high = junction.voltage(10.0, p)
    return np.concatenate([np.linspace(low, high, 600), np.linspace(-1.0, min(high, 1.5), 300)])


@settings(max_examples=60, deadline=None)
@given(_params())
def test_nothing_nan_or_infinite_and_current_monotonic(p):
    """Finite everywhere from -(BV + 10 V) to 10 A, and never decreasing with voltage."""
    v = np.sort(_span(p))
    assert np.all(np.isfinite(v))
    i = junction.current(v, p)
    assert np.all(np.isfinite(i))
    assert np.all(np.diff(i) >= 0)
    g = junction.junction_conductance(v - i * p.RS, p)
    assert np.all(np.isfinite(g))


@settings(max_examples=60, deadline=None)
@given(_params())
def test_voltage_from_current_round_trips(p):
    """current(voltage(i)) == i, and voltage(current(v)) == v where the curve is not flat."""
    v = _span(p)
    i = junction.current(v, p)
    v_back = junction.voltage(i, p)
    i_back = junction.current(v_back, p)
    np.testing.assert_allclose(i_back, i, rtol=1e-9, atol=1e-12 * p.IS)
    # Voltage resolution: dV = dI / (dI/dV); with I known to a few ulps.
    g_sh = 0.0 if math.isinf(p.RSH) else 1.0 / p.RSH
    gd = junction.junction_conductance(v - i * p.RS, p) + g_sh
    slope = gd / (1.0 + p.RS * gd)
    with np.errstate(divide="ignore"):
        tol = 1e-12 + 1e-9 * (np.abs(i) + p.IS) / slope
    resolved = tol < 1e-3           # where the curve is flat, V(I) is not defined by I
    assert resolved.sum() > 100
    err = np.abs(v_back - v)[resolved]
    assert np.all(err <= np.maximum(tol[resolved], 1e-9 * np.abs(v[resolved])))
