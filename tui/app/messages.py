"""What screens ask of the app. Screens post these; the app (which owns the plan, the
sweep and navigation) handles them and screens redraw from what it then holds."""

from __future__ import annotations

from pathlib import Path

from textual.message import Message


class StartRequested(Message):
    """Start the plan's sweep (after the start question). `key` confirms it again."""

    def __init__(self, key: str = "s", text: str | None = None) -> None:
        super().__init__()
        self.key = key
        #: editor text to check first (the Plan screen's Run), None for the held plan
        self.text = text


class PauseToggled(Message):
    """Pause a running sweep, or resume a paused one."""


class AbortRequested(Message):
    """Abort the sweep (after the abort question)."""


class PlanOpen(Message):
    def __init__(self, path: Path) -> None:
        super().__init__()
        self.path = Path(path)


class PlanCheck(Message):
    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text


class PlanSave(Message):
    def __init__(self, path: Path, text: str) -> None:
        super().__init__()
        self.path = Path(path)
        self.text = text


class PlanExample(Message):
    """Load the bundled plan for the simulated device (or the example) as a copy."""


class PlanChanged(Message):
    """Sent by the app to the screens after the plan document changed. `checked` says
    the change was a check the user asked for (so the editor can jump to the error)."""

    def __init__(self, checked: bool = False) -> None:
        super().__init__()
        self.checked = checked
