"""Data without noise (precision module): the digits the numbers carry, what the fit says
about residuals at their rounding, and that a real misfit and noisy data are judged as
before."""

from __future__ import annotations

import numpy as np
import pytest

from pnbench.modeling import fit_cv, precision, smallsignal
from pnbench.modeling.params import DiodeParams

P = DiodeParams(IS=1e-14, N=1.0, RS=0.5, CJO=2e-11, VJ=0.7, M=0.5)
V = np.linspace(-20.0, 0.0, 41)
F = np.full(V.size, 1e6)
C = np.asarray(smallsignal.depletion_capacitance(V, P))


def _rounded(values, digits: int) -> np.ndarray:
    """As written to a file with ``digits`` significant digits and read back."""
    return np.array([float(f"{x:.{digits}g}") for x in values])


@pytest.mark.parametrize("digits", [3, 6, 12])
def test_significant_digits_are_those_written(digits):
    """Numbers written with N significant digits and read back need N to be reproduced;
    full doubles need 15 or more (a decimal string with N digits round-trips through a
    double for N <= 15: IEEE 754-2008, sec. 5.12.2)."""
    assert precision.significant_digits(_rounded(C, digits)) == digits
    assert precision.significant_digits(C) >= precision.FULL_DIGITS


def test_the_rounding_unit_is_the_last_digit():
    """0.0123456 has 6 significant digits, the last worth 1e-7 (common practice, no
    source)."""
    assert precision.rounding_unit(np.array([0.0123456, -250.0, 0.0]), 6).tolist() == \
        pytest.approx([1e-7, 1e-3, 0.0], rel=1e-12, abs=0)


def test_clean_data_rounded_to_six_digits_are_called_so():
    """Noise-free C-V written with 6 digits: the fit says its residuals are that rounding
    and gives no misfit verdict; the values come back within the rounding's reach."""
    fit = fit_cv.fit_cv(V, F, _rounded(C, 6))
    assert "the data look noise-free, rounded to 6 significant digits" in fit.message
    lof = fit.extras["lack_of_fit"]
    assert not lof["misfit"] and lof["noise_free"]["at_rounding"]
    assert lof["noise_free"]["residual_over_rounding"] < precision.AT_ROUNDING
    for name in ("CJO", "VJ", "M"):
        assert fit.values[name] == pytest.approx(getattr(P, name), rel=1e-5, abs=0), name


def test_a_real_misfit_in_rounded_data_is_still_flagged():
    """A 2 pF fixture fitted as junction only, on noise-free data of 6 digits: the
    residuals are far above the rounding, and the runs test flags the misfit as it does
    on noisy data (Wald & Wolfowitz 1940)."""
    fit = fit_cv.fit_cv(V, F, _rounded(C + 2e-12, 6), with_fixture=False)
    lof = fit.extras["lack_of_fit"]
    assert "noise_free" not in lof
    assert lof["misfit"] and "does not describe the data" in fit.message


@pytest.mark.parametrize("digits", [6, None])
def test_noisy_data_never_qualify(digits):
    """Readings with 0.02 % noise, at full precision or written with 6 digits: no
    statement, the same verdict and values as without the check."""
    rng = np.random.default_rng(3)
    c = C * (1 + 2e-4 * rng.standard_normal(C.size))
    c = c if digits is None else _rounded(c, digits)
    fit = fit_cv.fit_cv(V, F, c)
    assert "noise_free" not in fit.extras["lack_of_fit"]
    assert "look noise-free" not in fit.message and "look computed" not in fit.message


def test_a_fixture_term_below_resolution_is_not_kept_and_one_above_is():
    """On data computed at full precision, a constant 1e-9 of the capacitance is fitted
    by the 3-sigma rule but changes no reading by RESOLUTION, so it is not kept (the
    size of ngspice's TT*GMIN); 1e-5 of it is kept (common practice, no source)."""
    small = fit_cv.fit_cv(V, F, C + 1e-9 * C.min())
    assert "CFIX" not in small.values and "not kept" in small.message
    assert not small.extras["lack_of_fit"]["misfit"]
    big = fit_cv.fit_cv(V, F, C + 1e-5 * C.min())
    assert big.values["CFIX"] == pytest.approx(1e-5 * C.min(), rel=1e-3, abs=0)


def test_iv_computed_by_the_model_itself_gives_its_parameters_back():
    """Forward I-V computed by the model at full precision: the fit passes through every
    point exactly (zero residuals, so zero variance), which once read as "not
    determined" and dropped RS, leaving IS 11 times too large and N = 1.22. Now every
    value comes back and the data are said to be exact (common practice, no source)."""
    from pnbench.modeling import fit_iv, junction

    p = DiodeParams(IS=2e-14, N=1.05, RS=1.5)
    v = np.linspace(0.2, 0.9, 60)
    fit = fit_iv.fit_forward(v, np.asarray(junction.current(v, p)))
    for name in ("IS", "N", "RS"):
        assert fit.values[name] == pytest.approx(getattr(p, name), rel=1e-9, abs=0), name
    assert "RSH" not in fit.values and not fit.extras["lack_of_fit"]["misfit"]
    assert "the data look noise-free" in fit.message


def test_a_forward_point_no_meter_could_tell_from_the_curve_is_taken_back():
    """Computed C-V (the model's own, full precision) with TT = 5 ns: at 0.05 V the
    diffusion capacitance is 6e-10 of the reading, which the forward cut's z test sees
    against residuals of 1e-16; it is taken back (below RESOLUTION), while the point at
    0.4 V (3e-4 of the reading) stays out with its reason (common practice, no source)."""
    p = P.with_values(TT=5e-9, RS=0.0)
    v = np.concatenate([V, [0.05, 0.4]])
    f = np.full(v.size, 1e6)
    c = np.imag(smallsignal.device_admittance(v, f, p)) / (2 * np.pi * 1e6)
    fit = fit_cv.fit_cv(v, f, c)
    assert bool(fit.used[-2]) and not bool(fit.used[-1])
    assert "1 points from 0.4 V up left out" in fit.message
    for name in ("CJO", "VJ", "M"):
        assert fit.values[name] == pytest.approx(getattr(P, name), rel=1e-8, abs=0), name
