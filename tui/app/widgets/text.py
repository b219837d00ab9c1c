"""Updating a text widget only when its text changed, and asking for a layout pass only
when its size may change: on a long run the screen's timers set the same words again and
again, and every `Static.update` lays the whole screen out anew by default (the costliest
part of a redraw after the plot)."""

from __future__ import annotations

from textual.widgets import Static


def _rows(text: str, width: int) -> int:
    """Rows `text` takes at `width` columns when wrapped (a fair estimate)."""
    width = max(width, 1)
    return sum(max(1, -(-len(line) // width)) for line in text.split("\n"))


def set_text(widget: Static, text: str, auto_width: bool = False) -> None:
    """Show `text` in `widget` if it is not showing it already; a layout pass only when
    the rows it takes change (or it was never sized), or with `auto_width` (a widget as
    wide as its text) when its widest line does. A hidden widget needs none: showing it
    lays the screen out anyway."""
    old = getattr(widget, "_pnbench_text", None)
    if old == text:
        return
    width = widget.size.width
    if old is None:
        layout = True
    elif not widget.display:
        layout = False
    elif auto_width:
        layout = _widest(old) != _widest(text) or old.count("\n") != text.count("\n")
    else:
        layout = not width or _rows(old, width) != _rows(text, width)
    widget._pnbench_text = text  # type: ignore[attr-defined]
    widget.update(text, layout=layout)


def _widest(text: str) -> int:
    return max(len(line) for line in text.split("\n"))
