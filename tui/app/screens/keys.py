"""F1: the keys of the screen in use first, in pnbench's own words, then the keys that
work everywhere. Generic editing and cursor keys are left to the widgets that use them."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Static

#: Key names as a bench user reads them.
KEY_NAMES = {"space": "Space", "escape": "Esc", "ctrl+q": "Ctrl+Q", "ctrl+r": "Ctrl+R",
             "ctrl+t": "Ctrl+T", "ctrl+s": "Ctrl+S", "ctrl+o": "Ctrl+O", "ctrl+n": "Ctrl+N",
             "f1": "F1", "f2": "F2", "f3": "F3", "f4": "F4", "f5": "F5", "enter": "Enter"}

#: Extra lines a screen's keys do not say by themselves.
NOTES = {
    "RunScreen": "v / V cycle the plot views; 1-7 jump to one; p cycles the side panel "
                 "on a small terminal.",
    "PlanScreen": "Esc leaves the editor for the messages; the editor's own keys (arrows, "
                  "Home, End, Page Up/Down, Ctrl+Z) work as usual.",
}


def key_name(key: str) -> str:
    return KEY_NAMES.get(key, key.upper() if key.startswith("f") and key[1:].isdigit()
                         else key)


def binding_lines(bindings) -> list[str]:
    """One line per distinct action: its key(s) and its description."""
    seen: dict[str, list[str]] = {}
    order: list[tuple[str, str]] = []
    for binding in bindings:
        if not isinstance(binding, Binding) or not binding.description:
            continue
        label = binding.description
        if label not in seen:
            seen[label] = []
            order.append((label, binding.action))
        name = key_name(binding.key)
        if name not in seen[label]:
            seen[label].append(name)
    width = max((len(" / ".join(keys)) for keys in seen.values()), default=4)
    return [f"  {' / '.join(seen[label]):<{width}}  {label}" for label, _ in order]


def screen_title(screen: Screen) -> str:
    bar = getattr(screen, "query", None)
    try:
        return str(screen.query_one("ScreenBar").title)
    except Exception:  # noqa: BLE001 - a screen without a bar
        return type(screen).__name__.removesuffix("Screen") if bar else "this screen"


class KeysScreen(ModalScreen[None]):
    """The key list (F1 again, Esc or q closes it)."""

    DEFAULT_CSS = """
    KeysScreen { align: center middle; }
    KeysScreen > Vertical { width: 76; max-width: 100%; height: auto; max-height: 100%;
                            border: heavy $accent; padding: 0 1; background: $surface; }
    KeysScreen .keys-title { text-style: bold reverse; width: 1fr; }
    """
    BINDINGS = [Binding("escape", "close", "Close"), Binding("f1", "close", "Close"),
                Binding("q", "close", "Close")]

    def __init__(self, under: Screen) -> None:
        super().__init__()
        self.under = under

    def text(self) -> str:
        under = self.under
        lines = [f"On the {screen_title(under)} screen:"]
        lines += binding_lines(type(under).BINDINGS)
        note = NOTES.get(type(under).__name__)
        if note:
            lines += ["", f"  {note}"]
        lines += ["", "Everywhere:"]
        lines += binding_lines(type(self.app).BINDINGS)
        return "\n".join(lines)

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static("pnbench keys  (F1, Esc or q closes)", classes="keys-title",
                         markup=False)
            with VerticalScroll():
                yield Static(self.text(), id="keys-text", markup=False)

    def action_close(self) -> None:
        self.dismiss(None)
