"""The simulated bench as a server: SCPI behaviour, faults, clients and outputs, over real
pyvisa-py sockets (``TCPIP0::127.0.0.1::PORT::SOCKET`` with ``@py``).

Protocol references: IEEE 488.2-1992 (common commands, error queue entries, one response
message per program message with units joined by ``;``) and SCPI-1999 (long and short
headers, relative header paths, error codes -113 undefined header, -222 data out of
range, -350 queue overflow).
"""

from __future__ import annotations

import socket
import threading
import time

import pytest

from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import LcrMeter, Smu
from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.instrument import ERROR_QUEUE_LENGTH
from pnbench.errors import BadInput, DeviceFileError, InstrumentError


@pytest.fixture
def bench():
    with SimBench.start("lh-zl560") as b:
        yield b


@pytest.fixture
def session(bench):
    with open_session(bench.smu_resource, timeout_ms=1000) as s:
        yield s


def _wait_for(predicate, seconds: float = 5.0) -> bool:
    """Poll until predicate() is true (the server notices a disconnect asynchronously)."""
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.005)
    return predicate()


def test_resources_are_loopback_raw_sockets(bench):
    for resource in (bench.smu_resource, bench.lcr_resource):
        prefix, host, port, kind = resource.split("::")
        assert (prefix, host, kind) == ("TCPIP0", "127.0.0.1", "SOCKET")
        assert 0 < int(port) < 65536
    assert bench.smu_resource != bench.lcr_resource
    for port in bench._ports.values():  # what the OS was asked to listen on
        assert {s.getsockname()[0] for s in port.server.sockets} == {"127.0.0.1"}


def test_identity_errors_and_joined_replies(bench, session):
    assert session.identify() == "pnbench,simulated SMU,0,1"
    assert session.query(":SYSTem:ERRor:NEXT?") == '0,"No error"'
    # one message, several queries: one reply, responses joined by ';'
    assert session.query("*IDN?;:OUTP?;*OPC?") == "pnbench,simulated SMU,0,1;0;1"
    # short form, lower case and a relative header path all name the same setting
    assert session.query(":sour:volt:lev 0.25;LEV?;:SOURce:VOLTage?") == "0.25;0.25"
    session.write(":NOPE:HEADer 1")
    assert session.query(":SYST:ERR?").startswith("-113,")
    session.write(":SOUR:VOLT:LEV 5000")
    assert session.query(":SYST:ERR?").startswith("-222,")
    assert session.query(":SOUR:VOLT:LEV?") == "0.25"  # the bad value was not taken
    assert session.query(":SYST:ERR:NEXT?") == '0,"No error"'


def test_error_queue_overflows_into_minus_350(session):
    session.write(";".join(":BOGUS" for _ in range(3)))  # a command error ends the message
    for _ in range(ERROR_QUEUE_LENGTH + 5):
        session.write(":BOGUS")
    entries = session.drain_errors(check=False)
    assert len(entries) == ERROR_QUEUE_LENGTH
    assert entries[-1] == (-350, "Queue overflow")
    assert all(code == -113 for code, _ in entries[:-1])
    session.write(":BOGUS")
    session.write("*CLS")
    assert session.drain_errors(check=False) == []


def test_reset_turns_the_output_off(bench, session):
    assert session.query(":OUTP ON;*OPC?") == "1"  # the reply means the unit was handled
    assert bench.outputs() == {"smu_output": True, "lcr_bias": False}
    session.reset()
    assert bench.outputs()["smu_output"] is False
    assert bench.output_log()[-1] == ("smu", False, "reset")


def test_reading_with_the_output_off_is_not_a_number_and_queues_an_error(session):
    reading = Smu(session)
    reading.configure("voltage", limit=1e-3)
    r = reading.apply_and_read(0.5)
    assert r.current_A != r.current_A  # nan
    assert session.drain_errors(check=False)[0][0] == -221


def test_output_goes_off_when_the_client_disconnects(bench):
    with open_session(bench.smu_resource) as s1, open_session(bench.lcr_resource) as s2:
        Smu(s1).configure("voltage", limit=1e-3)
        s1.write(":OUTP ON")
        s2.write(":SOUR:BIAS:VOLT -2;:SOUR:BIAS:STAT ON")
        assert s1.query(":OUTP?") == "1" and s2.query(":SOUR:BIAS:STAT?") == "1"
        assert bench.outputs() == {"smu_output": True, "lcr_bias": True}
    assert _wait_for(lambda: bench.outputs() == {"smu_output": False, "lcr_bias": False})
    causes = {(name, cause) for name, state, cause in bench.output_log() if not state}
    assert causes == {("smu", "disconnect"), ("lcr", "disconnect")}


def test_without_the_watchdog_an_output_left_on_stays_on():
    with SimBench.start("lh-zl560", off_on_disconnect=False) as bench:
        with open_session(bench.smu_resource) as s:
            s.write(":OUTP ON")
            s.query("*OPC?")
        time.sleep(0.2)
        assert bench.outputs()["smu_output"] is True
    assert bench.outputs()["smu_output"] is False  # closing the bench turns it off
    assert bench.output_log()[-1] == ("smu", False, "close")


def test_clients_connect_one_after_another_and_a_second_one_waits(bench):
    with open_session(bench.smu_resource) as first:
        first.write(":SOUR:VOLT 0.125")
        answers: list[str] = []

        def second_client() -> None:
            with open_session(bench.smu_resource, timeout_ms=5000) as second:
                answers.append(second.query(":SOUR:VOLT?"))

        waiting = threading.Thread(target=second_client)
        waiting.start()
        time.sleep(0.3)
        assert answers == []  # served only once the first client leaves
        assert first.query(":SOUR:VOLT?") == "0.125"
    waiting.join(10)
    assert answers == ["0.125"]
    with open_session(bench.smu_resource) as third:
        assert third.identify().startswith("pnbench,simulated SMU")


def test_close_turns_outputs_off_while_clients_are_connected():
    bench = SimBench.start("lh-vc510")
    s = open_session(bench.lcr_resource)
    s.write(":SOUR:BIAS:STAT ON")
    s.query("*OPC?")
    bench.close()
    assert bench.outputs() == {"smu_output": False, "lcr_bias": False}
    assert bench.output_log()[-1] == ("lcr", False, "close")
    with pytest.raises(InstrumentError):
        s.query("*IDN?")
    s.close()
    bench.close()  # twice is fine


# --- injected faults surface as InstrumentError in the drivers ---------------------------

@pytest.fixture
def smu(bench):
    with open_session(bench.smu_resource, timeout_ms=400) as s:
        role = Smu(s)
        role.configure("voltage", limit=1e-2)
        role.output(True)
        yield role


def test_fault_drop_after_n_commands(bench, smu):
    bench.inject("smu", "drop", after=4)
    smu.apply_and_read(0.3)  # three units: set, read, tripped?
    with pytest.raises(InstrumentError, match="connection lost"):
        smu.apply_and_read(0.4)
    assert _wait_for(lambda: not bench.outputs()["smu_output"])
    with open_session(bench.smu_resource) as again:  # the bench serves the next client
        assert again.query(":OUTP?") == "0"


def test_fault_stall_past_the_timeout(bench, smu):
    bench.inject("smu", "stall", seconds=30)
    with pytest.raises(InstrumentError, match="no reply within 400 ms"):
        smu.apply_and_read(0.5)


def test_fault_garbage_reply(bench, smu):
    bench.inject("smu", "garbage")
    with pytest.raises(InstrumentError, match="garbled|reply units|malformed"):
        smu.apply_and_read(0.5)
    bench.inject("smu", "garbage", text="1.5,\xff\xfe")
    with pytest.raises(InstrumentError):
        smu.apply_and_read(0.5)


def test_fault_error_entry(bench, smu):
    bench.inject("smu", "error", code=-350, message="Queue overflow")
    with pytest.raises(InstrumentError, match="-350"):
        smu.output(True)  # turning on drains the queue
    bench.inject("lcr", "error", after=2, code=-222, message="Data out of range; simulated")
    with open_session(bench.lcr_resource, timeout_ms=400) as s:
        with pytest.raises(InstrumentError, match="-222"):
            LcrMeter(s).configure(0.01)


def test_fault_overflow_marker(bench, smu):
    bench.inject("smu", "overflow")
    assert smu.apply_and_read(0.5).current_A == float("inf")
    assert smu.apply_and_read(0.5).current_A < 1  # fired once
    bench.inject("lcr", "overflow", repeat=2)
    with open_session(bench.lcr_resource, timeout_ms=400) as s:
        lcr = LcrMeter(s)
        lcr.configure(0.01)
        readings = [lcr.apply_and_read(-1.0, 1e6) for _ in range(3)]
        lcr.safe_off()
    assert [r.primary == float("inf") for r in readings] == [True, True, False]


def test_repeating_fault_rearms_from_each_firing(bench):
    bench.inject("smu", "error", after=2, repeat=0, code=-300, message="again")
    with open_session(bench.smu_resource) as s:
        # fires before the 3rd unit, and again before the 6th (the count query)
        assert s.query("*OPC;*OPC;*OPC;*OPC;*OPC;:SYST:ERR:COUNT?") == "2"
        bench.clear_faults()
        assert s.query("*OPC;*OPC;*OPC;*OPC;*OPC;:SYST:ERR:COUNT?") == "2"
        assert s.drain_errors(check=False) == [(-300, "again"), (-300, "again")]


def test_bad_fault_requests_and_options():
    with SimBench.start("lh-qt16") as bench:
        with pytest.raises(DeviceFileError, match="melt"):
            bench.inject("smu", "melt")
        with pytest.raises(DeviceFileError, match="seconds"):
            bench.inject("smu", "drop", seconds=3)
        with pytest.raises(DeviceFileError, match="dmm"):
            bench.inject("dmm", "drop")
    with pytest.raises(BadInput, match="time scale"):
        SimBench.start("lh-qt16", time_scale=-1)
    with pytest.raises(BadInput, match="port"):
        SimBench.start("lh-qt16", smu_port=70000)


def test_a_port_in_use_is_an_instrument_error():
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        with pytest.raises(InstrumentError, match=str(port)):
            SimBench.start("lh-qt16", smu_port=port)


def test_faults_from_the_device_file(tmp_path):
    from pnbench.drivers.sim.device import bundled_device

    text = bundled_device("lh-qt16").read_text()
    path = tmp_path / "flaky.toml"
    path.write_text(text + '\n[[fault]]\ninstrument = "smu"\nkind = "drop"\nafter = 2\n')
    with SimBench.start(path) as bench, open_session(bench.smu_resource, timeout_ms=400) as s:
        assert s.query("*IDN?;*OPC?").endswith(";1")
        with pytest.raises(InstrumentError, match="connection lost"):
            s.query("*IDN?")
