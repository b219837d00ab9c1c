"""The fixture's series resistance (RFIX) in the network fit, against ngspice.

A device invented for these checks is simulated by ngspice (batch mode,
tests/spicehelp.py) at DC and in AC analysis. The fixture goes around it the way the
meter's open/short correction models one: its stray capacitance across the device, then
its series resistance to the meter, Y = Yt/(1 + RFIX*Yt) with Yt = Ydev + jwCFIX (exact
for a resistor in series at the test frequency; the DC bias is taken at the device, as
the simulated bench applies it). The readings get the meter's noise, a percent of |Y|
plus a floor as a capacitance (common practice, no source), drawn with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from spicehelp import ac_admittance, dc_sweep

from pnbench.modeling import joint
from pnbench.modeling.params import DiodeParams

#: A varactor with a 4-wire RS of 0.6 ohm (invented).
PART = DiodeParams(IS=4e-15, N=1.03, RS=0.6, CJO=2.4e-11, VJ=0.74, M=0.5, TT=3e-9,
                   BV=28.0, IBV=1e-4)
CFIX = 0.4e-12
#: The fixture's leads: about the device's own RS, which at 0.7 V and 1 MHz lowers the
#: parallel C the meter reads by several percent.
RFIX = 0.5
REL, FLOOR_F = 2e-4, 2e-15


@pytest.fixture(scope="module")
def clean(ngspice):
    """Noise-free I-V and the device's admittance (no fixture) from ngspice."""
    p = PART
    fv, fi = dc_sweep(ngspice, p, np.linspace(0.05, 0.95, 60))
    rv, ri = dc_sweep(ngspice, p, np.linspace(-0.2, -20.0, 30), options={"reltol": 1e-7})
    cv_v = np.concatenate([np.linspace(0.0, -25.0, 26),
                           [0.2, 0.35, 0.5, 0.58, 0.62, 0.66, 0.68, 0.7, 0.72]])
    f = np.array([1e5, 3e5, 1e6])
    y = ac_admittance(ngspice, p, cv_v, f).ravel()
    return {"fv": fv, "fi": fi, "rv": rv, "ri": ri, "v": np.repeat(cv_v, f.size),
            "f": np.tile(f, cv_v.size), "y": y}


def _data(clean, rfix: float, seed: int) -> dict:
    w = 2 * np.pi * clean["f"]
    yt = clean["y"] + 1j * w * CFIX
    y = yt / (1.0 + rfix * yt)
    rng = np.random.default_rng(seed)
    sigma = REL * np.abs(y) + w * FLOOR_F
    y = y + sigma * (rng.standard_normal(y.size) + 1j * rng.standard_normal(y.size))
    i_noise = 1e-4 * np.abs(clean["fi"]) * rng.standard_normal(clean["fi"].size)
    return {"iv_forward": {"voltage_V": clean["fv"], "current_A": clean["fi"] + i_noise},
            "iv_reverse": {"voltage_V": clean["rv"], "current_A": clean["ri"]},
            "cv": {"voltage_V": clean["v"], "frequency_Hz": clean["f"],
                   "capacitance_F": y.imag / w, "conductance_S": y.real}}


def _z(model, name: str, truth: float) -> float:
    return (model.values[name] - truth) / model.sigmas[name]


def test_the_readings_are_shifted_noticeably(clean):
    """The fixture's RFIX lowers the forward C the meter reads by more than 1 % (so a
    fit that ignores it is biased), while the reverse readings barely move."""
    with_r, without = _data(clean, RFIX, 1), _data(clean, 0.0, 1)
    c1, c0 = with_r["cv"]["capacitance_F"], without["cv"]["capacitance_F"]
    v = clean["v"]
    assert np.max(np.abs(c1[v > 0.6] / c0[v > 0.6] - 1)) > 0.01
    assert np.max(np.abs(c1[v < 0] / c0[v < 0] - 1)) < 2e-3


@pytest.mark.parametrize("seed", [11, 12])
def test_fixture_series_resistance_is_recovered(clean, seed):
    """RFIX is fitted (its reason in the message), within 2 sigma of the truth, stated as
    the bench's in the model's extras and never folded into RS; RS, TT and CFIX stay
    within 2 sigma of theirs."""
    fit = joint.fit_all(_data(clean, RFIX, seed), ibv_A=PART.IBV)
    m, cv = fit.model, fit.results["cv"]
    assert cv.success, cv.message
    assert "fixture series resistance RFIX" in cv.message
    assert "RFIX" not in m.values  # the bench's: not a card parameter
    got = m.extras["fixture_resistance_ohm"]
    assert abs(got["value"] - RFIX) < 2 * got["sigma"], got
    assert abs(cv.values["RFIX"] - RFIX) < 2 * cv.sigmas["RFIX"]
    assert abs(_z(m, "RS", PART.RS)) < 2
    assert abs(_z(m, "TT", PART.TT)) < 2
    assert abs(m.extras["fixture_capacitance_F"]["value"] - CFIX) \
        < 2 * m.extras["fixture_capacitance_F"]["sigma"]


def test_without_a_fixture_resistance_none_is_kept(clean):
    """The same device and noise with RFIX = 0: no RFIX is kept, the message says why,
    and the model's extras carry none."""
    fit = joint.fit_all(_data(clean, 0.0, 11), ibv_A=PART.IBV)
    cv = fit.results["cv"]
    assert cv.success, cv.message
    assert "RFIX" not in cv.values
    assert "RFIX (fixture series resistance) not fitted" in cv.message
    assert "fixture_resistance_ohm" not in fit.model.extras
    assert abs(_z(fit.model, "TT", PART.TT)) < 2

