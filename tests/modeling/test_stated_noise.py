"""The stated-noise form of the fits: floors that follow an autoranged range, per-point
scales, the JSON round trip, and the meter's noise per channel (common practice, no
source: percent of reading plus percent of range is how instrument specifications state
accuracy)."""

from __future__ import annotations

import numpy as np
import pytest

from pnbench.modeling import lsq
from pnbench.modeling.fitnoise import Noise, StatedNoise, as_stated
from pnbench.modeling.meternoise import meter_noise

RANGES = (1e-8, 1e-7, 1e-6)


def test_the_floor_follows_the_range_a_reading_falls_in():
    noise = StatedNoise(1e-4, 1e-13, 5e-5, RANGES)
    floors = noise.floors(np.array([1e-12, 5e-9, 1e-8, 2e-8, -3e-7, 5e-6]))
    # 1e-8 still fits the 10 nA range; above the largest range its floor stays
    assert floors == pytest.approx([5e-13, 5e-13, 5e-13, 5e-12, 5e-11, 5e-11])
    assert noise.sigma(np.array([2e-8]))[0] == pytest.approx(1e-4 * 2e-8 + 5e-12)
    assert noise.smallest_floor == pytest.approx(5e-13)
    assert StatedNoise(1e-4, 2e-12).floors(np.array([1.0, 1e-9])) == pytest.approx([2e-12] * 2)


def test_json_round_trip_and_bad_documents():
    noise = StatedNoise(1e-4, 0.0, 5e-5, RANGES, StatedNoise(5e-5, 1e-6))
    assert StatedNoise.from_json_dict(noise.to_json_dict()) == noise
    assert as_stated((2e-4, 1e-12)) == StatedNoise(2e-4, 1e-12)
    assert as_stated(noise.to_json_dict()) == noise
    for bad in ({"relative": 1e-4}, {"relative": -1, "floor": 0}, {"relative": 0.1,
                "floor": float("nan")}, "0.1"):
        with pytest.raises(ValueError):
            StatedNoise.from_json_dict(bad)


def test_per_row_parts_of_the_fits_noise():
    yhat = np.array([[1.0], [2.0], [4.0]])
    noise = Noise((0.1,), (0.0,), estimated=False, linear=True,
                  floor_rows=np.array([[0.5], [0.0], [0.0]]),
                  scale_rows=np.array([1.0, 0.5, 1.0]),
                  extra_var=np.array([[0.0], [0.0], [0.09]]))
    assert noise.sigma(yhat)[:, 0] == pytest.approx([0.6, 0.1, 0.5])
    # rows that are not the fit's (another length) are not mixed in
    assert noise.sigma(np.array([[1.0]]))[0, 0] == pytest.approx(0.1)


def test_the_meters_noise_per_channel():
    """G and B each carry rel*|Y| + w*floor, so C = B/w carries rel*|Y|/w + floor and
    C*w/|Y| carries rel + floor*w/|Y|."""
    w, c, g = 2 * np.pi * 1e6, 10e-12, 1e-3
    k = w / abs(complex(g, w * c))
    noise = meter_noise(StatedNoise(2e-4, 2e-15), np.array([k]), np.array([0.5]))
    sig = noise.sigma(np.array([[c, c * k]]))[0]
    expected = (2e-4 * abs(complex(g, w * c)) / w + 2e-15) * 0.5
    assert sig == pytest.approx([expected, expected * k])
    assert isinstance(noise, lsq.Noise) and not noise.estimated
