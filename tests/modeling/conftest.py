"""Fixtures shared by the fitting tests."""

from __future__ import annotations

import fitdevices as fd
import pytest


@pytest.fixture(scope="session")
def data(ngspice):
    """Noise-free ngspice data of every invented test device, made once per session."""
    return {name: fd.make(ngspice, name) for name in fd.DEVICES}
