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

from pnbench.tui.app.widgets.text import set_text

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
        set_text(self, f">>> {text} <<<" if on else text)


def banner_text(outputs: dict[str, bool], *, simulated: bool = False, state=None,
                watching: bool = False) -> tuple[bool, str]:
    """(a source is on, the banner's words) for the output states and the run's state.

    Off is said with who confirmed it: the runner at its end, or the guardian process
    that switched the outputs off after the run process was killed; a run that never
    reached its instruments says that nothing was connected."""
    from pnbench.tui.app.bench import output_name

    on = sorted(output_name(role) for role, state_on in outputs.items() if state_on)
    if on:
        where = "simulated " if simulated else ""
        return True, (f"SOURCE OUTPUT ON: {', '.join(on)} ({where}DUT terminals are live)")
    if state is not None and not getattr(state, "connected", True):
        return False, "the instruments were never connected: no output was switched on"
    if outputs or (state is not None and state.point_count):
        confirmed = ""
        if state is not None and state.outputs_off_confirmed:
            who = getattr(state, "outputs_off_by", "") or "runner"
            confirmed = f" (confirmed by the {who})"
        return False, f"outputs off{confirmed}"
    if watching:
        return False, "outputs: no output event seen in this run folder yet"
    return False, ""


class MessageStrip(Static):
    """The app's messages, in a strip under the screen bar: they push the screen down
    for a few seconds instead of covering the plot or the last-event line."""

    DEFAULT_CSS = """
    MessageStrip { height: auto; max-height: 4; width: 1fr; padding: 0 1;
                   background: $boost; display: none; }
    MessageStrip.-shown { display: block; }
    MessageStrip.-error { text-style: bold; background: $error 30%; }
    """

    def __init__(self) -> None:
        super().__init__("", markup=False)
        self._timer = None

    def say(self, text: str, *, error: bool = False, timeout: float = 6.0) -> None:
        self.update(text)
        self.set_class(True, "-shown")
        self.set_class(error, "-error")
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(max(float(timeout), 1.0), self.clear)

    def clear(self) -> None:
        self.update("")
        self.set_class(False, "-shown")
        self._timer = None


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
        set_text(self.query_one("#bar-status", Static), text, auto_width=True)
