"""Fixtures for driver tests: a fresh pyvisa-sim bench per test."""

from __future__ import annotations

import shutil
from importlib import resources

import pytest


@pytest.fixture
def sim_backend(tmp_path) -> str:
    """Backend string of a private copy of protocol_bench.yaml.

    pyvisa keeps one resource manager (and so one set of simulated devices) per library
    path; a copy per test gives every test instruments in their power-on state.
    """
    source = resources.files("pnbench.sim_configs") / "protocol_bench.yaml"
    target = tmp_path / "protocol_bench.yaml"
    with resources.as_file(source) as path:
        shutil.copy(path, target)
    return f"{target}@sim"
