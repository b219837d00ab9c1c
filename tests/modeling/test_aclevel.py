"""The AC test-level check against a computed large-signal fundamental."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import iv

from pnbench.modeling import aclevel, junction
from pnbench.modeling.params import DiodeParams

P = DiodeParams(IS=1e-14, N=1.0)
A = junction.thermal_voltage()


@pytest.mark.parametrize("x", [0.02, 0.1, 0.3, 0.5])
def test_error_estimate_matches_the_computed_large_signal_fundamental(x):
    """The estimate x^2/8 (third-order term of the exp series, docs/physics.md §6; DLMF §10.25(ii))
    matches the fundamental of Ij(Vd + x*N*Vt*cos) computed numerically to within
    about x^2/24 of itself (the next term of the series, x^4/192)."""
    vd = 0.62
    g_small = float(junction.junction_conductance(vd, P))
    g_large = aclevel.fundamental_conductance(P, vd, x * A)
    computed = g_large / g_small - 1.0
    assert computed == pytest.approx(x * x / 8, rel=x * x / 20 + 1e-9)


def test_fundamental_equals_the_bessel_series():
    """exp(x*cos t) = I0(x) + 2*sum Ik(x)*cos(k*t), so the fundamental of the exponential
    current is 2*I1(x)/x times the small-signal one (Abramowitz & Stegun 9.6.34, from
    memory; scipy.special.iv)."""
    vd = 0.55
    g_small = float(junction.junction_conductance(vd, P))
    for x in (0.05, 0.8, 2.0):
        g_large = aclevel.fundamental_conductance(P, vd, x * A)
        assert g_large / g_small == pytest.approx(2 * iv(1, x) / x, rel=1e-12)


def test_five_millivolt_rms_at_one_milliamp_is_just_acceptable_ten_is_not():
    """5 mV rms = 7.07 mV peak = 0.27 N*Vt: about 0.9 % on the conductance reading; 10 mV
    rms is about 3.7 %: not small."""
    ok = aclevel.check_ac_level(P, 5e-3, bias_current_A=1e-3)
    assert ok.small and ok.conductance_error == pytest.approx(0.00934, rel=1e-2)
    assert ok.distortion == pytest.approx(ok.ratio / 2)
    bad = aclevel.check_ac_level(P, 10e-3, bias_current_A=1e-3)
    assert not bad.small and "not small against N*Vt" in bad.message
    edge = aclevel.check_ac_level(P, bad.recommended_level_V_rms, bias_current_A=1e-3)
    assert edge.conductance_error == pytest.approx(0.01, rel=1e-9)


def test_series_resistance_divides_the_level():
    """At high current RS takes most of the test signal: the junction sees
    |1/(1 + RS*Yj)| of it (docs/physics.md §4 equivalent circuit)."""
    p = DiodeParams(IS=1e-14, N=1.0, RS=5.0)
    check = aclevel.check_ac_level(p, 10e-3, bias_current_A=20e-3)
    gd = (20e-3 + 1e-14) / A
    assert check.junction_amplitude_V == pytest.approx(math.sqrt(2) * 10e-3 / (1 + 5 * gd),
                                                       rel=1e-9)
    with_c = aclevel.check_ac_level(p.with_values(CJO=1e-9), 10e-3, bias_current_A=20e-3,
                                    frequency_Hz=1e8)
    assert with_c.junction_amplitude_V < check.junction_amplitude_V


def test_a_shunt_dominated_bias_is_insensitive_to_the_level():
    p = DiodeParams(IS=1e-14, N=1.0, RSH=1e6)
    check = aclevel.check_ac_level(p, 50e-3, bias_voltage_V=-2.0)
    assert check.exponential_fraction < 1e-20 and check.small


def test_bad_levels_are_refused():
    with pytest.raises(ValueError):
        aclevel.check_ac_level(P, -1e-3, bias_voltage_V=0.5)
    with pytest.raises(ValueError):
        aclevel.fundamental_conductance(P, 0.5, 0.0)
    assert np.isfinite(aclevel.fundamental_conductance(P, 0.5, 5 * A))


def test_worst_case_error_is_the_full_check_for_a_bare_exponential_junction():
    """Without RS or shunt and well into forward bias (share of exponential conductance
    ~1), the plan-time estimate equals the full check at that bias."""
    from pnbench.modeling.aclevel import worst_case_error
    from pnbench.modeling.junction import thermal_voltage

    p = DiodeParams(IS=1e-14, N=1.0)
    full = aclevel.check_ac_level(p, 0.02, bias_voltage_V=0.6)
    error, distortion = worst_case_error(0.02, thermal_voltage())
    assert error == pytest.approx(full.conductance_error, rel=1e-9)
    assert distortion == pytest.approx(full.distortion, rel=1e-9)
