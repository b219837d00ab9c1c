"""Sessions over pyvisa-sim: identification, error queue, round trips, faults."""

from __future__ import annotations

import pytest
from sim_resources import BROKEN_SMU, LCR, SMU

from pnbench.drivers.opening import open_session, resolve_backend
from pnbench.drivers.session import count_queries
from pnbench.errors import BadInput, InstrumentError


def test_identify_and_common_commands(sim_backend):
    with open_session(SMU, sim_backend, timeout_ms=300) as s:
        assert s.identify() == "Harrow Lane Lab,protocol SMU,HL-0001,1.0"
        s.reset()
        s.clear()
        s.wait_complete()
        assert s.drain_errors() == []
    assert s.closed
    s.close()  # idempotent


def test_set_get_round_trip(sim_backend):
    with open_session(LCR, sim_backend, timeout_ms=300) as s:
        s.write(":SOURce:FREQuency 12500")
        assert float(s.query(":SOURce:FREQuency?")) == 12500.0
        s.write(":SOURce:BIAS:VOLTage -2.5")
        assert float(s.query(":SOURce:BIAS:VOLTage?")) == -2.5


def test_rejected_command_raises_with_the_instruments_message(sim_backend):
    with open_session(SMU, sim_backend, timeout_ms=300) as s:
        s.write(":SOURce:CURRent:PROTection:LEVel 5")  # above the simulated 0.1 A maximum
        with pytest.raises(InstrumentError) as err:
            s.drain_errors(context="setting the limit")
        assert '-100,"Command error"' in str(err.value)
        assert "after setting the limit" in str(err.value)
        assert err.value.exit_code == 3
        assert s.drain_errors() == []  # drained: the queue is empty again
        s.write(":NO:SUCH:THING 1")
        s.write(":NO:SUCH:THING 2")
        assert s.drain_errors(check=False) == [(-100, "Command error")] * 2


def test_ask_collects_one_unit_per_query_from_separate_lines(sim_backend):
    """pyvisa-sim answers each query of a message on its own line; ask() gathers them."""
    with open_session(SMU, sim_backend, timeout_ms=300) as s:
        units = s.ask(":SOURce:VOLTage:LEVel 0.25;:READ?;:SOURce:CURRent:PROTection:TRIPped?")
        assert units == ["+2.500000000E-01,+1.250000E-03", "0"]
        assert s.ask(":SOURce:VOLTage:LEVel 0") == []


def test_timeout_names_the_command(sim_backend):
    with open_session(SMU, sim_backend, timeout_ms=100) as s:
        with pytest.raises(InstrumentError, match=r"no reply within 100 ms to ':OUTPut:STATe'"):
            s.query(":OUTPut:STATe")  # a setting without argument: nothing comes back
        assert s.identify().startswith("Harrow Lane Lab")  # the session still works


def test_malformed_replies(sim_backend):
    with open_session(BROKEN_SMU, sim_backend, timeout_ms=200) as s:
        with pytest.raises(InstrumentError, match="not an error entry"):
            s.drain_errors()
        with pytest.raises(InstrumentError, match="expected 1 in reply to '\\*OPC\\?'"):
            s.wait_complete()


def test_missing_resource_lists_the_visible_ones(sim_backend):
    with pytest.raises(InstrumentError) as err:
        open_session("TCPIP0::192.0.2.99::5025::SOCKET", sim_backend)
    text = str(err.value)
    assert "TCPIP0::192.0.2.99::5025::SOCKET" in text
    assert SMU in text and LCR in text and "GPIB0::11::INSTR" in text


def test_closed_session_raises_instrument_error(sim_backend):
    s = open_session(SMU, sim_backend, timeout_ms=100)
    s.close()
    with pytest.raises(InstrumentError, match="closed"):
        s.query("*IDN?")


def test_backends_resolve_and_fail_clearly(tmp_path):
    assert resolve_backend("@py") == "@py"
    assert resolve_backend("@sim") == "@sim"
    assert resolve_backend("protocol_bench.yaml@sim").endswith("protocol_bench.yaml@sim")
    with pytest.raises(BadInput, match="protocol_bench.yaml"):
        resolve_backend(str(tmp_path / "absent.yaml") + "@sim")
    with pytest.raises(InstrumentError, match="could not be opened"):
        open_session(SMU, str(tmp_path / "libnothing.so"))


def test_count_queries():
    assert count_queries(":A 1;:B?;*OPC?") == 2
    assert count_queries(':SYST:TEXT "x?;y";*IDN?') == 1
    assert count_queries(":A 1") == 0
    assert count_queries("WEIRD:CMD?? x;*RST") == 1  # unparsable unit: judged by its '?'
