"""Mott–Schottky doping and built-in voltage from the C–V fit's corrected readings: the
test level, the fixture capacitance and the weighting are all accounted for, so over many
noisy data sets (value - truth)/sigma has an rms near one and no bias.

Truth: an abrupt junction CJO*(1 - V/VJ)**-1/2 is the Mott–Schottky line with
N = 2*VJ*CJO**2/(q*eps*A**2) and Vbi = VJ + kT/q (docs/physics.md §7, after Sze & Ng,
ch. 2). The readings come from the simulated bench's physics (the describing function of
the test signal, drivers/sim/physics.py) with the simulated meter's noise form.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from pnbench.drivers.sim.physics import fundamental_admittance
from pnbench.modeling import junction, mottschottky, network
from pnbench.modeling.materials import material
from pnbench.modeling.params import DiodeParams

T = 300.15
AREA = 2.5e-7
LEVEL = 0.02  # V rms, as the bundled varactor plan's C-V step
TRUE = DiodeParams(IS=4e-15, N=1.03, RS=0.42, CJO=3.2e-11, VJ=0.72, M=0.5, TT=2e-9)
CFIX = 0.35e-12
REL, FLOOR = 2e-4, 2e-15  # the meter's noise: relative of |Y|, floor as a capacitance


def _truth():
    eps = material("Si").permittivity_F_per_m
    n = 2 * TRUE.VJ * TRUE.CJO**2 / (constants.e * eps * AREA**2)
    return n, TRUE.VJ + junction.thermal_voltage(T)


def _clean():
    v = np.repeat(-np.arange(0.0, 31.0), 2)
    f = np.tile([1e5, 1e6], 31)
    y = np.array([fundamental_admittance(b, ff, LEVEL, TRUE, T) for b, ff in zip(v, f,
                                                                                strict=True)])
    return v, f, y + 2j * np.pi * f * CFIX


def _draw(v, f, y, rng):
    w = 2 * np.pi * f
    sigma = REL * np.abs(y) + w * FLOOR
    y = y + sigma * (rng.standard_normal(y.size) + 1j * rng.standard_normal(y.size))
    return y.imag / w, y.real


def _z(v, f, c, g, noise):
    fit = network.fit_network(v, f, c, g, fixed={"IS": TRUE.IS, "N": TRUE.N, "RS": TRUE.RS},
                              ac_level_V=LEVEL, noise=noise, temperature_K=T)
    assert fit.success, fit.message
    cv = {"voltage_V": v, "frequency_Hz": f, "capacitance_F": c, "compliance": None,
          "ac_level_V": np.full(v.size, LEVEL)}
    out = mottschottky.corrected_doping(cv, fit, area_m2=AREA, temperature_K=T,
                                        semiconductor="Si", noise=noise)
    n, vbi = _truth()
    return ((out["doping_per_m3"] - n) / out["doping_sigma_per_m3"],
            (out["built_in_voltage_V"] - vbi) / out["built_in_sigma_V"], out)


def test_clean_readings_give_the_truth_with_the_fixture_fitted_in_the_line():
    v, f, y = _clean()
    c, g = y.imag / (2 * np.pi * f), y.real
    zn, zv, out = _z(v, f, c, g, (REL, FLOOR))
    n, vbi = _truth()
    assert out["doping_per_m3"] == pytest.approx(n, rel=1e-5)
    assert out["built_in_voltage_V"] == pytest.approx(vbi, abs=2e-5)
    assert out["fixture_capacitance_F"]["value"] == pytest.approx(CFIX, rel=1e-3, abs=0)
    assert "artefact" not in out and "CFIX fitted" in out["method"]


def test_the_test_level_matters_at_this_precision():
    """Left in the readings, the test signal's Cj''*a**2/8 moves Vbi by about half its
    sigma on clean data: a bias every draw shares (so the correction is needed)."""
    v, f, y = _clean()
    c, g = y.imag / (2 * np.pi * f), y.real
    fit = network.fit_network(v, f, c, g, fixed={"IS": TRUE.IS, "N": TRUE.N, "RS": TRUE.RS},
                              ac_level_V=LEVEL, noise=(REL, FLOOR), temperature_K=T)
    cv = {"voltage_V": v, "frequency_Hz": f, "capacitance_F": c, "compliance": None}
    out = mottschottky.corrected_doping(cv, fit, area_m2=AREA, temperature_K=T,
                                        semiconductor="Si")  # no ac_level_V: not removed
    _, vbi = _truth()
    assert abs(out["built_in_voltage_V"] - vbi) > 0.4 * out["built_in_sigma_V"]


def test_sigmas_are_honest_over_noisy_draws():
    """40 draws with the meter's noise stated to the fits: rms of z near 1, mean near 0
    (for 40 draws, rms outside [0.7, 1.35] or |mean| > 0.6 is below a 1 % chance)."""
    v, f, y = _clean()
    rng = np.random.default_rng(20261202)
    zs = np.array([_z(v, f, *_draw(v, f, y, rng), (REL, FLOOR))[:2] for _ in range(40)])
    rms = np.sqrt(np.mean(zs**2, axis=0))
    assert np.all((rms > 0.7) & (rms < 1.35)), rms
    assert np.all(np.abs(zs.mean(axis=0)) < 0.6), zs.mean(axis=0)


def test_a_graded_junction_holds_the_fixture_at_the_fits_value():
    """M = 0.4: 1/C**2 is not a line, a constant offset would absorb the curvature, so the
    line keeps the C-V fit's CFIX and its sigma is carried by shifting it."""
    p = DiodeParams(IS=4e-15, N=1.03, RS=0.42, CJO=3.2e-11, VJ=0.72, M=0.4)
    v = -np.arange(0.0, 31.0)
    f = np.full(v.size, 1e6)
    y = np.array([fundamental_admittance(b, 1e6, LEVEL, p, T) for b in v])
    y = y + 2j * np.pi * f * CFIX
    c, g = y.imag / (2 * np.pi * f), y.real
    fit = network.fit_network(v, f, c, g, fixed={"IS": p.IS, "N": p.N, "RS": p.RS},
                              ac_level_V=LEVEL, noise=(REL, FLOOR), temperature_K=T,
                              with_fixture=True)
    cv = {"voltage_V": v, "frequency_Hz": f, "capacitance_F": c, "compliance": None}
    out = mottschottky.corrected_doping(cv, fit, area_m2=AREA, temperature_K=T,
                                        semiconductor="Si")
    assert "fixture_capacitance_F" not in out and "held" in out["corrected"]
    assert math.isfinite(out["doping_sigma_per_m3"]) and out["doping_per_m3"] > 0


def test_a_built_in_voltage_above_the_gap_is_flagged():
    assert "artefact" in mottschottky.band_gap_flag(1.3, "Si")
    assert mottschottky.band_gap_flag(0.8, "Si") is None


def test_too_few_reverse_points_say_so():
    v = np.array([0.0, -1.0, 0.5])
    out = mottschottky.corrected_doping(
        {"voltage_V": v, "frequency_Hz": np.full(3, 1e6), "capacitance_F": np.full(3, 1e-11),
         "compliance": None}, None, area_m2=AREA, temperature_K=T, semiconductor="Si")
    assert "doping not determined" in out["message"]
