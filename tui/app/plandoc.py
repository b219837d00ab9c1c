"""The plan the app holds: its file, its editor text and the engine's verdict on it.

No Textual here. The app owns one `PlanDocument`; screens never change it directly, they
post messages (`messages.PlanOpen`, `PlanCheck`, `PlanSave`, `PlanExample`) and redraw
when the app says the plan changed.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from pnbench.errors import PnbenchError


@dataclass
class PlanDocument:
    path: Path | None = None
    text: str = ""
    plan: object | None = None
    error: str = ""
    #: the editor holds text that is not what `path` holds
    unsaved: bool = False

    def load(self, path: str | Path) -> bool:
        """Read a plan file and check it; False (with `error`) when it cannot run."""
        self.path = Path(path)
        self.unsaved = False
        try:
            text = self.path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            self.text, self.plan = "", None
            reason = getattr(exc, "strerror", None) or exc
            self.error = f"plan {path}: cannot read it ({reason})"
            return False
        return self.check(text)

    def check(self, text: str) -> bool:
        """Validate `text` with the engine; keeps the Plan or the engine's message."""
        from pnbench.sweeps.plan import parse_plan

        self.text = text
        name = str(self.path) if self.path else "<unsaved plan>"
        base = self.path.parent if self.path else Path.cwd()
        try:
            self.plan = parse_plan(text, name, base_dir=base)
            self.error = ""
        except PnbenchError as exc:
            self.plan, self.error = None, str(exc)
        return self.plan is not None

    def load_example(self, simulate: str | None) -> bool:
        """The bundled plan for the simulated device (or the bundled example) as an
        unsaved copy: saving asks where. False when no bundled plan is installed."""
        from pnbench.tui.app.plan import example_plan_path

        path = example_plan_path(simulate)
        if path is None:
            self.error = "no bundled example plan is installed"
            return False
        self.load(path)
        self.path, self.unsaved = None, True
        return True

    def save(self, target: str | Path, text: str) -> None:
        """Write `text` to `target` (OSError to the caller) and check it there."""
        target = Path(target).expanduser()
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text, encoding="utf-8")
        self.path, self.unsaved = target, False
        self.check(text)
