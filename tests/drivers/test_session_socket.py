"""Sessions over real pyvisa-py sockets against a tiny loopback instrument."""

from __future__ import annotations

import socket
import time

import pytest
from loopback_instrument import LoopbackInstrument

from pnbench.drivers.opening import open_session
from pnbench.errors import InstrumentError


@pytest.fixture
def instrument():
    inst = LoopbackInstrument()
    yield inst
    inst.close()


def test_socket_session_sets_tcp_nodelay(instrument):
    """Nagle's algorithm (RFC 896) delays small writes; the session turns it off."""
    with open_session(instrument.resource, "@py", timeout_ms=500) as s:
        assert s.nodelay is True
        assert s._socket.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0
        assert s.identify() == "Harrow Lane Lab,loopback,0,1.0"


def test_one_line_reply_with_several_units(instrument):
    with open_session(instrument.resource, "@py", timeout_ms=500) as s:
        assert s.ask(":LEVel 1e-05;:LEVel?;*OPC?") == ["1e-05", "1"]
        assert instrument.received[-1] == ":LEVel 1e-05;:LEVel?;*OPC?"  # one message


def test_too_many_units_is_malformed(instrument):
    with open_session(instrument.resource, "@py", timeout_ms=500) as s, pytest.raises(
        InstrumentError, match="3 reply units to 'TWO\\?;\\*OPC\\?', expected 2"
    ):
        s.ask("TWO?;*OPC?")


def test_empty_reply(instrument):
    with open_session(instrument.resource, "@py", timeout_ms=500) as s:
        with pytest.raises(InstrumentError, match="empty reply to 'EMPTY\\?'"):
            s.query("EMPTY?")


def test_timeout_names_the_command_and_late_reply_is_dropped(instrument):
    with open_session(instrument.resource, "@py", timeout_ms=100) as s:
        with pytest.raises(InstrumentError, match="no reply within 100 ms to 'SLOW\\?'"):
            s.query("SLOW?")
        time.sleep(0.1)  # the late reply has surely arrived by now
        assert s.query(":LEVel?") == "0"  # not "late"
        with pytest.raises(InstrumentError, match="'HANG\\?'"):
            s.query("HANG?")


def test_lost_connection(instrument):
    with open_session(instrument.resource, "@py", timeout_ms=200) as s:
        with pytest.raises(InstrumentError, match="connection lost"):
            s.query("BYE")
        with pytest.raises(InstrumentError, match="connection lost"):
            for _ in range(3):  # the first send after a reset may still be accepted
                s.write(":LEVel 1")


def test_refused_connection_lists_resources():
    probe = socket.create_server(("127.0.0.1", 0))
    port = probe.getsockname()[1]
    probe.close()  # a port where nothing listens
    resource = f"TCPIP0::127.0.0.1::{port}::SOCKET"
    with pytest.raises(InstrumentError) as err:
        open_session(resource, "@py", timeout_ms=300)
    assert resource in str(err.value)
    assert "Resources visible there" in str(err.value)
    assert "never listed" in str(err.value)
