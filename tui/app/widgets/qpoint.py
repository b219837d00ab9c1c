"""The small-signal equivalent at a Q-point the user picks, from the current estimates.

`qpoint_rows` is pure (modeling.smallsignal.operating_point underneath); `QPointPanel`
shows its rows. The bias is a terminal voltage ("0.65 V") or a current ("1 mA");
frequencies are a list such as "1k 100k 1M".
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from textual.widgets import Static

from pnbench.errors import BadInput
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.smallsignal import junction_off, off_rd_bound_ohm, operating_point
from pnbench.sweeps.quantities import format_quantity, parse_quantity
from pnbench.tui.app.widgets.params import format_value
from pnbench.tui.app.widgets.text import set_text


@dataclass(frozen=True)
class QChoice:
    """The Q-point the user picked: bias kind ('voltage' or 'current'), value, freqs."""

    kind: str = "voltage"
    value: float = 0.6
    frequencies_Hz: tuple[float, ...] = (1e3, 1e5, 1e6)

    def describe(self) -> str:
        unit = "V" if self.kind == "voltage" else "A"
        freqs = " ".join(format_quantity(f, "Hz", prec=3) for f in self.frequencies_Hz)
        return f"{format_quantity(self.value, unit, prec=4)} at {freqs}"


def parse_choice(bias_text: str, freq_text: str) -> QChoice:
    """A QChoice from what the user typed; BadInput says what was wrong."""
    bias = bias_text.strip()
    if not bias:
        raise BadInput("Q-point bias: empty; type a voltage such as 0.65V or a current "
                       "such as 1mA")
    if bias.endswith("A"):
        value = parse_quantity(bias, "A", what="Q-point bias current")
        kind = "current"
    else:
        value = parse_quantity(bias, "V", what="Q-point bias voltage")
        kind = "voltage"
    words = freq_text.replace(",", " ").split()
    if not words:
        raise BadInput("Q-point frequencies: empty; type one or more, such as 1k 100k 1M")
    freqs = tuple(parse_quantity(w, "Hz", what="Q-point frequency") for w in words)
    if any(f <= 0 for f in freqs):
        raise BadInput("Q-point frequencies: each must be above 0 Hz")
    return QChoice(kind, value, freqs)


#: Which extracted parameter each line depends on (beyond IS and N).
NEEDS = {"Cj": "CJO", "Cd": "TT", "RS": "RS"}


def qpoint_rows(params: DiodeParams, choice: QChoice, temperature_K: float,
                known: set[str] | None = None) -> list[tuple[str, str]]:
    """(label, value) lines of the small-signal equivalent at the chosen Q-point.

    `known` names the parameters actually extracted; a line that rests on one not yet
    extracted says so instead of showing the model-card default (such as Cd = 0)."""
    if choice.kind == "current":
        q = operating_point(params, current=choice.value, temperature_K=temperature_K)
    else:
        q = operating_point(params, voltage=choice.value, temperature_K=temperature_K)
    out = [
        ("bias", f"{format_value(q.bias_voltage_V, 'V')}, "
                 f"{format_value(q.bias_current_A, 'A')}"),
        ("rd", format_value(q.rd_ohm, "ohm")),
        ("gd", format_value(q.gd_S, "S")),
        ("Cj", format_value(q.cj_F, "F")),
        ("Cd", format_value(q.cd_F, "F")),
        ("RS", format_value(q.rs_ohm, "ohm")),
        ("T", f"{temperature_K:.2f} K"),
    ]
    if junction_off(q):  # the exact model's 1e-90 S says nothing a bench could see
        words = {"rd": f"off: > {format_value(off_rd_bound_ohm(q), 'ohm')}",
                 "gd": (f"leakage {format_value(1.0 / q.rsh_ohm, 'S')} (RSH)"
                        if math.isfinite(q.rsh_ohm) else "leakage-limited"),
                 "Cd": "negligible (junction off)"}
        out = [(label, words.get(label, value)) for label, value in out]
    if known is not None:
        out = [(label, value if NEEDS.get(label, "IS") in known
                else f"-- ({NEEDS[label]} not extracted yet)") for label, value in out]
    for f in choice.frequencies_Hz:
        z = complex(q.impedance(f))
        phase = math.degrees(math.atan2(z.imag, z.real))
        out.append((f"|Z| {format_quantity(f, 'Hz', prec=3)}",
                    f"{format_value(abs(z), 'ohm')} {phase:+.1f} deg"))
    return out


class QPointPanel(Static):
    """Small-signal equivalent at the chosen Q-point (b picks another)."""

    def __init__(self, *, id: str | None = None):
        super().__init__("", id=id, markup=False)
        self.choice = QChoice()
        self._asked: tuple | None = None

    def show(self, params: DiodeParams | None, temperature_K: float,
             have_dc_fit: bool, known: set[str] | None = None) -> None:
        asked = (params, self.choice, temperature_K, have_dc_fit, known)
        if asked == self._asked:
            return  # the same model and choice: the same rows
        self._asked = asked
        head = f"Q-point {self.choice.describe()}"
        if params is None or not have_dc_fit:
            set_text(self, f"{head}\n  waiting for an I-V fit (IS, N)")
            return
        try:
            lines = qpoint_rows(params, self.choice, temperature_K, known)
        except (ValueError, ArithmeticError) as exc:
            set_text(self, f"{head}\n  cannot evaluate: {exc}")
            return
        width = max(len(label) for label, _ in lines)
        body = "\n".join(f"  {label:<{width}}  {value}" for label, value in lines)
        set_text(self, f"{head}\n{body}")
