"""The sweep plot: textual-plot's PlotWidget showing one `PlotData` view.

Log axes carry log10 of the value (see app_plots); `DecadeFormatter` puts their ticks on
whole decades and labels them with SI prefixes (1n, 10n, 100n ...), thinning to every
second or third decade when the axis is short. Linear axes get SI-prefixed labels too.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence

import numpy as np
from quantiphy import Quantity
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.css.query import NoMatches
from textual.widgets import Static
from textual_plot import HiResMode, NumericAxisFormatter, PlotWidget

from pnbench.tui.app.plots import PlotData
from pnbench.tui.app.widgets.text import set_text


def _si_label(value: float, unit: str = "") -> str:
    if value == 0:
        return "0"
    if unit in ("1/F^2", "dec", ""):
        magnitude = abs(value)
        if 1e-3 <= magnitude < 1e4:
            return f"{value:.4g}"
        return f"{value:.2g}".replace("e+", "e")
    return Quantity(value).render(prec=2).replace(" ", "")


class DecadeFormatter(NumericAxisFormatter):
    """Ticks at whole decades of a log10 axis, labelled as the value (1u, 10u, ...)."""

    def __init__(self, unit: str = ""):
        self.unit = unit

    def get_ticks(self, min_: float, max_: float, max_ticks: int = 8) -> list[float]:
        if not (math.isfinite(min_) and math.isfinite(max_)) or max_ <= min_:
            return []
        first, last = math.ceil(min_ - 1e-9), math.floor(max_ + 1e-9)
        decades = list(range(first, last + 1))
        if len(decades) < 2:  # less than a decade shown: 1-2-5 steps inside it
            ticks = [math.log10(m) + d for d in range(first - 1, last + 1)
                     for m in (1, 2, 5)]
            return [t for t in ticks if min_ <= t <= max_]
        stride = max(1, math.ceil(len(decades) / max(max_ticks, 1)))
        return [float(d) for d in decades if d % stride == 0]

    def get_labels_for_ticks(self, ticks: Sequence[float]) -> list[str]:
        return [_si_label(10.0 ** t, self.unit) for t in ticks]


class SIFormatter(NumericAxisFormatter):
    """1-2-5 ticks of a linear axis, labelled with SI prefixes (20p, 40p ...)."""

    def __init__(self, unit: str = ""):
        self.unit = unit

    def get_ticks(self, min_: float, max_: float, max_ticks: int = 8) -> list[float]:
        if not (math.isfinite(min_) and math.isfinite(max_)) or max_ <= min_:
            return []
        return super().get_ticks(min_, max_, max_ticks)

    def get_labels_for_ticks(self, ticks: Sequence[float]) -> list[str]:
        return [_si_label(t, self.unit) for t in ticks]


class _TimedPlot(PlotWidget):
    """textual-plot's widget, timing its own drawing (the costly part of a redraw): the
    longest render since `draw_s` was last reset."""

    draw_s = 0.0

    def render(self):
        start = time.thread_time()
        try:
            return super().render()
        finally:
            self.draw_s = max(self.draw_s, time.thread_time() - start)


class SweepPlot(Vertical):
    """A title line over a PlotWidget; `show(data)` replaces what is drawn."""

    DEFAULT_CSS = """
    SweepPlot { height: 1fr; }
    SweepPlot > .plot-title { height: auto; max-height: 3; text-style: bold; }
    SweepPlot > PlotWidget { height: 1fr; }
    """

    def __init__(self, *, id: str | None = None, classes: str | None = None):
        super().__init__(id=id, classes=classes)
        self.current: PlotData | None = None
        self._position = ""

    def compose(self) -> ComposeResult:
        yield Static("", classes="plot-title", markup=False)
        plot = _TimedPlot(allow_pan_and_zoom=False)
        plot.can_focus = False
        yield plot

    def on_mount(self) -> None:
        plot = self.query_one(PlotWidget)
        plot.margin_top = 1
        plot.margin_bottom = 1
        plot.margin_left = 8
        if self.current is not None:  # data that came before the children existed
            self.show(self.current, self._position)

    @property
    def draw_s(self) -> float:
        """CPU seconds the drawing of what was last shown took (so far)."""
        try:
            return self.query_one(_TimedPlot).draw_s
        except NoMatches:
            return 0.0

    def show(self, data: PlotData, position: str = "") -> None:
        """Draw `data`; `position` (such as '2/6') goes into the title line. Before the
        widget's children exist (a live feed can be that quick) it is kept for mounting."""
        self.current, self._position = data, position
        try:
            plot = self.query_one(PlotWidget)
            title = self.query_one(".plot-title", Static)
        except NoMatches:
            return
        x_title = f"{data.x_title} [{data.x_unit}]" if data.x_unit else data.x_title
        y_title = f"{data.y_title} [{data.y_unit}]" if data.y_unit else data.y_title
        head = f"[{position}] {data.title}" if position else data.title
        head += f": {data.y_title} vs {x_title}"
        legend = "  ".join(f"{s.marker} {s.label}" for s in data.series
                           if not s.line and len(s.x) and s.label)
        if any(s.line and s.label == "fit" for s in data.series):
            legend += "  line: fit"
        head += f" | {legend}" if legend else ""
        if data.note:
            head += f" | {data.note}"
        elif data.empty:
            head += " | no points yet"
        set_text(title, head)
        plot.draw_s = 0.0
        plot.clear()
        plot.set_x_formatter(DecadeFormatter(data.x_unit) if data.x_log
                             else SIFormatter(data.x_unit))
        plot.set_y_formatter(DecadeFormatter(data.y_unit) if data.y_log
                             else SIFormatter(data.y_unit))
        # textual-plot does not clear the label row: pad over a longer earlier label
        plot.set_ylabel(y_title.ljust(14))
        plot.set_xlabel(x_title)  # drawn only when the bottom margin has room
        # lines first, so the measured markers stay visible on top of the fit
        for series in sorted(data.series, key=lambda s: not s.line):
            finite = np.isfinite(series.x) & np.isfinite(series.y)
            if not finite.any():
                continue
            x, y = series.x[finite], series.y[finite]
            if series.line:
                plot.plot(x, y, line_style="bold", hires_mode=HiResMode.BRAILLE,
                          label=series.label or None)
            else:
                plot.scatter(x, y, marker=series.marker, marker_style="bold",
                             label=series.label or None)
