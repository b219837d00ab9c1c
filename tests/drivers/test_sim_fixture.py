"""The simulated meter's fixture: open or shorted (`:SIMulation:FIXTure`), the meter reads
the fixture's stray as a real one would, raw; the state is the fixture's and survives
*RST; a bad state is a command error. Y = j*2*pi*f*C (definition of susceptance), in
series with R: Y/(1 + R*Y) (series impedances add); no outside source needed."""

from __future__ import annotations

import math

import pytest

from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import LcrMeter
from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.device import parse_device
from pnbench.drivers.sim.fixture import SHORT_BAR_OHM

QUIET = """
[diode]
IS = 2e-14
N = 1.05
RS = 1.5
CJO = 1.8e-11
VJ = 0.7
M = 0.45
TT = 4e-9
[lcr]
noise_percent_of_reading = 0.0
noise_floor_F = 0.0
fixture_capacitance_F = 4e-13
fixture_resistance_ohm = 0.3
"""


def test_an_open_or_shorted_fixture_reads_its_stray_raw_and_the_state_survives_reset():
    device = parse_device(QUIET)
    stray, r = device.lcr["fixture_capacitance_F"], device.lcr["fixture_resistance_ohm"]
    f = 3e5
    with SimBench.start(device) as bench, open_session(bench.lcr_resource) as session:
        lcr = LcrMeter(session)
        lcr.configure(0.02)
        with_device = lcr.apply_and_read(0.0, f).admittance_S
        assert session.query(":SIM:FIXT?") == "DEV"
        lcr.fixture_is("open")  # a session on the sockets directly: not the pnsim backend
        assert session.query(":SIM:FIXT?") == "DEV"  # so nothing was sent
        session.write(":SIMulation:FIXTure OPEN")
        opened = lcr.apply_and_read(0.0, f).admittance_S
        session.write("*RST")
        assert session.query(":SIM:FIXT?") == "OPEN"  # the fixture is not a setting
        lcr.configure(0.02)  # the meter's settings are
        session.write(":SIM:FIXT SHOR")
        shorted = lcr.apply_and_read(0.0, f).admittance_S
        session.write(":SIM:FIXT SIDEWAYS")
        errors = session.drain_errors(check=False)
        session.write(":SIM:FIXT DEV")
        assert lcr.apply_and_read(0.0, f).admittance_S == pytest.approx(with_device, abs=0)
    y = 2j * math.pi * f * stray
    assert opened == pytest.approx(y / (1 + r * y), rel=1e-12, abs=0)
    assert 1 / shorted == pytest.approx(r + SHORT_BAR_OHM, rel=1e-12, abs=0)
    assert [code for code, _ in errors] == [-224], errors


def test_the_meter_own_correction_applies_to_an_open_fixture_too():
    """After its open correction the meter reads an open fixture as its residual only."""
    from pnbench.drivers.sim.instruments import OPEN_RESIDUAL

    device = parse_device(QUIET.replace("fixture_resistance_ohm = 0.3", ""))
    with SimBench.start(device) as bench, open_session(bench.lcr_resource) as session:
        lcr = LcrMeter(session)
        lcr.configure(0.02)
        session.write(":SIM:FIXT OPEN")
        lcr.open_correction()
        c = lcr.apply_and_read(0.0, 1e6).admittance_S.imag / (2 * math.pi * 1e6)
    assert c == pytest.approx(OPEN_RESIDUAL * device.lcr["fixture_capacitance_F"],
                              rel=1e-9, abs=0)
