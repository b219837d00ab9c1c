"""The plot widget takes data before its children exist (a live feed can be that quick)."""

from __future__ import annotations

from textual.app import App
from textual.widgets import Static

from pnbench.tui.app.plots import PlotData
from pnbench.tui.app.widgets.plot import SweepPlot


async def test_data_shown_before_mounting_is_drawn_when_mounted():
    plot = SweepPlot(id="early")
    data = PlotData(view="iv", title="forward I-V", x_title="V", y_title="I")
    plot.show(data, "1/6")  # not mounted: no children to draw into yet

    class Host(App):
        def compose(self):
            yield plot

    app = Host()
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        title = str(app.query_one("#early .plot-title", Static).render())
        assert title.startswith("[1/6] forward I-V") and "no points yet" in title
