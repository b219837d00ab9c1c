"""Smu and LcrMeter roles over pyvisa-sim (canned answers in the default dialect)."""

from __future__ import annotations

import math
import tomllib

import pytest
from sim_resources import BROKEN_SMU, LCR, SMU

from pnbench.drivers import dialect as dl
from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import LcrMeter, Smu
from pnbench.errors import BadInput, DialectError, InstrumentError


@pytest.fixture
def smu(sim_backend):
    with open_session(SMU, sim_backend, timeout_ms=300) as session:
        yield Smu(session)


@pytest.fixture
def lcr(sim_backend):
    with open_session(LCR, sim_backend, timeout_ms=300) as session:
        yield LcrMeter(session)


def dialect_with(changes: dict) -> dl.Dialect:
    data = tomllib.loads(dl.default_dialect_text())
    for table, values in changes.items():
        data[table].update(values)
    return dl.parse_dialect(data, "test dialect")


def test_smu_configure_sets_what_was_asked(smu):
    smu.configure("voltage", limit=0.02, nplc=0.5, four_wire=True, range_=0.01)
    q = smu.session.query
    assert float(q(":SOURce:CURRent:PROTection:LEVel?")) == 0.02
    assert float(q(":SENSe:CURRent:NPLCycles?")) == 0.5
    assert float(q(":SENSe:CURRent:RANGe:UPPer?")) == 0.01
    assert q(":SENSe:CURRent:RANGe:AUTO?") == "OFF"
    assert q(":SENSe:REMote?") == "ON"
    assert q(":SOURce:FUNCtion:MODE?") == "VOLTage"
    assert not smu.output_is_on()  # configuring never turns the output on
    smu.configure("current", limit=5.0)
    assert q(":SOURce:FUNCtion:MODE?") == "CURRent"
    assert float(q(":SOURce:VOLTage:PROTection:LEVel?")) == 5.0


def test_smu_point_is_one_message_with_compliance(smu):
    smu.configure("voltage", limit=0.01)
    smu.output(True)
    assert smu.output_is_on()
    reading = smu.apply_and_read(0.6)
    assert (reading.voltage_V, reading.current_A, reading.compliance) == (0.6, 1.25e-3, False)
    smu.session.write(":SIMulate:TRIPped 1")
    assert smu.apply_and_read(0.7).compliance is True


def test_compliance_judged_from_limit_without_status_query(sim_backend):
    """Without a tripped query a reading within 0.1 % of the limit is compliance."""
    d = dialect_with({"smu": {"tripped_sourcing_voltage": ""}})
    with open_session(SMU, sim_backend, timeout_ms=300, dialect=d) as s:
        smu = Smu(s)
        smu.configure("voltage", limit=1.2505e-3)  # canned current 1.25e-3 A: 0.04 % below
        assert smu.apply_and_read(0.5).compliance is True
        smu.configure("voltage", limit=1.27e-3)  # 1.6 % below the limit
        assert smu.apply_and_read(0.5).compliance is False


def test_rejected_limit_carries_the_instruments_message(smu):
    with pytest.raises(InstrumentError, match=r'-100,"Command error"') as err:
        smu.configure("voltage", limit=1.0)
    assert ":SOURce:CURRent:PROTection:LEVel 1" in str(err.value)


@pytest.mark.parametrize(
    "kwargs",
    [{"source": "power"}, {"limit": -1.0}, {"limit": math.nan}, {"nplc": 0.0},
     {"range_": math.inf}],
)
def test_smu_refuses_bad_settings(smu, kwargs):
    with pytest.raises(BadInput):
        smu.configure(**{"source": "voltage", "limit": 0.01, **kwargs})


def test_smu_refuses_non_finite_level(smu):
    smu.configure("voltage", limit=0.01)
    with pytest.raises(BadInput):
        smu.apply_and_read(math.nan)


def test_dialect_without_4_wire_or_range_says_so(sim_backend):
    d = dialect_with({"smu": {"remote_sense": "", "current_range": ""}})
    with open_session(SMU, sim_backend, timeout_ms=300, dialect=d) as s:
        smu = Smu(s)
        with pytest.raises(DialectError, match="remote_sense"):
            smu.configure("voltage", limit=0.01, four_wire=True)
        with pytest.raises(DialectError, match="current_range"):
            smu.configure("voltage", limit=0.01, range_=1e-3)
        smu.configure("voltage", limit=0.01)  # autorange, 2-wire: fine


def test_safe_off_ramps_turns_off_and_is_idempotent(smu):
    smu.configure("voltage", limit=0.01)
    smu.output(True)
    smu.apply_and_read(5.0)
    assert smu.safe_off() == []
    assert smu.level == 0.0
    assert smu.session.query(":READ?").startswith("+0.0")  # the level went back to zero
    assert not smu.output_is_on()
    assert smu.safe_off() == []
    smu.session.close()
    with pytest.raises(InstrumentError, match="could not be confirmed off"):
        smu.safe_off()


def test_configure_with_output_on_turns_it_off_first(smu):
    smu.configure("voltage", limit=0.01)
    smu.output(True)
    smu.set_level(2.0)
    smu.configure("current", limit=1.0)
    assert not smu.output_is_on()


def test_broken_instrument_replies_become_instrument_errors(sim_backend):
    with open_session(BROKEN_SMU, sim_backend, timeout_ms=150) as s:
        smu = Smu(s)
        smu.source, smu.limit = "voltage", 0.01  # skip configure: its error queue is broken
        with pytest.raises(InstrumentError, match="field 2 .* 'OVLD'"):
            smu.apply_and_read(0.1)
        with pytest.raises(InstrumentError, match="still ON|could not be confirmed"):
            smu.safe_off()  # the output query answers PERHAPS


def test_lcr_configure_read_and_safe_off(lcr):
    lcr.configure(0.03)
    q = lcr.session.query
    assert q(":SENSe:IMPedance:MODel?") == "parallel"
    assert float(q(":SOURce:VOLTage:LEVel?")) == 0.03
    assert q(":SOURce:BIAS:STATe?") == "OFF"
    lcr.bias(True)
    assert lcr.bias_is_on() is True
    reading = lcr.apply_and_read(-2.0, 1e5)
    assert float(q(":SOURce:BIAS:VOLTage?")) == -2.0
    assert float(q(":SOURce:FREQuency?")) == 1e5
    # canned reading: Cp = 100 pF, Gp = 1 uS -> Y = Gp + j*2*pi*f*Cp
    assert reading.admittance_S.real == pytest.approx(1e-6, rel=1e-12)
    assert reading.admittance_S.imag == pytest.approx(2 * math.pi * 1e5 * 1e-10, rel=1e-12)
    assert (reading.primary, reading.secondary, reading.bias_V) == (1e-10, 1e-6, -2.0)
    assert lcr.safe_off() == []
    assert lcr.bias_is_on() is False
    assert float(q(":SOURce:BIAS:VOLTage?")) == 0.0
    lcr.open_correction(timeout_ms=500)
    lcr.short_correction(timeout_ms=500)


def test_lcr_rejected_setting(lcr):
    with pytest.raises(InstrumentError, match="Command error"):
        lcr.configure(5.0)  # above the simulated 2 V maximum AC level


def test_lcr_without_bias_query_reports_unconfirmed(sim_backend):
    d = dialect_with({"lcr": {"bias_state_query": "", "open_correction": ""}})
    with open_session(LCR, sim_backend, timeout_ms=300, dialect=d) as s:
        lcr = LcrMeter(s)
        assert lcr.bias_is_on() is None
        assert any("no bias_state_query" in p for p in lcr.safe_off())
        with pytest.raises(DialectError, match="open_correction"):
            lcr.open_correction()


def test_role_needs_its_table(sim_backend):
    data = tomllib.loads(dl.default_dialect_text())
    data.pop("smu")
    d = dl.parse_dialect(data, "lcr-only.toml")
    with open_session(SMU, sim_backend, timeout_ms=300, dialect=d) as s:
        with pytest.raises(DialectError, match=r"lcr-only.toml has no \[smu\]"):
            Smu(s)
