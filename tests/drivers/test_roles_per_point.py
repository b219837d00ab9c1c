"""What `Smu.apply_and_read` does per point: one message, one reply, parsed once.

The message is built from the dialect's templates worked out once (`_Exchange`); these
tests check that it is the message the general path (`fill`, `join`) builds for every
shipped dialect, that a point costs one write and one read with no query counting or
template filling per point, and that the reply's fields are read as before. Common
practice, no source (the message syntax is IEEE 488.2's, checked in test_scpi.py).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from pnbench.drivers import dialect as dl
from pnbench.drivers import scpi
from pnbench.drivers import session as session_mod
from pnbench.drivers.roles import Smu
from pnbench.drivers.session import Session

DIALECTS = Path(__file__).resolve().parents[2] / "drivers" / "dialects"


class Resource:
    """A pyvisa resource stand-in that answers each message from a table of replies."""

    timeout = 1000

    def __init__(self, replies: dict[str, str]) -> None:
        self.replies = replies
        self.sent: list[str] = []
        self.reads = 0

    def write(self, message: str) -> None:
        self.sent.append(message)

    def read(self) -> str:
        self.reads += 1
        last = self.sent[-1]
        for key, reply in self.replies.items():
            if key in last:
                return reply + "\n"
        return '0,"No error"\n'

    def close(self) -> None:
        pass


def _smu(dialect, replies) -> tuple[Smu, Resource]:
    resource = Resource(replies)
    smu = Smu(Session(resource, "fake::smu", dialect, "fake"), dialect)
    smu.configure("voltage", limit=1e-2)
    return smu, resource


def _general_message(dialect, level: float) -> str:
    c = dialect.smu
    return dialect.join([dialect.fill(c.set_voltage, value=level), c.read,
                         c.tripped_sourcing_voltage])


@pytest.mark.parametrize("path", [None, DIALECTS / "examples" / "harrow-lane-smu.toml"])
@pytest.mark.parametrize("level", [0.0, 0.45, -1e-5, 12.5, 1 / 3])
def test_the_message_is_the_one_fill_and_join_build(path, level):
    dialect = dl.load_dialect(path)
    smu, resource = _smu(dialect, {"READ": "0.1,2e-3;0", "SAMPLE": "0,2e-3,0.1"})
    smu.apply_and_read(level)
    assert resource.sent[-1] == _general_message(dialect, level)


def test_a_point_is_one_write_and_one_read_with_nothing_counted_or_filled(monkeypatch):
    dialect = dl.load_dialect()
    smu, resource = _smu(dialect, {"READ": "0.5,1.5e-3;0"})
    smu.apply_and_read(0.1)  # the first point works the message out
    calls = {"count_queries": 0, "fill": 0, "split_args": 0}

    def counting(name, real):
        def wrapper(*args, **kwargs):
            calls[name] += 1
            return real(*args, **kwargs)
        return wrapper

    monkeypatch.setattr(session_mod, "count_queries",
                        counting("count_queries", session_mod.count_queries))
    monkeypatch.setattr(scpi, "fill", counting("fill", scpi.fill))
    monkeypatch.setattr(scpi, "split_args", counting("split_args", scpi.split_args))
    writes, reads = len(resource.sent), resource.reads
    for k in range(100):
        reading = smu.apply_and_read(0.5 + k * 1e-3)
    assert (len(resource.sent) - writes, resource.reads - reads) == (100, 100)
    assert calls == {"count_queries": 0, "fill": 0, "split_args": 0}
    assert (reading.voltage_V, reading.current_A, reading.compliance) == (0.5, 1.5e-3, False)


@pytest.mark.parametrize(("reply", "compliance"), [("0.5,1e-2;1", True), ("0.5,1e-2;0", False),
                                                   ("0.5,1e-2;ON", True)])
def test_the_tripped_reply_sets_compliance(reply, compliance):
    smu, _ = _smu(dl.load_dialect(), {"READ": reply})
    assert smu.apply_and_read(0.5).compliance is compliance


def test_a_current_source_has_its_own_message():
    dialect = dl.load_dialect()
    smu, resource = _smu(dialect, {"READ": "0.7,1e-3;0"})
    smu.apply_and_read(0.2)
    smu.configure("current", limit=2.0)
    smu.apply_and_read(1e-3)
    c = dialect.smu
    assert resource.sent[-1] == dialect.join([dialect.fill(c.set_current, value=1e-3), c.read,
                                              c.tripped_sourcing_current])


@pytest.mark.parametrize("path", [None, DIALECTS / "examples" / "harrow-lane-lcr.toml"])
@pytest.mark.parametrize(("bias", "frequency"), [(0.0, 1e3), (-2.5, 1e6), (1 / 3, 123.4)])
def test_the_lcr_message_is_the_one_fill_and_join_build_and_read_once(path, bias, frequency):
    from pnbench.drivers.roles import LcrMeter

    dialect = dl.load_dialect(path)
    resource = Resource({"READ:IMP": "1e-11,2e-3", "RESULT": "1e-11,2e-3,7"})
    lcr = LcrMeter(Session(resource, "fake::lcr", dialect, "fake"), dialect)
    lcr.configure(0.02)
    writes, reads = len(resource.sent), resource.reads
    reading = lcr.apply_and_read(bias, frequency)
    c = dialect.lcr
    assert resource.sent[-1] == dialect.join([dialect.fill(c.bias_level, value=bias),
                                              dialect.fill(c.frequency, value=frequency),
                                              c.read])
    assert (len(resource.sent) - writes, resource.reads - reads) == (1, 1)
    assert (reading.primary, reading.secondary) == (1e-11, 2e-3)
