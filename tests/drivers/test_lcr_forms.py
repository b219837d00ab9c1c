"""LCR reading forms to complex admittance.

Reference relations are textbook AC circuit theory (from memory): a parallel C-G pair has
Y = G + j*w*C; a series C-R pair has Z = R + 1/(j*w*C); D = G/(w*Cp) = w*Cs*Rs, the same
dissipation factor in both models (common practice, no source).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from pnbench.drivers.dialect import LCR_FORMS
from pnbench.drivers.roles import admittance_from_reading


def textbook_readings(cp: float, gp: float, f: float) -> dict[str, tuple[float, float]]:
    w = 2 * math.pi * f
    y = complex(gp, w * cp)
    z = 1 / y
    cs = -1 / (w * z.imag)
    return {
        "parallel": (cp, gp),
        "parallel_r": (cp, 1 / gp),
        "parallel_d": (cp, gp / (w * cp)),
        "series": (cs, z.real),
        "series_d": (cs, w * cs * z.real),
        "admittance": (gp, w * cp),
        "impedance": (z.real, z.imag),
    }


capacitance = st.floats(1e-13, 1e-6)
conductance = st.floats(1e-10, 1e-1)
frequency = st.floats(20.0, 2e6)


@given(capacitance, conductance, frequency)
def test_every_form_gives_the_same_admittance(cp, gp, f):
    readings = textbook_readings(cp, gp, f)
    assert set(readings) == set(LCR_FORMS)
    y = complex(gp, 2 * math.pi * f * cp)
    for form, (primary, secondary) in readings.items():
        got = admittance_from_reading(form, primary, secondary, f)
        assert got.real == pytest.approx(y.real, rel=1e-9, abs=1e-12 * abs(y)), form
        assert got.imag == pytest.approx(y.imag, rel=1e-9, abs=1e-12 * abs(y)), form


def test_dissipation_is_the_same_in_series_and_parallel():
    """D = Gp/(w Cp) = w Cs Rs (common practice, no source): 100 pF || 1 uS at 1 kHz."""
    r = textbook_readings(1e-10, 1e-6, 1e3)
    assert r["parallel_d"][1] == pytest.approx(r["series_d"][1], rel=1e-12)
    assert r["parallel_d"][1] == pytest.approx(1e-6 / (2 * math.pi * 1e3 * 1e-10), rel=1e-12)


def test_markers_give_nan_and_unknown_form_raises():
    y = admittance_from_reading("parallel", math.inf, 1e-6, 1e3)
    assert math.isnan(y.real) and math.isnan(y.imag)
    y = admittance_from_reading("series", 1e-9, math.nan, 1e3)
    assert math.isnan(y.real)
    with pytest.raises(ValueError):
        admittance_from_reading("ZTHETA", 1.0, 1.0, 1e3)
