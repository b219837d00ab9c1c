"""The SCPI side every simulated instrument shares: headers, settings, IEEE 488.2 and errors.

An instrument is a state machine fed one program unit at a time (`execute`), so the
server can count units for faults; no sockets or clocks here. What each unit costs in
instrument time comes back in `UnitResult.busy_s` (the server sleeps it, scaled).

Standards: IEEE 488.2-1992 common commands (*IDN? *RST *CLS *OPC *OPC? *WAI *ESR? *STB?
*TST?) and error reporting; SCPI-1999 headers (long or short form, optional nodes, a unit
without a leading colon continues the previous unit's path) and the standard error codes
(-102 syntax, -104 data type, -108 parameter not allowed, -109 missing parameter, -113
undefined header, -221 settings conflict, -222 data out of range, -223 too much data, -224
illegal parameter value, -230 data stale, -350 queue overflow). The error queue holds
ERROR_QUEUE_LENGTH entries; when it is full the newest entry becomes -350 "Queue
overflow", as SCPI-1999 asks. A command error (-1xx) discards the rest of its message.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

from pnbench.drivers import scpi

ERROR_QUEUE_LENGTH = 10

#: Standard event status register bits (IEEE 488.2-1992, 11.5.1) set by error classes.
_ESR_BIT = {1: 32, 2: 16, 3: 8, 4: 4}  # command, execution, device-dependent, query error

ERRORS = {
    -102: "Syntax error",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -221: "Settings conflict",
    -222: "Data out of range",
    -223: "Too much data",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -350: "Queue overflow",
}


class CommandError(Exception):
    """Raised inside a handler: becomes an error-queue entry."""

    def __init__(self, code: int, detail: str = "") -> None:
        super().__init__(code, detail)
        self.code = code
        self.detail = detail


@dataclass(frozen=True)
class UnitResult:
    """What one program unit did: its response (queries), instrument time, and whether
    the rest of the message is discarded (after a command error)."""

    response: str | None = None
    busy_s: float = 0.0
    abort: bool = False


@dataclass(frozen=True)
class Setting:
    """A setting answered in both forms: ``PATTERN value`` sets it, ``PATTERN?`` reads it.

    kind "number" (limits: a callable giving (low, high) for the instrument, MINimum /
    MAXimum / DEFault accepted), "bool" (ON/OFF/1/0) or "choice" (mnemonics in long/short
    form; the query answers the short form). `settles` marks settings after which the
    next reading waits for settling.
    """

    pattern: str
    attr: str
    kind: str
    limits: Callable[[object], tuple[float, float]] | None = None
    choices: tuple[str, ...] = ()
    settles: bool = False


Handler = Callable[[scpi.Command], "str | float | None"]


class SimInstrument:
    """Base of the simulated SMU and LCR meter."""

    #: Settings of the instrument (subclasses fill).
    SETTINGS: tuple[Setting, ...] = ()

    def __init__(self, identity: str, command_s: float) -> None:
        self.identity = identity
        self.command_s = command_s
        self.errors: deque[tuple[int, str]] = deque()
        self.esr = 0
        self._path = ""
        self._busy = 0.0
        self._cache: dict[tuple[str, bool], Handler | None] = {}
        self._table: list[tuple[str, bool, Handler]] = []
        if not hasattr(self, "defaults"):
            self.defaults: dict[str, object] = {}
        self.unsettled = True
        for s in self.SETTINGS:
            self._table.append((s.pattern, False, self._setter(s)))
            self._table.append((s.pattern, True, self._getter(s)))
        self._table += [
            ("*IDN", True, lambda c: self.identity),
            ("*RST", False, lambda c: self.reset()),
            ("*CLS", False, lambda c: self.clear_status()),
            ("*OPC", True, lambda c: "1"),
            ("*OPC", False, lambda c: self._set_esr(1)),
            ("*WAI", False, lambda c: None),
            ("*TST", True, lambda c: "0"),
            ("*ESR", True, lambda c: str(self._take_esr())),
            ("*STB", True, lambda c: str((4 if self.errors else 0) | (32 if self.esr else 0))),
            (":SYSTem:ERRor[:NEXT]", True, lambda c: self._next_error()),
            (":SYSTem:ERRor:COUNt", True, lambda c: str(len(self.errors))),
        ]
        self._table += self.commands()

    # --- subclasses ---------------------------------------------------------------------
    def commands(self) -> list[tuple[str, bool, Handler]]:
        """Instrument-specific (pattern, is_query, handler) entries."""
        return []

    def reset(self) -> None:
        """*RST: every setting to its default; subclasses turn their outputs off too."""
        for s in self.SETTINGS:
            setattr(self, s.attr, self.defaults[s.attr])
        self.unsettled = True

    # --- the error queue ----------------------------------------------------------------
    def push_error(self, code: int, detail: str = "") -> None:
        """Add an error-queue entry ("Undefined header; FOO:BAR")."""
        base = ERRORS.get(code)
        if base is None:
            text = detail or "Error"
        else:
            text = f"{base}; {detail}" if detail else base
        self.push_entry(code, text)

    def push_entry(self, code: int, text: str) -> None:
        """Add an error-queue entry verbatim (the queue overflows into -350)."""
        self._set_esr(_ESR_BIT.get(abs(code) // 100, 8))
        if len(self.errors) >= ERROR_QUEUE_LENGTH:
            self.errors[-1] = (-350, ERRORS[-350])
            return
        self.errors.append((code, text))

    def _next_error(self) -> str:
        code, text = self.errors.popleft() if self.errors else (0, "No error")
        return scpi.format_error_entry(code, text)

    def clear_status(self) -> None:
        self.errors.clear()
        self.esr = 0

    def _set_esr(self, bit: int) -> None:
        self.esr |= bit

    def _take_esr(self) -> int:
        value, self.esr = self.esr, 0
        return value

    # --- messages -----------------------------------------------------------------------
    def begin_message(self) -> None:
        """A new program message starts: headers without a colon start at the root."""
        self._path = ""

    def execute(self, unit: str) -> UnitResult:
        """Run one program unit; errors go to the queue, never out of here."""
        self._busy = self.command_s
        try:
            command = scpi.parse_command(unit)
        except ValueError as exc:
            self.push_error(-102, str(exc))
            return UnitResult(busy_s=self._busy, abort=True)
        header = self._absolute(command.header)
        handler = self._lookup(header, command.query)
        if handler is None:
            self.push_error(-113, header + ("?" if command.query else ""))
            return UnitResult(busy_s=self._busy, abort=True)
        try:
            out = handler(command)
        except CommandError as exc:
            self.push_error(exc.code, exc.detail)
            return UnitResult(busy_s=self._busy, abort=exc.code // 100 == -1)
        if command.query:
            text = scpi.format_value(out) if isinstance(out, float) else str(out)
            return UnitResult(response=text, busy_s=self._busy)
        return UnitResult(busy_s=self._busy)

    def add_busy(self, seconds: float) -> None:
        self._busy += seconds

    def _absolute(self, header: str) -> str:
        if header.startswith("*"):
            return header
        if header.startswith(":"):
            full = header
        else:
            full = self._path + ":" + header
        self._path = full.rsplit(":", 1)[0]
        return full

    def _lookup(self, header: str, query: bool) -> Handler | None:
        key = (header.upper(), query)
        if key not in self._cache:
            self._cache[key] = next(
                (h for pattern, q, h in self._table
                 if q == query and scpi.header_matches(pattern, header)), None)
        return self._cache[key]

    # --- settings -----------------------------------------------------------------------
    def _setter(self, s: Setting) -> Handler:
        def handle(command: scpi.Command) -> None:
            arg = one_argument(command)
            if s.kind == "number":
                low, high = s.limits(self) if s.limits else (-math.inf, math.inf)
                value = number_argument(arg, low, high, self.defaults[s.attr])
            elif s.kind == "bool":
                value = bool_argument(arg)
            else:
                value = choice_argument(arg, s.choices)
            if s.settles and value != getattr(self, s.attr):
                self.unsettled = True
            setattr(self, s.attr, value)
        return handle

    def _getter(self, s: Setting) -> Handler:
        def handle(command: scpi.Command) -> str | float:
            no_arguments(command)
            value = getattr(self, s.attr)
            if s.kind == "bool":
                return "1" if value else "0"
            if s.kind == "choice":
                return scpi_short(value)
            return float(value)
        return handle


# --- arguments ---------------------------------------------------------------------------

def remembered(cache: dict, key: tuple, compute: Callable[[], object],
               limit: int = 4096) -> object:
    """``cache[key]``, computed once: instrument physics is a root find per state, and a
    sweep revisits states (repeated reads, averaging). The cache empties past ``limit``."""
    value = cache.get(key)
    if value is None:
        value = compute()
        if len(cache) >= limit:
            cache.clear()
        cache[key] = value
    return value


def scpi_short(mnemonic: str) -> str:
    """The short form of a mnemonic ("VOLTage" -> "VOLT")."""
    return "".join(ch for ch in mnemonic if not ch.islower())


def no_arguments(command: scpi.Command) -> None:
    if command.args:
        raise CommandError(-108, f"{command.header} takes none, got {', '.join(command.args)}")


def one_argument(command: scpi.Command) -> str:
    if not command.args:
        raise CommandError(-109, command.header)
    if len(command.args) > 1:
        raise CommandError(-108, f"{command.header} takes one, got {len(command.args)}")
    return command.args[0]


def number_argument(arg: str, low: float, high: float, default: object) -> float:
    """A number within [low, high]; MINimum, MAXimum and DEFault name the ends."""
    if arg[:1].isalpha():
        for word, value in (("MINimum", low), ("MAXimum", high), ("DEFault", default)):
            if scpi.header_matches(word, arg):
                return float(value)  # type: ignore[arg-type]
    try:
        value = scpi.parse_number(arg)
    except ValueError:
        raise CommandError(-104, f"expected a number, got {arg!r}") from None
    if not math.isfinite(value):
        raise CommandError(-104, f"expected a finite number, got {arg!r}")
    if not low <= value <= high:
        raise CommandError(-222, f"{arg} is outside {scpi.format_value(low)} to "
                                 f"{scpi.format_value(high)}")
    return value


def bool_argument(arg: str) -> bool:
    try:
        return scpi.parse_bool(arg)
    except ValueError:
        raise CommandError(-224, f"expected ON, OFF, 1 or 0, got {arg!r}") from None


def choice_argument(arg: str, choices: tuple[str, ...]) -> str:
    for choice in choices:
        if scpi.header_matches(choice, arg):
            return choice
    raise CommandError(-224, f"expected one of {', '.join(choices)}, got {arg!r}")
