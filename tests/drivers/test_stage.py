"""The thermal-stage role and the simulated stage, over real pyvisa-py sockets.

The first-order lag is checked against its closed form (common practice, no source);
the diode on a stage at 250 K and 400 K against ngspice `.temp` runs (ngspice-39, batch
mode; GMIN folded into the shunt as tests/spicehelp.py documents).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from spicehelp import dc_sweep, reference_params

from pnbench.drivers.dialect import default_dialect_text, load_dialect, parse_dialect_text
from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import Smu
from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.device import parse_device
from pnbench.drivers.sim.stage import SimClock, ThermalModel
from pnbench.drivers.stage import StageLimits, ThermalStage
from pnbench.errors import BadInput, DialectError, InstrumentError, SafetyStop
from pnbench.modeling import junction
from pnbench.modeling import temperature as tm

DEVICE = """
[device]
part = "LH-TEST-T1"
[diode]
IS = 2e-14
N = 1.03
RS = 1.5
EG = 1.12
XTI = 3.2
TRS = 3e-3
[smu]
current_noise_percent_of_reading = 0.0
current_noise_percent_of_range = 0.0
voltage_noise_percent_of_reading = 0.0
voltage_noise_percent_of_range = 0.0
[stage]
time_constant_s = 20.0
reading_noise_K = 0.0
"""


@pytest.fixture
def bench():
    clock = SimClock(0.0, driven=True)
    with SimBench.start(parse_device(DEVICE), clock=clock) as b:
        yield b


def _stage(session, limits=None):
    return ThermalStage(session, limits=limits or StageLimits(200.0, 450.0, 20.0))


def test_lag_follows_the_closed_form_after_a_step():
    clock = SimClock(0.0, driven=True)
    model = ThermalModel(clock, 300.0, 20.0, (200.0, 500.0))
    model.change(set_point_K=350.0)
    clock.sleep(20.0)  # one time constant
    assert model.temperature_K() == pytest.approx(350.0 - 50.0 * math.exp(-1.0), abs=1e-9)
    clock.sleep(400.0)
    assert model.temperature_K() == pytest.approx(350.0, abs=1e-6)


def test_ramp_then_lag_and_reach_limits():
    clock = SimClock(0.0, driven=True)
    model = ThermalModel(clock, 300.0, 5.0, (250.0, 380.0))
    model.change(set_point_K=360.0, rate_K_per_s=1.0)  # 60 K/min
    clock.sleep(30.0)  # the ramp is half way; the device trails it by about rate*tau
    assert model.temperature_K() == pytest.approx(330.0 - 5.0, abs=0.05)
    model.change(set_point_K=420.0)  # beyond what the stage can reach
    clock.sleep(600.0)
    assert model.temperature_K() == pytest.approx(380.0, abs=1e-6)


def test_an_undriven_clock_at_time_scale_0_is_always_settled():
    model = ThermalModel(SimClock(0.0), 300.0, 1e6, (200.0, 500.0))
    model.change(set_point_K=410.0)
    assert model.temperature_K() == 410.0


def test_stage_role_sets_reads_in_kelvin_and_goes_to_standby(bench):
    with open_session(bench.stage_resource) as session:
        stage = _stage(session)
        assert "thermal stage" in stage.identity
        stage.configure(ramp_K_per_min=10.0)
        stage.set_point(350.0)
        first = stage.read()
        assert first.set_point_K == pytest.approx(350.0)
        assert first.regulating is True
        assert first.temperature_K == pytest.approx(bench.device.temperature_K, abs=1e-6)
        bench.clock.sleep(600.0)  # 300 s of ramp, then 15 time constants
        assert stage.temperature_K() == pytest.approx(350.0, abs=1e-3)
        assert bench.device_temperature_K() == pytest.approx(350.0, abs=1e-3)
        assert stage.standby() == []
        assert stage.read().set_point_K == pytest.approx(298.15)


def test_limits_are_checked_before_anything_is_sent(bench):
    with open_session(bench.stage_resource) as session:
        stage = _stage(session)
        with pytest.raises(SafetyStop, match="outside the stage's limits"):
            stage.set_point(460.0)
        with pytest.raises(SafetyStop, match="above the stage's limit"):
            stage.configure(ramp_K_per_min=25.0)
        with pytest.raises(SafetyStop):
            stage.standby(150.0)
        assert stage.read().set_point_K == pytest.approx(bench.device.temperature_K)
        with pytest.raises(BadInput):
            StageLimits(400.0, 300.0)


def test_the_simulated_stage_refuses_what_its_device_file_does_not_allow(bench):
    """The role's limits wider than the stage's own: the stage answers -222."""
    with open_session(bench.stage_resource) as session:
        stage = _stage(session, StageLimits(3.0, 1000.0))
        with pytest.raises(InstrumentError, match="-222"):
            stage.set_point(900.0)


def test_a_sensor_fault_is_an_instrument_error(bench):
    bench.inject("stage", "overflow")
    with open_session(bench.stage_resource) as session, \
            pytest.raises(InstrumentError, match="not a temperature"):
        _stage(session).read()


def test_kelvin_dialect_and_bad_units():
    text = default_dialect_text()
    assert load_dialect().stage.temperature_unit == "C"
    kelvin = parse_dialect_text(text.replace('temperature_unit = "C"',
                                             'temperature_unit = "K"'))
    assert kelvin.stage.temperature_unit == "K"
    with pytest.raises(DialectError, match="temperature_unit"):
        parse_dialect_text(text.replace('temperature_unit = "C"', 'temperature_unit = "F"'))


@pytest.mark.parametrize("t_k", [250.0, 400.0])
def test_the_diode_on_the_stage_matches_ngspice(bench, ngspice, t_k):
    """Forward currents with the stage held at 250 K and 400 K, noise off, 4-wire."""
    card = parse_device(DEVICE).card
    p = tm.params_at(reference_params(card), t_k, 300.15)
    v = junction.voltage(np.logspace(-7, -2, 8), p, t_k)
    with open_session(bench.stage_resource) as s_session, \
            open_session(bench.smu_resource) as m_session:
        stage = _stage(s_session)
        stage.configure(ramp_K_per_min=20.0)
        stage.set_point(t_k)
        bench.clock.sleep(1200.0)
        assert stage.temperature_K() == pytest.approx(t_k, abs=1e-4)
        smu = Smu(m_session)
        smu.configure("voltage", limit=0.1, four_wire=True)
        smu.output(True)
        currents = [smu.apply_and_read(float(x)).current_A for x in v]
        smu.safe_off()
    _, i_ref = dc_sweep(ngspice, card, v, t_k - 273.15)
    np.testing.assert_allclose(currents, i_ref, rtol=1e-3)
