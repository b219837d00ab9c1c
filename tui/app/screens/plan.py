"""The plan screen: open, edit, check (the engine's own messages), estimate, save, run.

The editor holds TOML text. Check (Ctrl+T) validates it with `sweeps.plan.parse_plan`
without touching an instrument and shows the engine's messages, line and key included,
with the steps and the estimated duration. Save (Ctrl+S) writes the text as it is.
"""

from __future__ import annotations

import re
from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static, TextArea

from pnbench.sweeps.record.layout import PLAN as PLAN_FILE
from pnbench.tui.app.messages import (
    PlanChanged,
    PlanCheck,
    PlanExample,
    PlanOpen,
    PlanSave,
    StartRequested,
)
from pnbench.tui.app.plan import plan_summary
from pnbench.tui.app.screens.dialogs import PathDialog
from pnbench.tui.app.widgets.banner import MessageStrip, ScreenBar, SourceBanner


def first_line_number(message: str) -> int | None:
    """The first 'line N' an engine message names (1-based), if any."""
    found = re.search(r"\bline (\d+)", message or "")
    return int(found.group(1)) if found else None


class PlanScreen(Screen):
    """Edit and check a plan file."""

    BINDINGS = [
        Binding("ctrl+t", "check", "Check", priority=True),
        Binding("ctrl+o", "open", "Open", priority=True),
        Binding("ctrl+s", "save", "Save as", priority=True),
        Binding("ctrl+n", "example", "Example", priority=True),
        Binding("ctrl+r", "run", "Run it", priority=True),
        Binding("escape", "leave_editor", "Messages", show=False),
    ]

    def compose(self) -> ComposeResult:
        yield SourceBanner()
        yield ScreenBar("plan", "Plan")
        yield MessageStrip()
        yield Static("", id="plan-path", markup=False)
        with Horizontal(id="plan-body"):
            yield TextArea("", id="plan-text", show_line_numbers=True, tab_behavior="focus")
            with VerticalScroll(id="plan-report"):
                yield Static("", id="plan-messages", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        editor = self.query_one(TextArea)
        editor.load_text(self.app.plan_text)
        self._modified = self.app.doc.unsaved
        self._show_result()
        editor.focus()

    def on_screen_resume(self) -> None:
        """Back on this screen: the app may have changed the plan meanwhile."""
        self.on_plan_changed(PlanChanged())

    def on_resize(self, event) -> None:
        self.set_class(event.size.width >= 120, "-wide")

    def on_text_area_changed(self, event: TextArea.Changed) -> None:
        if event.text_area.text != self.app.plan_text:
            self._modified = True
            self._show_path()

    # ------------------------------------------------------------------ display
    def _show_path(self) -> None:
        path = self.app.plan_path
        name = str(path) if path else "(not saved yet)"
        flag = "  [modified: Ctrl+T checks, Ctrl+S saves]" if self._modified else ""
        self.query_one("#plan-path", Static).update(f"plan file: {name}{flag}")

    def _show_result(self) -> None:
        self._show_path()
        app = self.app
        if app.plan is not None:
            text = "CHECK PASSED\n\n" + plan_summary(app.plan)
        elif app.plan_error:
            text = "CHECK FAILED (nothing was sent to any instrument)\n\n" + app.plan_error
        else:
            text = ("No plan yet.\n\nCtrl+O opens a plan file, Ctrl+N loads the bundled "
                    "example to start from. Ctrl+T checks what you typed.")
        self.query_one("#plan-messages", Static).update(text)

    # ------------------------------------------------------------------ the app's word
    def on_plan_changed(self, message: PlanChanged) -> None:
        """The app changed the plan document: show its text (unless it is what the
        editor holds) and the engine's verdict; after a check, go to the first problem."""
        editor = self.query_one(TextArea)
        doc = self.app.doc
        if editor.text != doc.text:
            editor.load_text(doc.text)
        self._modified = doc.unsaved
        self._show_result()
        line = first_line_number(doc.error) if message.checked and doc.error else None
        if line is not None and 0 < line <= editor.document.line_count:
            editor.move_cursor((line - 1, 0), center=True)  # to the first problem

    # ------------------------------------------------------------------ actions
    def action_check(self) -> None:
        self.post_message(PlanCheck(self.query_one(TextArea).text))

    def action_open(self) -> None:
        current = str(self.app.plan_path or Path.cwd()) + ("" if self.app.plan_path else "/")

        def chosen(path: str | None) -> None:
            if path:
                self.post_message(PlanOpen(Path(path).expanduser()))

        self.app.push_screen(PathDialog("Open a plan file", "Path of a plan (TOML):",
                                        current), chosen)

    def action_example(self) -> None:
        self.post_message(PlanExample())

    def action_save(self) -> None:
        suggestion = str(self.app.plan_path or Path.cwd() / PLAN_FILE)

        def chosen(path: str | None) -> None:
            if path:
                self.post_message(PlanSave(Path(path).expanduser(),
                                           self.query_one(TextArea).text))

        self.app.push_screen(PathDialog("Save the plan as", "File to write (TOML):",
                                        suggestion), chosen)

    def action_run(self) -> None:
        self.post_message(StartRequested("ctrl+r", text=self.query_one(TextArea).text))

    def action_leave_editor(self) -> None:
        self.query_one("#plan-report").focus()
