"""Open/short compensation in software (modeling.compensation).

Checked against the circuit it inverts, built here from series and parallel impedances
(no outside source needed): a series residual Zs, then a stray admittance Yo across the
device; the meter reads Zm = Zs + 1/(Yo + Ydut). The usual textbook form
Zdut = (Zm - Zs)/(1 - (Zm - Zs)*Yo), with Yo = 1/Zo, is the same where |Zs| << |Zo|
(LCR-meter manuals state it so; from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from pnbench.modeling.compensation import (
    FixtureResiduals,
    compensate,
    compensate_parallel,
)

F = np.array([1e3, 1e5, 1e6])
W = 2 * np.pi * F
ZS = 0.8 + 1j * W * 20e-9          # 0.8 ohm and 20 nH of leads
YO = 3e-9 + 1j * W * 0.4e-12       # 3 nS and 0.4 pF of stray


def _measured(y_dut):
    return 1.0 / (ZS + 1.0 / (YO + y_dut))


def _residuals(open_=True, short=True) -> FixtureResiduals:
    zo = ZS + 1.0 / YO  # the open is measured through the series residual
    values = {}
    if open_:
        yo = 1.0 / zo
        values["open"] = {"frequency_Hz": F.tolist(), "G_S": yo.real.tolist(),
                          "B_S": yo.imag.tolist()}
    if short:
        values["short"] = {"frequency_Hz": F.tolist(), "R_ohm": ZS.real.tolist(),
                           "X_ohm": ZS.imag.tolist()}
    return FixtureResiduals.from_values(values)


def test_open_and_short_give_back_the_device():
    y_dut = 1e-6 + 1j * W * 12e-12
    got = compensate(_measured(y_dut), F, _residuals())
    assert got == pytest.approx(y_dut, rel=1e-10, abs=0)


def test_the_usual_form_agrees_where_the_series_residual_is_small():
    y_dut = 1e-6 + 1j * W * 12e-12
    zm = 1.0 / _measured(y_dut)
    yo = 1.0 / (ZS + 1.0 / YO)  # Yo = 1/Zo, the open as measured
    z_dut = (zm - ZS) / (1.0 - (zm - ZS) * yo)
    got = compensate(_measured(y_dut), F, _residuals())
    assert 1.0 / z_dut == pytest.approx(got, rel=1e-4, abs=0)


def test_open_only_subtracts_the_stray_and_short_only_the_series_part():
    y_dut = 2e-7 + 1j * W * 5e-12
    assert compensate(y_dut + YO, F, _residuals(short=False)) == pytest.approx(
        y_dut, rel=1e-6, abs=0)
    assert compensate(1.0 / (ZS + 1.0 / y_dut), F, _residuals(open_=False)) == \
        pytest.approx(y_dut, rel=1e-10, abs=0)


def test_parallel_readings_round_trip_and_a_missing_conductance_stays_missing():
    y_dut = 1e-6 + 1j * W * 12e-12
    ym = _measured(y_dut)
    c, g = compensate_parallel(ym.imag / W, ym.real, F, _residuals())
    assert c == pytest.approx(y_dut.imag / W, rel=1e-9, abs=0)
    assert g == pytest.approx(y_dut.real, rel=1e-6, abs=0)
    c2, g2 = compensate_parallel(ym.imag / W, np.full(3, np.nan), F, _residuals())
    assert np.all(np.isnan(g2)) and np.all(np.isfinite(c2))


def test_between_and_beyond_the_measured_frequencies_c_and_l_are_interpolated_and_held():
    r = _residuals()
    at = r.open_admittance(np.array([3e5, 1e7]))
    c_open = (1.0 / (ZS + 1.0 / YO)).imag / W
    assert at.imag / (2 * np.pi * np.array([3e5, 1e7])) == pytest.approx(
        [np.interp(np.log(3e5), np.log(F), c_open), c_open[-1]], rel=1e-9, abs=0)
    assert r.open_capacitance_F() == pytest.approx(np.median(c_open), abs=0)


@pytest.mark.parametrize("values", [
    {"open": {"frequency_Hz": [1e5], "G_S": [0.0]}},
    {"open": {"frequency_Hz": [1e5, 1e6], "G_S": [0.0], "B_S": [1e-7, 1e-6]}},
    {"short": {"frequency_Hz": [-1.0], "R_ohm": [0.1], "X_ohm": [0.0]}},
    {"short": "0.1 ohm"},
])
def test_malformed_values_are_refused(values):
    with pytest.raises(ValueError, match="correction values"):
        FixtureResiduals.from_values(values)


def test_nothing_recorded_is_nothing_to_compensate():
    assert FixtureResiduals.from_values(None) is None
    assert FixtureResiduals.from_values({"open": None, "short": None}) is None


def test_values_read_at_several_test_levels_compensate_at_the_nearest_level():
    """pnbench's own open and short carry a test-level column: a step is compensated
    with the rows of the level nearest its own (the lowest without one)."""
    y_dut = 1e-6 + 1j * W * 12e-12
    zo = ZS + 1.0 / YO
    yo = 1.0 / zo
    levels = [0.005] * 3 + [0.05] * 3
    values = {"open": {"frequency_Hz": [*F, *F], "ac_level_V": levels,
                       "G_S": [*yo.real, *(2 * yo.real)], "B_S": [*yo.imag, *(2 * yo.imag)]},
              "short": {"frequency_Hz": [*F, *F], "ac_level_V": levels,
                        "R_ohm": [*ZS.real, *ZS.real], "X_ohm": [*ZS.imag, *ZS.imag]}}
    low = FixtureResiduals.from_values(values, 0.006)
    assert compensate(_measured(y_dut), F, low) == pytest.approx(y_dut, rel=1e-10, abs=0)
    assert FixtureResiduals.from_values(values).open_G_S == pytest.approx(yo.real, abs=0)
    high = FixtureResiduals.from_values(values, 0.04)
    assert high.open_B_S == pytest.approx(2 * yo.imag, rel=1e-12, abs=0)
    twice = {"open": {"frequency_Hz": [1e5, 1e5], "ac_level_V": [0.01, 0.01],
                      "G_S": [0.0, 0.0], "B_S": [1e-7, 1e-7]}}
    with pytest.raises(ValueError, match="a frequency twice at one test level"):
        FixtureResiduals.from_values(twice)
    with pytest.raises(ValueError, match="correction values"):
        FixtureResiduals.from_values({"open": {**twice["open"], "ac_level_V": ["x", 1]}})
