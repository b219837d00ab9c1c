"""The per-point messages of the instrument roles, worked out once, and their replies.

A bias point is one program message and one reply. What does not change from one point to
the next (the text around the levels, how many queries the message holds, where each
field of the reading sits) is worked out from the dialect once, so a point costs
formatting its numbers, one round trip and one pass over the reply. The messages are
exactly the ones `scpi.fill` and `scpi.join` build (tests/drivers/test_roles_per_point.py
checks it for the shipped dialects).
"""

from __future__ import annotations

from dataclasses import dataclass

from pnbench.drivers import scpi
from pnbench.drivers.dialect import Dialect
from pnbench.drivers.session import Session, count_queries
from pnbench.errors import InstrumentError


@dataclass(frozen=True, slots=True)
class SmuExchange:
    """The set-and-read message of an SMU sourcing one function: ``head + level +
    tail`` with ``queries`` replies; the reading's fields sit at ``voltage``,
    ``current`` and ``compliance`` (-1: the dialect reads no compliance field) of
    ``fields``; ``tripped`` says whether the message asks for the compliance state."""

    head: str
    tail: str
    queries: int
    fields: tuple[str, ...]
    voltage: int
    current: int
    compliance: int
    tripped: bool

    @classmethod
    def of(cls, dialect: Dialect, source: str) -> SmuExchange:
        c, sep = dialect.smu, dialect.separator
        voltage = source == "voltage"
        tripped = c.tripped_sourcing_voltage if voltage else c.tripped_sourcing_current
        head, tail = scpi.value_template(c.set_voltage if voltage else c.set_current)
        rest = dialect.join([c.read, tripped])
        tail += sep + rest if rest else ""
        names = tuple(c.read_fields)
        return cls(head, tail, count_queries(head + "0" + tail, sep), names,
                   names.index("voltage"), names.index("current"),
                   names.index("compliance") if "compliance" in names else -1,
                   bool(tripped.strip()))

    def message(self, level: float) -> str:
        """The message for a finite ``level``."""
        return self.head + scpi.format_value(level) + self.tail


@dataclass(frozen=True, slots=True)
class LcrExchange:
    """The set-bias, set-frequency and read message of an LCR meter: ``head + bias +
    middle + frequency + tail`` with ``queries`` replies; the reading's primary and
    secondary values sit at ``primary`` and ``secondary`` of ``fields``."""

    head: str
    middle: str
    tail: str
    queries: int
    fields: tuple[str, ...]
    primary: int
    secondary: int

    @classmethod
    def of(cls, dialect: Dialect) -> LcrExchange:
        c, sep = dialect.lcr, dialect.separator
        head, bias_tail = scpi.value_template(c.bias_level)
        frequency_head, tail = scpi.value_template(c.frequency)
        read = dialect.join([c.read])
        tail += sep + read if read else ""
        middle = bias_tail + sep + frequency_head
        names = tuple(c.read_fields)
        return cls(head, middle, tail, count_queries(head + "0" + middle + "1" + tail, sep),
                   names, names.index("primary"), names.index("secondary"))

    def message(self, bias_V: float, frequency_Hz: float) -> str:
        """The message for a finite bias and frequency."""
        return (self.head + scpi.format_value(bias_V) + self.middle
                + scpi.format_value(frequency_Hz) + self.tail)


def reading_values(session: Session, reply: str, names: tuple[str, ...],
                   message: str) -> list:
    """The numbers of a reading, one per name of the dialect's read_fields."""
    try:
        values = scpi.parse_numbers(reply)
    except ValueError as exc:
        raise InstrumentError(f"{session.resource_name}: malformed reading in reply to "
                              f"{message!r}: {exc}") from None
    if len(values) != len(names):
        raise InstrumentError(
            f"{session.resource_name}: reading {reply!r} has {len(values)} fields, the "
            f"dialect's read_fields name {len(names)} ({', '.join(names)})")
    return values


def reading_fields(session: Session, reply: str, names: tuple[str, ...],
                   message: str) -> dict:
    """The numbers of a reading by the names of the dialect's read_fields."""
    return dict(zip(names, reading_values(session, reply, names, message), strict=True))


def flag(session: Session, reply: str, message: str) -> bool:
    """A boolean reply (1/0/ON/OFF); InstrumentError naming the message otherwise."""
    try:
        return scpi.parse_bool(reply)
    except ValueError:
        raise InstrumentError(f"{session.resource_name}: expected 1/0/ON/OFF in reply to "
                              f"{message!r}, got {reply!r}") from None
