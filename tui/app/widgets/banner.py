"""The two lines at the top of every screen: where you are, and whether a source is on.

`SourceBanner` reads the app's `output_text` and `source_on` reactives; while any source
output is on it fills its line in reverse video with words that say so, so the state is
plain on a monochrome terminal too. `ScreenBar` names the screen and the keys that move
between screens, and the run's status.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Horizontal
from textual.widgets import Static

#: Screens in the order of their keys: (mode, key, title).
SCREENS: tuple[tuple[str, str, str], ...] = (
    ("bench", "F2", "Bench"),
    ("plan", "F3", "Plan"),
    ("run", "F4", "Run"),
    ("review", "F5", "Review"),
)


class SourceBanner(Static):
    """One line: the source-output state, impossible to miss while a source is on."""

    DEFAULT_CSS = """
    SourceBanner { height: 1; width: 1fr; padding: 0 1; }
    SourceBanner.-on { background: $error; color: $text; text-style: reverse bold; }
    SourceBanner.-off { text-style: dim; }
    """

    def __init__(self) -> None:
        super().__init__("", markup=False)

    def on_mount(self) -> None:
        self.watch(self.app, "output_text", self._show, init=True)
        self.watch(self.app, "source_on", self._show, init=False)

    def _show(self, _value: object = None) -> None:
        on = bool(getattr(self.app, "source_on", False))
        text = str(getattr(self.app, "output_text", ""))
        self.set_class(on, "-on")
        self.set_class(not on, "-off")
        self.update(f">>> {text} <<<" if on else text)


class ScreenBar(Horizontal):
    """Screen name, the screen keys, and the run's status at the right."""

    DEFAULT_CSS = """
    ScreenBar { height: 1; width: 1fr; background: $panel; }
    ScreenBar > #bar-name { width: auto; text-style: bold reverse; padding: 0 1; }
    ScreenBar > #bar-keys { width: 1fr; padding: 0 1; }
    ScreenBar > #bar-status { width: auto; padding: 0 1; text-style: bold; }
    """

    def __init__(self, mode: str, title: str):
        super().__init__()
        self.mode = mode
        self.title = title

    def compose(self) -> ComposeResult:
        yield Static(self.title, id="bar-name", markup=False)
        modes = getattr(self.app, "available_modes", [m for m, _, _ in SCREENS])
        keys = "  ".join(f"{key} {name.lower()}" for mode, key, name in SCREENS
                         if mode in modes and mode != self.mode)
        yield Static(keys, id="bar-keys", markup=False)
        yield Static("", id="bar-status", markup=False)

    def on_mount(self) -> None:
        self.watch(self.app, "status_text", self._status, init=True)

    def _status(self, text: str) -> None:
        self.query_one("#bar-status", Static).update(text)
