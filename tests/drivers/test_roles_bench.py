"""Smu and LcrMeter over real pyvisa-py sockets against the simulated bench.

Physics references: the diode's readings are compared with `pnbench.modeling` (itself
checked against ngspice elsewhere) within the bench's documented noise, so these tests
check that the drivers send the right settings and read the right fields.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

from pnbench.drivers import dialect as dl
from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import LcrMeter, Smu
from pnbench.drivers.sim.bench import SimBench
from pnbench.errors import InstrumentError
from pnbench.modeling import smallsignal


@pytest.fixture
def bench():
    with SimBench.start("lh-qt16", time_scale=0.0) as b:
        yield b


@pytest.fixture
def smu(bench):
    with open_session(bench.smu_resource, timeout_ms=1000) as s:
        yield Smu(s)


@pytest.fixture
def lcr(bench):
    with open_session(bench.lcr_resource, timeout_ms=1000) as s:
        yield LcrMeter(s)


def test_forward_sweep_and_compliance(bench, smu):
    smu.configure("voltage", limit=5e-3, nplc=1.0, four_wire=True)
    smu.output(True)
    assert bench.outputs()["smu_output"] is True
    readings = [smu.apply_and_read(v) for v in (0.2, 0.4, 0.5, 0.6)]
    currents = [r.current_A for r in readings]
    assert all(b > a for a, b in zip(currents, currents[1:], strict=False))
    assert not any(r.compliance for r in readings)
    for r, v in zip(readings, (0.2, 0.4, 0.5, 0.6), strict=True):
        assert r.voltage_V == pytest.approx(v, abs=1e-3)
    clamped = smu.apply_and_read(1.5)
    assert clamped.compliance
    assert clamped.current_A == pytest.approx(5e-3, rel=1e-2)
    assert clamped.voltage_V < 1.5  # the source backed off to hold the limit


def test_safe_off_is_done_by_the_driver_not_the_watchdog(bench, smu):
    smu.configure("voltage", limit=1e-2)
    smu.output(True)
    smu.apply_and_read(0.7)
    assert smu.safe_off() == []
    assert bench.outputs()["smu_output"] is False
    assert bench.output_log()[-1] == ("smu", False, "command")


def test_dropped_connection_then_safe_off_reports_it(bench, smu):
    smu.configure("voltage", limit=1e-2)
    smu.output(True)
    bench.inject("smu", "drop")
    with pytest.raises(InstrumentError, match="connection lost"):
        smu.apply_and_read(0.5)
    with pytest.raises(InstrumentError, match="could not be confirmed off"):
        smu.safe_off()
    assert bench.outputs()["smu_output"] is False  # the bench's watchdog did it


def test_stalled_reply_names_the_command(bench, smu):
    smu.configure("voltage", limit=1e-2)
    smu.session.write(smu.dialect.fill(smu.commands.output, state=True))
    bench.inject("smu", "stall", seconds=0.4)
    with smu.session.timeout(150), pytest.raises(InstrumentError) as err:
        smu.apply_and_read(0.3)
    assert "no reply within 150 ms" in str(err.value) and ":READ?" in str(err.value)
    assert smu.safe_off() == []  # the late reply does not confuse the way out
    assert bench.outputs()["smu_output"] is False


def test_garbage_and_queued_errors(bench, smu):
    smu.configure("voltage", limit=1e-2)
    bench.inject("smu", "garbage", text="#$%&;0")
    with pytest.raises(InstrumentError, match="malformed reading"):
        smu.apply_and_read(0.1)
    bench.inject("smu", "garbage", text="#$%&")
    with smu.session.timeout(200), pytest.raises(
        InstrumentError, match=r"incomplete reply .* 1 of 2 reply units \('#\$%&'\)"
    ):
        smu.apply_and_read(0.1)
    bench.inject("smu", "error", code=-221, message="Settings conflict")
    with pytest.raises(InstrumentError, match='-221,"Settings conflict"'):
        smu.output(True)
    assert smu.safe_off() == []


def test_overflow_marker_reads_as_infinite(bench, smu):
    smu.configure("voltage", limit=1e-2)
    smu.output(True)
    bench.inject("smu", "overflow")
    reading = smu.apply_and_read(0.3)
    assert math.isinf(reading.current_A) or math.isinf(reading.voltage_V)


def test_reverse_bias_capacitance_matches_the_model(bench, lcr):
    """C(V) = CJO/(1 - V/VJ)^M for reverse bias (the SPICE depletion law, Nagel 1975;
    docs/physics.md §4)."""
    lcr.configure(0.02)
    lcr.bias(True)
    params = bench.device.params
    for bias in (-1.0, -3.0, -5.0):
        reading = lcr.apply_and_read(bias, 1e5)
        cp, _ = smallsignal.parallel_from_admittance(reading.admittance_S, 1e5)
        expected = float(smallsignal.depletion_capacitance(bias, params))
        assert float(cp) == pytest.approx(expected, rel=0.05), bias
    assert lcr.safe_off() == []
    assert bench.outputs()["lcr_bias"] is False


def test_series_form_gives_the_same_admittance(bench):
    data = tomllib.loads(dl.default_dialect_text())
    data["lcr"]["form"] = "series"
    series = dl.parse_dialect(data, "series-form dialect")
    with open_session(bench.lcr_resource, timeout_ms=1000) as s:
        parallel_meter = LcrMeter(s)
        parallel_meter.configure(0.02)
        y_parallel = parallel_meter.apply_and_read(-2.0, 1e5).admittance_S
        series_meter = LcrMeter(s, series)
        series_meter.configure(0.02)
        assert s.query(":SENSe:IMPedance:MODel?").upper().startswith("SER")
        y_series = series_meter.apply_and_read(-2.0, 1e5).admittance_S
    assert np.isclose(y_series, y_parallel, rtol=0.02)


def test_example_user_dialects_load_and_drive_an_instrument():
    """The README's example dialects (drivers/dialects/examples/) load, and the SMU one
    reads its compliance from the clamp flag that leads its three-field reading."""
    from pathlib import Path

    from loopback_instrument import LoopbackInstrument

    docs = Path(__file__).resolve().parents[2] / "drivers" / "dialects" / "examples"
    lcr_dialect = dl.load_dialect(docs / "harrow-lane-lcr.toml")
    assert lcr_dialect.smu is None and lcr_dialect.lcr.form == "parallel_d"
    assert lcr_dialect.lcr.model == "SHOW CP,LOSS"
    smu_dialect = dl.load_dialect(docs / "harrow-lane-smu.toml")
    inst = LoopbackInstrument(canned={"SAMPLE": "1,1.0E-02,0.41", "OUT": "0"})
    try:
        with open_session(inst.resource, timeout_ms=500, dialect=smu_dialect) as s:
            smu = Smu(s)
            smu.configure("voltage", limit=1e-2)
            assert inst.received[-2] == ("MODE VLT;VLT 0;CLAMP:AMP 0.01;SPAN:AMP:AUTO 1;"
                                         "CYCLES 1;KELVIN 0")
            reading = smu.apply_and_read(0.45)
            assert inst.received[-1] == "VLT 0.45;SAMPLE?"  # one message, no tripped?
            assert (reading.voltage_V, reading.current_A, reading.compliance) == (
                0.41, 1e-2, True)
            assert smu.safe_off() == []
            assert inst.received[-1] == "OUT?"
    finally:
        inst.close()
