"""Quantities with SI prefixes ("100u", "2.5 mA", "1MHz") for options and displays.

One helper over quantiphy, so every command reads and prints numbers the same way:

    parse_quantity("2.5mA", "A")   -> 0.0025
    parse_quantity("-5", "V")      -> -5.0
    parse_quantity("300 K", "K")   -> 300.0      (the unit is removed before the prefix is read)
    format_quantity(0.0013, "A")   -> "1.3 mA"

Prefixes are the SI ones as quantiphy reads them (case matters: ``m`` milli, ``M`` mega,
``u`` or ``µ`` micro). A unit written after the number must be the expected one.
"""

from __future__ import annotations

import math

from quantiphy import InvalidNumber, Quantity

from pnbench.errors import BadInput

#: Other spellings accepted for a unit.
_ALIASES = {"ohm": ("ohm", "Ohm", "Ω", "ohms"), "S": ("S",), "Hz": ("Hz",)}


def _strip_unit(text: str, unit: str) -> tuple[str, bool]:
    for spelling in _ALIASES.get(unit, (unit,)) if unit else ():
        if text.endswith(spelling) and len(text) > len(spelling):
            return text[: -len(spelling)].rstrip(), True
    return text, False


def parse_quantity(text: str | float, unit: str, *, what: str = "value",
                   allow_infinite: bool = False, low: float | None = None,
                   high: float | None = None) -> float:
    """The value in SI units of ``text`` (a number, optionally SI-prefixed, optionally
    followed by ``unit``), within [``low``, ``high``] when given. Raises BadInput naming
    ``what`` on anything else."""
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        raw = str(text).strip()
        if not raw:
            raise BadInput(f"{what}: empty; expected a number such as 1.5, 2m or 2.5m{unit}")
        body, _ = _strip_unit(raw, unit)
        try:
            q = Quantity(body)
        except InvalidNumber:
            raise BadInput(
                f"{what}: cannot read {raw!r} as a quantity in {unit or 'plain numbers'}; "
                f"expected a number with an optional SI prefix (f p n u m k M G T) "
                f"and unit, such as 1.5, 2m or 2.5m{unit}"
            ) from None
        if q.units:
            expected = repr(unit) if unit else "no unit"
            raise BadInput(
                f"{what}: {raw!r} has unit {q.units!r}, expected {expected} "
                f"(example: 2.5m{unit})"
            )
        value = float(q)
    if math.isnan(value) or (math.isinf(value) and not allow_infinite):
        raise BadInput(f"{what}: {text!r} is not a finite number")
    return within(value, unit, what, low, high)


def within(value: float, unit: str, what: str, low: float | None = None,
           high: float | None = None) -> float:
    """``value`` when it lies in [``low``, ``high``]; BadInput naming ``what`` otherwise."""
    if (low is not None and value < low) or (high is not None and value > high):
        lo = "" if low is None else format_quantity(low, unit)
        hi = "" if high is None else format_quantity(high, unit)
        span = (f"between {lo} and {hi}" if low is not None and high is not None
                else f"at least {lo}" if low is not None else f"at most {hi}")
        raise BadInput(f"{what}: {format_quantity(value, unit)} is out of range; expected "
                       f"{span}")
    return value


def format_quantity(value: float, unit: str, prec: int = 4) -> str:
    """``value`` with an SI prefix and ``unit``, ``prec`` digits after the first:
    format_quantity(1.5e-12, "F") -> "1.5 pF"; infinities print as "inf"."""
    if math.isnan(value):
        return f"nan {unit}".strip()
    if math.isinf(value):
        return f"{'-' if value < 0 else ''}inf {unit}".strip()
    return Quantity(value, unit).render(prec=prec)


def format_duration(seconds: float) -> str:
    """'1:02:03' or '2:05' for durations and ETAs; '--' when unknown (the one format of
    headless progress, the app, watch and `check`)."""
    if not math.isfinite(seconds):
        return "--"
    seconds = max(int(round(seconds)), 0)
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def estimate_digits(value: float, sigma: float | None, least: int = 3, most: int = 6) -> int:
    """Significant digits that show `value` down to the second significant digit of its
    standard error `sigma` (the usual way of quoting an estimate: the uncertainty to at
    most two significant digits and the value rounded to the same place; JCGM 100:2008
    (GUM) 7.2.6), never fewer than `least` nor more than `most`."""
    if (sigma is None or not math.isfinite(value) or value == 0 or not math.isfinite(sigma)
            or sigma <= 0):
        return least
    digits = math.floor(math.log10(abs(value))) - math.floor(math.log10(sigma)) + 2
    return max(least, min(most, digits))


def format_estimate(value: float, sigma: float | None, unit: str, least: int = 3,
                    most: int = 6) -> str:
    """`value` with as many significant digits as its `sigma` supports, zeros kept
    ("4.00 fA" and "4.0123 fA" say different things; "4 fA" says neither)."""
    if not math.isfinite(value):
        return format_quantity(value, unit)
    digits = estimate_digits(value, sigma, least, most)
    if unit in ("", "-"):
        return _plain(value, digits)
    return Quantity(value, unit).render(prec=digits - 1, strip_zeros=False)


def _plain(value: float, digits: int) -> str:
    text = f"{value:#.{digits}g}"
    return text[:-1] if text.endswith(".") else text
