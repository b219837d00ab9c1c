"""SCPI text as pure functions: build program messages, split and parse them, read replies.

No I/O lives here. The pyvisa sessions and roles use these functions to build what they
send and to read what comes back; the simulated bench uses the same functions to parse
what it receives, so both sides of every test agree on one reading of the standards.

Standards followed (IEEE 488.2-1992 for message syntax and error entries, SCPI-1999
volume 1 for headers, numbers and the special values):

- a program message is program units joined by ``;``; a unit is a header, optionally a
  ``?`` (query), then whitespace and comma-separated arguments;
- a header node has a long form (``VOLTage``) and a short form (its capital letters,
  ``VOLT``); an instrument accepts either, in any letter case, but nothing in between;
- numbers are decimal (NR1, NR2, NR3 forms); ``9.91E37`` is not-a-number and
  ``+/-9.9E37`` is the overflow (infinity) marker;
- strings are quoted with ``"`` or ``'``; a quote inside is doubled.

Not supported: arbitrary block data (``#`` blocks) and non-decimal numbers (``#H``).

Speed: these functions run several times per bias point. Text without a quote character
is split with ``str.split`` (the character walk that respects quotes runs only when a
quote is present; both give the same units), and what depends on a template or a
header pattern alone (placeholders, pattern nodes, node forms; headers are matched in
`scpiheaders`) is computed once per distinct text and cached. A number is read with
``float()`` first and checked against the decimal pattern only when that does not give
a plain finite value (the two agree: tests/drivers/test_scpi_fast.py).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from functools import lru_cache

from pnbench.drivers.scpiheaders import header_matches  # noqa: F401 - part of this module's API

#: SCPI-1999 vol. 1, 7.2.1.5: the value an instrument returns for not-a-number.
NAN_MARKER = 9.91e37
#: SCPI-1999 vol. 1, 7.2.1.5: the value for positive infinity (negative: its negative).
OVERFLOW_MARKER = 9.9e37

_MARKERS = (NAN_MARKER, OVERFLOW_MARKER)
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)
_SPECIAL_NUMBERS = {
    "NAN": math.nan,
    "INF": math.inf,
    "INFINITY": math.inf,
    "+INF": math.inf,
    "+INFINITY": math.inf,
    "-INF": -math.inf,
    "-INFINITY": -math.inf,
    "NINF": -math.inf,
    "NINFINITY": -math.inf,
}
_PLACEHOLDER = re.compile(r"\{([^{}]*)\}")
_HEADER = re.compile(r"\*[A-Za-z][A-Za-z0-9]*|:?[A-Za-z][A-Za-z0-9_]*(?::[A-Za-z][A-Za-z0-9_]*)*")


@dataclass(frozen=True)
class Command:
    """One program unit: ``header`` without the ``?``, raw ``args`` text, ``query`` flag."""

    header: str
    args: list[str] = field(default_factory=list)
    query: bool = False


# --- formatting ------------------------------------------------------------------------

def format_value(x: float) -> str:
    """The shortest decimal text that reads back as exactly `x` ("1e-05", "0.5", "3").

    Not-a-number becomes the SCPI marker ``9.91E+37`` and infinities the overflow marker
    ``+/-9.9E+37`` (useful for replies); callers that send settings check finiteness first.
    """
    x = float(x)
    if math.isnan(x):
        return "9.91E+37"
    if math.isinf(x):
        return "9.9E+37" if x > 0 else "-9.9E+37"
    text = repr(x)
    if text.endswith(".0"):
        text = text[:-2]
    return text


def format_bool(state: bool, on: str = "ON", off: str = "OFF") -> str:
    """The word for a boolean setting."""
    return on if state else off


def quote(text: str) -> str:
    """An IEEE 488.2 string: double-quoted, inner quotes doubled."""
    return '"' + text.replace('"', '""') + '"'


def unquote(text: str) -> str:
    """The content of a quoted string (either quote character); unquoted text as is."""
    text = text.strip()
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'":
        q = text[0]
        inner = text[1:-1]
        return inner.replace(q + q, q)
    return text


def fill(
    template: str,
    *,
    value: float | None = None,
    state: bool | None = None,
    form: str | None = None,
    on: str = "ON",
    off: str = "OFF",
) -> str:
    """Fill a dialect template's ``{value}``, ``{state}`` and ``{form}`` placeholders.

    A placeholder without its argument, an argument without its placeholder, or an
    unknown placeholder raises ValueError: a template that silently dropped the level
    would leave an instrument at a setting nobody asked for.
    """
    given = {"value": value, "state": state, "form": form}
    pieces, used = _template(template)
    for name in used:
        if name not in given:
            raise ValueError(
                f"unknown placeholder {{{name}}} in {template!r}; "
                "known: {value}, {state}, {form}"
            )
        if given[name] is None:
            raise ValueError(f"{template!r} needs a {name}, none was given")
    for name, arg in given.items():
        if arg is not None and name not in used:
            raise ValueError(f"{template!r} has no {{{name}}} placeholder for {arg!r}")

    if not used:
        return template
    out = [pieces[0]]
    for name, literal in zip(used, pieces[1:], strict=True):
        if name == "value":
            if not math.isfinite(float(value)):
                raise ValueError(f"refusing to send the non-finite value {value!r}")
            out.append(format_value(value))
        elif name == "state":
            out.append(format_bool(bool(state), on, off))
        else:
            out.append(str(form))
        out.append(literal)
    return "".join(out)


@lru_cache(maxsize=1024)
def value_template(template: str) -> tuple[str, str]:
    """``(head, tail)`` of a template whose one placeholder is ``{value}``, stripped as
    `join` strips a unit: ``head + format_value(x) + tail`` is ``fill(template,
    value=x).strip()`` for any finite x, without `fill`'s checks on every call (a
    role builds its per-point message this way). ValueError for any other template."""
    pieces, used = _template(template)
    if used != ("value",):
        raise ValueError(f"{template!r} must have exactly one placeholder, {{value}}; "
                         f"found {', '.join('{' + u + '}' for u in used) or 'none'}")
    return pieces[0].lstrip(), pieces[1].rstrip()


@lru_cache(maxsize=1024)
def _template(template: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """A template's literal pieces around its placeholders, and the placeholder names
    (``pieces[0] name[0] pieces[1] ...``), once per distinct template."""
    parts = _PLACEHOLDER.split(template)
    return tuple(parts[0::2]), tuple(parts[1::2])


def join(commands: list[str], separator: str = ";") -> str:
    """One program message from several units; blank units are left out.

    Units should carry a leading ``:`` (or be common ``*`` commands) so that each starts
    at the root of the command tree, whatever the previous unit was.
    """
    return separator.join(c.strip() for c in commands if c and c.strip())


# --- splitting and parsing messages ----------------------------------------------------

def _split_outside_quotes(text: str, separator: str) -> list[str]:
    if '"' not in text and "'" not in text:  # the common case: nothing quoted
        return text.split(separator)
    return _split_quoted(text, separator)


def _split_quoted(text: str, separator: str) -> list[str]:
    """The character walk: a separator inside a quoted string does not split."""
    parts: list[str] = []
    current: list[str] = []
    quote_char = ""
    i = 0
    n = len(separator)
    while i < len(text):
        ch = text[i]
        if quote_char:
            current.append(ch)
            if ch == quote_char:
                quote_char = ""  # a doubled quote reopens on the next character
            i += 1
        elif ch in "\"'":
            quote_char = ch
            current.append(ch)
            i += 1
        elif text.startswith(separator, i):
            parts.append("".join(current))
            current = []
            i += n
        else:
            current.append(ch)
            i += 1
    if quote_char:
        raise ValueError(f"unterminated quoted string in {text!r}")
    parts.append("".join(current))
    return parts


def split_units(message: str, separator: str = ";") -> list[str]:
    """Split a program or response message into its units, respecting quoted strings.

    Terminators and surrounding whitespace are stripped; empty units are left out (so a
    reply with a missing field shows up as fewer units than expected).
    """
    if not separator:
        raise ValueError("the unit separator must not be empty")
    units = _split_outside_quotes(message.strip(), separator)
    return [u.strip() for u in units if u.strip()]


def split_args(text: str) -> list[str]:
    """Comma-separated arguments or response fields, respecting quoted strings."""
    text = text.strip()
    if not text:
        return []
    return [a.strip() for a in _split_outside_quotes(text, ",")]


def parse_command(unit: str) -> Command:
    """Parse one program unit (``:SOUR:VOLT 1e-3``, ``*IDN?``) into a Command.

    Raises ValueError for an empty unit or a malformed header.
    """
    unit = unit.strip()
    if not unit:
        raise ValueError("empty program unit")
    parts = unit.split(None, 1)
    head = parts[0]
    rest = parts[1] if len(parts) > 1 else ""
    query = head.endswith("?")
    if query:
        head = head[:-1]
    if not _HEADER.fullmatch(head):
        raise ValueError(f"malformed header {parts[0]!r} in {unit!r}")
    args = split_args(rest)
    if any(a == "" for a in args):
        raise ValueError(f"empty argument in {unit!r}")
    return Command(header=head, args=args, query=query)


# --- replies -----------------------------------------------------------------------------

def parse_number(text: str) -> float:
    """A decimal number of a reply; the SCPI markers become nan and +/-inf.

    Accepts NR1/NR2/NR3 forms (``1``, ``-0.5``, ``+1.000E-03``) and the words NAN, INF,
    NINF. Anything else (units, hex, empty text) raises ValueError naming the text.
    """
    if not isinstance(text, str):
        raise ValueError(f"expected text, got {type(text).__name__}")
    s = text.strip()
    if s.isascii() and "_" not in s:  # the common case, without the pattern match
        try:
            x = float(s)
        except ValueError:
            x = math.nan
        # on ASCII text without "_", float() takes a finite value exactly when the
        # pattern of decimal numbers does; its words (nan, inf) go the long way below
        if math.isfinite(x):
            if abs(x) == NAN_MARKER:
                return math.nan
            if abs(x) == OVERFLOW_MARKER:
                return math.copysign(math.inf, x)
            return x
    special = _SPECIAL_NUMBERS.get(s.upper())
    if special is not None:
        return special
    if not _NUMBER.fullmatch(s):
        raise ValueError(f"not a number: {text!r}")
    x = float(s)
    if abs(x) == NAN_MARKER:
        return math.nan
    if abs(x) == OVERFLOW_MARKER:
        return math.copysign(math.inf, x)
    return x


def parse_numbers(text: str) -> list[float]:
    """A comma-separated list of numbers; ValueError names the field that is not one."""
    if '"' not in text and "'" not in text and text.strip():
        fields = text.split(",")  # parse_number strips each field
        if text.isascii() and "_" not in text:  # a reading: every field at once
            try:
                values = [float(f) for f in fields]
            except ValueError:
                values = None
            # parse_number's fast path, field by field: finite and not a marker
            if values is not None and all(math.isfinite(x) and abs(x) not in _MARKERS
                                          for x in values):
                return values
    else:
        fields = split_args(text)
    if not fields:
        raise ValueError("empty reply where numbers were expected")
    values = []
    for k, f in enumerate(fields, start=1):
        try:
            values.append(parse_number(f))
        except ValueError:
            raise ValueError(f"field {k} of {text.strip()!r} is not a number: "
                             f"{f.strip()!r}") from None
    return values


def parse_bool(text: str) -> bool:
    """A SCPI boolean: ``1``/``0``/``ON``/``OFF``, or a number (rounded, nonzero is on)."""
    s = text.strip().upper()
    if s == "0":  # the common replies first
        return False
    if s == "1":
        return True
    if s == "ON":
        return True
    if s == "OFF":
        return False
    try:
        x = parse_number(s)
    except ValueError:
        raise ValueError(f"not a boolean (1, 0, ON or OFF): {text!r}") from None
    if not math.isfinite(x):
        raise ValueError(f"not a boolean (1, 0, ON or OFF): {text!r}")
    return round(x) != 0


def parse_error_entry(text: str) -> tuple[int, str]:
    """An error-queue entry ``-113,"Undefined header"`` as ``(-113, "Undefined header")``.

    The message may be quoted (the standard) or bare; code 0 means the queue is empty.
    """
    s = text.strip()
    code_text, sep, message = s.partition(",")
    code_text = code_text.strip()
    if not re.fullmatch(r"[+-]?\d+", code_text, re.ASCII):
        raise ValueError(f"not an error entry (expected like -113,\"Undefined header\"): {text!r}")
    message = message.strip()
    if message[:1] in "\"'" and message:
        if len(message) < 2 or message[-1] != message[0]:
            raise ValueError(f"unterminated message in error entry {text!r}")
        message = unquote(message)
    return int(code_text), message


def format_error_entry(code: int, message: str) -> str:
    """The IEEE 488.2 text of an error-queue entry."""
    return f"{int(code)},{quote(message)}"


def is_marker(x: float) -> bool:
    """Whether `x` is a SCPI special value: not-a-number or overflow, parsed or raw."""
    x = float(x)
    return math.isnan(x) or math.isinf(x) or abs(x) in (NAN_MARKER, OVERFLOW_MARKER)
