"""The temperature equations of modeling.temperature, checked on their own algebra.

The comparison with the reference simulator itself is in test_temperature_ngspice.py;
these checks need no simulator and say what each law must do by construction.
"""

from __future__ import annotations

import math

import pytest
from scipy import constants

from pnbench.modeling import junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.params import DiodeParams

CARD = DiodeParams(IS=2e-14, N=1.05, RS=1.5, CJO=3e-12, VJ=0.72, M=0.42, TT=4e-9,
                   BV=40.0, IBV=1e-5, EG=1.12, XTI=3.0, TRS=3e-3, TRS2=1e-6, TCV=0.02)


def test_nothing_moves_at_tnom():
    assert tm.params_at(CARD, 300.15, 300.15) is CARD
    assert tm.junction_capacitance(3e-12, 0.72, 0.42, 320.0, 320.0) == pytest.approx(
        3e-12, rel=1e-6, abs=0)
    assert tm.junction_potential(0.72, 250.0, 250.0) == pytest.approx(0.72, abs=1e-15)


def test_band_gap_constant_is_the_fit_at_the_reference_temperature():
    """The junction-potential law's 1.1150877 eV is EG_si(300.15 K) of the same fit, so a
    card with TNOM = REFTEMP keeps its VJ there (ngspice diotemp.c, read for this)."""
    assert tm.silicon_band_gap_eV(tm.REFTEMP_K) == pytest.approx(tm.PB_EG_REF_eV, abs=1e-7)
    # Silicon's gap near 1.12 eV at room temperature (Sze & Ng, 3rd ed., appendix; from
    # memory) and larger when cold.
    assert 1.10 < tm.silicon_band_gap_eV(300.0) < 1.13
    assert tm.silicon_band_gap_eV(77.0) > tm.silicon_band_gap_eV(400.0)


def test_saturation_current_law_by_hand():
    """IS(T) = IS*exp((T/Tn - 1)*EG/(N*Vt))*(T/Tn)**(XTI/N) written out once more."""
    t, tn = 400.0, 300.15
    vt = constants.k * t / constants.e
    by_hand = 2e-14 * math.exp((t / tn - 1) * 1.12 / (1.05 * vt)) * (t / tn) ** (3.0 / 1.05)
    assert tm.saturation_current(2e-14, 1.05, 1.12, 3.0, t, tn) == pytest.approx(by_hand,
                                                                                  rel=1e-13)
    # The forward voltage at a fixed current falls by about 2 mV/K for a silicon junction
    # (trade rule of thumb; common practice, no source).
    p = DiodeParams(IS=1e-14, N=1.0, EG=1.11, XTI=3.0)
    v300 = junction.voltage(1e-3, p, 300.15)
    v310 = junction.voltage(1e-3, tm.params_at(p, 310.15, 300.15), 310.15)
    assert -2.5e-3 < (v310 - v300) / 10.0 < -1.5e-3


def test_log_ratio_stays_finite_where_is_underflows():
    """At 77 K silicon's IS is near 1e-69 A of a 1e-14 A card: the logarithm keeps it."""
    log_ratio = tm.log_saturation_ratio(1.0, 1.11, 3.0, 77.0, 300.15)
    assert math.isfinite(log_ratio) and log_ratio < -100
    with pytest.raises(ValueError, match="beyond what a double holds"):
        tm.params_at(DiodeParams(IS=1e-18, EG=1.11), 10.0, 300.15)


def test_junction_potential_falls_and_capacitance_rises_when_hot():
    hot = tm.params_at(CARD, 400.0, 300.15)
    cold = tm.params_at(CARD, 250.0, 300.15)
    assert cold.VJ > CARD.VJ > hot.VJ
    assert cold.CJO < CARD.CJO < hot.CJO
    # VJ falls by about 1.5-2.5 mV/K for silicon junctions (common practice, no source).
    slope = (hot.VJ - CARD.VJ) / (400.0 - 300.15)
    assert -2.5e-3 < slope < -1.2e-3


def test_rs_and_bv_coefficients():
    hot = tm.params_at(CARD, 350.15, 300.15)
    assert hot.RS == pytest.approx(1.5 * (1 + 3e-3 * 50 + 1e-6 * 2500))
    assert hot.BV == pytest.approx(40.0 - 0.02 * 50)
    assert hot.N == CARD.N and hot.TT == CARD.TT and hot.IBV == CARD.IBV
    assert tm.params_at(DiodeParams(IS=1e-14), 350.0, 300.15).BV == math.inf


def test_coefficients_that_drive_rs_or_bv_below_zero_are_refused():
    with pytest.raises(ValueError, match="RS at"):
        tm.params_at(CARD.with_values(TRS=-0.05), 400.0, 300.15)
    with pytest.raises(ValueError, match="BV at"):
        tm.params_at(CARD.with_values(TCV=1.0), 400.0, 300.15)


def test_junction_potential_is_limited_to_one_over_fc():
    cold = tm.params_at(DiodeParams(VJ=1.0, CJO=1e-12, FC=0.9), 80.0, 300.15)
    assert cold.VJ == pytest.approx(1 / 0.9)
    assert tm.junction_potential(1.0, 80.0, 300.15, FC=0.0) > 1 / 0.9


@pytest.mark.parametrize("measured_K, tnom_K", [(400.0, 300.15), (250.0, 300.15),
                                                (330.0, 273.15)])
def test_capacitance_values_referred_back_to_tnom_round_trip(measured_K, tnom_K):
    at_t = tm.params_at(CARD, measured_K, tnom_K)
    back = tm.params_at_tnom(at_t, measured_K, tnom_K)
    assert back.VJ == pytest.approx(CARD.VJ, rel=1e-12)
    assert back.CJO == pytest.approx(CARD.CJO, rel=1e-12, abs=0)


def test_bad_temperatures_are_refused():
    for bad in (0.0, -5.0, math.nan, math.inf):
        with pytest.raises(ValueError, match="kelvin"):
            tm.params_at(CARD, bad, 300.15)


def test_card_carries_eg_xti_tnom_and_coefficients_and_reads_them_back():
    from pnbench.modeling.modelset import ModelSet

    model = ModelSet(values={"IS": 2e-14, "N": 1.05, "RS": 1.5, "EG": 1.12, "XTI": 3.1,
                             "TRS": 3e-3, "TRS2": 1e-6, "TCV": 0.02, "BV": 40.0},
                     sigmas={"EG": 0.004, "XTI": 0.2, "TRS2": 2e-7}, temperature_K=320.0)
    card = model.card_text("LH_T1")
    line = card.splitlines()[-1]
    for text in ("EG=1.12", "XTI=3.1", "TRS=0.003", "TRS2=1e-06", "TCV=0.02", "TNOM=46.85"):
        assert text in line
    back = ModelSet.from_card_text(card)
    assert back.values == model.values and back.temperature_K == pytest.approx(320.0)
    assert back.sigmas == model.sigmas
    assert ModelSet.from_json_dict(model.to_json_dict()).values == model.values
    # Zero coefficients mean "not given": a plain card stays plain.
    assert "TRS" not in ModelSet.from_params(DiodeParams(IS=1e-14)).values
