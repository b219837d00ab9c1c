"""Small modal dialogs: yes/no, a path, the Q-point. Each answers through dismiss()."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Footer, Input, Static

from pnbench.errors import BadInput
from pnbench.sweeps.quantities import format_quantity
from pnbench.tui.app.widgets.qpoint import QChoice, parse_choice

DIALOG_CSS = """
{name} {{ align: center middle; }}
{name} > Vertical {{
    width: 76; max-width: 100%; height: auto; max-height: 100%;
    border: heavy $accent; padding: 0 1; background: $surface;
}}
{name} .dialog-title {{ text-style: bold reverse; width: 1fr; }}
{name} .dialog-error {{ text-style: bold; }}
"""


class ConfirmDialog(ModalScreen[bool]):
    """A question answered with y (yes) or n / Esc (no)."""

    DEFAULT_CSS = DIALOG_CSS.format(name="ConfirmDialog")
    BINDINGS = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n", "answer(False)", "No"),
        Binding("escape", "answer(False)", "No", show=False),
    ]

    def __init__(self, title: str, text: str, yes_key: str | None = None):
        super().__init__()
        self.title_text = title
        self.body = text
        self.yes_key = yes_key

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(self.title_text, classes="dialog-title", markup=False)
            yield Static(self.body, markup=False)
            again = f" (or {self.yes_key} again)" if self.yes_key else ""
            yield Static(f"y{again}: yes    n or Esc: no", classes="dialog-error", markup=False)
        yield Footer(compact=True)

    def on_key(self, event) -> None:
        if self.yes_key and event.key == self.yes_key:  # the same key twice confirms
            event.stop()
            self.dismiss(True)

    def action_answer(self, yes: bool) -> None:
        self.dismiss(bool(yes))


class PathDialog(ModalScreen[str | None]):
    """Ask for a file or folder path; Enter accepts, Esc cancels."""

    DEFAULT_CSS = DIALOG_CSS.format(name="PathDialog")
    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, title: str, hint: str, value: str = ""):
        super().__init__()
        self.title_text = title
        self.hint = hint
        self.value = value

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(self.title_text, classes="dialog-title", markup=False)
            yield Static(self.hint, markup=False)
            yield Input(self.value, id="path")
            yield Static("", classes="dialog-error", id="path-error", markup=False)
        yield Footer(compact=True)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        if not text:
            self.query_one("#path-error", Static).update("type a path, or Esc to cancel")
            return
        self.dismiss(text)

    def action_cancel(self) -> None:
        self.dismiss(None)


class QPointDialog(ModalScreen[QChoice | None]):
    """Pick the Q-point: a bias voltage or current, and the frequencies for |Z|."""

    DEFAULT_CSS = DIALOG_CSS.format(name="QPointDialog")
    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, choice: QChoice):
        super().__init__()
        self.choice = choice

    def compose(self) -> ComposeResult:
        unit = "V" if self.choice.kind == "voltage" else "A"
        bias = format_quantity(self.choice.value, unit, prec=4).replace(" ", "")
        freqs = " ".join(format_quantity(f, "Hz", prec=3).replace(" ", "")
                         for f in self.choice.frequencies_Hz)
        with Vertical():
            yield Static("Small-signal Q-point", classes="dialog-title", markup=False)
            yield Static("Bias: a terminal voltage (0.65V, -5V) or a current (1mA, 10uA)",
                         markup=False)
            yield Input(bias, id="bias")
            yield Static("Frequencies for |Z| (1k 100k 1M)", markup=False)
            yield Input(freqs, id="freqs")
            yield Static("Enter: accept   Tab: next field   Esc: cancel",
                         classes="dialog-error", id="qpoint-error", markup=False)
        yield Footer(compact=True)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        try:
            choice = parse_choice(self.query_one("#bias", Input).value,
                                  self.query_one("#freqs", Input).value)
        except BadInput as exc:
            self.query_one("#qpoint-error", Static).update(str(exc))
            return
        self.dismiss(choice)

    def action_cancel(self) -> None:
        self.dismiss(None)


class PointDialog(ModalScreen[tuple[str, str] | None]):
    """Ask for one bias point to source by hand: the level (V or A) and the compliance."""

    DEFAULT_CSS = DIALOG_CSS.format(name="PointDialog")
    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, limits_text: str, level: str = "0.5 V", compliance: str = "1 mA"):
        super().__init__()
        self.limits_text = limits_text
        self.level = level
        self.compliance = compliance

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static("Source and measure one point", classes="dialog-title",
                         markup=False)
            yield Static("Level: a voltage (0.6 V, -5 V) or a current (1 mA)", markup=False)
            yield Input(self.level, id="level")
            yield Static("Compliance on the other quantity (10 mA, or 2 V)", markup=False)
            yield Input(self.compliance, id="compliance")
            yield Static(f"The plan's limits apply: {self.limits_text}. The output goes "
                         "off again right after the reading.", markup=False)
            yield Static("Enter: source it   Tab: next field   Esc: cancel",
                         classes="dialog-error", markup=False)
        yield Footer(compact=True)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss((self.query_one("#level", Input).value,
                      self.query_one("#compliance", Input).value))

    def action_cancel(self) -> None:
        self.dismiss(None)
