"""Shared fixtures: the ngspice reference simulator and a scratch folder."""

from __future__ import annotations

import os
import shutil
import sys
from pathlib import Path

import pytest

# Helper modules shared by tests (reference-simulator runners, data makers) live beside
# this file; make them importable from every test folder.
sys.path.insert(0, str(Path(__file__).parent))


def _ngspice_required() -> bool:
    return os.environ.get("PNBENCH_REQUIRE_NGSPICE", "") not in ("", "0")


@pytest.fixture(scope="session")
def ngspice() -> str:
    """Path of the `ngspice` executable (Debian package `ngspice`, batch mode).

    Without it the test skips with the reason, unless PNBENCH_REQUIRE_NGSPICE=1 (CI),
    where it fails: a reference check that silently skips is no check.
    """
    path = shutil.which("ngspice")
    if path is None:
        message = (
            "ngspice is not installed (apt-get install ngspice); it is the reference "
            "simulator for this check"
        )
        if _ngspice_required():
            pytest.fail(message + " and PNBENCH_REQUIRE_NGSPICE=1 demands it")
        pytest.skip(message)
    return path
