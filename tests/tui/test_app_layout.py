"""Layout of every screen at 80x24 (plain SSH) and 200x60 (a large terminal), and the
source-output banner on a monochrome terminal."""

from __future__ import annotations

import pytest
from plantext import sweep_plan
from test_app_synth import SyntheticRun
from textual.containers import ScrollableContainer
from textual.widgets import Footer
from textual.widgets._footer import FooterKey

from pnbench.tui.app.application import PnbenchApp
from pnbench.tui.app.folder import read_run_folder
from pnbench.tui.app.widgets.banner import ScreenBar, SourceBanner

SIZES = [(80, 24), (200, 60)]
MODES = ["bench", "plan", "run", "review"]


@pytest.fixture
def app_with_run(tmp_path):
    plan = tmp_path / "plan.toml"
    plan.write_text(sweep_plan("LH-QT16-t1", 10, 11), encoding="utf-8")
    run = SyntheticRun(tmp_path / "runs" / "20260101-000000_synth")
    run.advance(1000)
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=tmp_path / "runs")
    app.last_run_dir = run.folder
    return app


async def settle(pilot, condition, timeout_s: float = 15.0) -> None:
    """Let the app work until `condition()` holds or the time runs out; the caller then
    asserts, so a layout that never settles still fails. A fixed pause was too short on a
    loaded machine."""
    for _ in range(int(timeout_s / 0.1)):
        if condition():
            return
        await pilot.pause(0.1)


def visible_widgets(screen):
    """Widgets on show, leaving out content inside scrolling containers (which may
    be taller than its window by design)."""
    for widget in screen.query("*"):
        scrolled = any(isinstance(a, ScrollableContainer) for a in widget.ancestors)
        if widget.display and widget.region.area and widget.visible and not scrolled:
            yield widget


def screen_bindings(screen) -> set[str]:
    """Keys of the screen's own shown, enabled bindings (not the app's screen keys)."""
    keys = set()
    for key, active in screen.active_bindings.items():
        if active.node is screen and active.binding.show and active.enabled:
            keys.add(key)
    return keys


@pytest.mark.parametrize("size", SIZES)
async def test_every_screen_fits_with_banner_on_top_and_footer_at_the_bottom(
        app_with_run, size):
    width, height = size
    app = app_with_run
    async with app.run_test(size=size) as pilot:
        for mode in MODES:
            app.switch_mode(mode)
            await pilot.pause(0.3)
            screen = app.screen
            for _ in range(100):  # the footer is rebuilt a moment after the switch
                if screen.query(FooterKey):
                    break
                await pilot.pause(0.05)
            assert screen.query_one(SourceBanner).region.y == 0, mode
            assert screen.query_one(SourceBanner).region.width == width
            assert screen.query_one(ScreenBar).region.y == 1, mode
            footer = screen.query_one(Footer)
            assert footer.region.y == height - 1, mode
            for widget in visible_widgets(screen):
                r = widget.region
                assert r.x >= 0 and r.y >= 0, (mode, widget)
                assert r.right <= width and r.bottom <= height, (mode, widget, r)
            # every action of the screen is in the footer, within the screen
            shown = {key.key: key for key in screen.query(FooterKey)}
            for key in screen_bindings(screen):
                assert key in shown, (mode, key)
                assert shown[key].region.right <= width, (mode, key)
            # the other screens' keys are always on the screen bar
            bar = str(screen.query_one("#bar-keys").render())
            for other in MODES:
                if other != mode:
                    assert other in bar, (mode, other)


@pytest.mark.parametrize("size", SIZES)
async def test_run_screen_gives_the_plot_room_and_shows_panels_as_space_allows(
        app_with_run, size):
    width, height = size
    app = app_with_run
    async with app.run_test(size=size) as pilot:
        app.state, _ = read_run_folder(app.last_run_dir)  # a run with every parameter
        app.switch_mode("run")
        screen = app.screen
        panels = [screen.query_one(f"#{name}") for name in ("params", "qpoint", "log")]

        def shown_panels():
            return [p for p in panels if p.display and p.region.height > 0]

        def laid_out():  # the parameter table fills once the run's model has been read
            return all(p.region.height >= 3 for p in shown_panels())

        await settle(pilot, laid_out)
        plot = screen.query_one("#run-plot").region
        assert plot.width >= width // 2 and plot.height >= height // 2
        shown = shown_panels()
        if size == (80, 24):
            assert len(shown) == 1
            await pilot.press("p")
            await pilot.pause(0.1)
            assert screen.query_one("#qpoint").display
            assert not screen.query_one("#params").display
        else:
            assert len(shown) == 3 and all(p.region.height >= 3 for p in shown), [
                p.region for p in shown]
            assert screen.query_one("#progress-steps").display


async def test_monochrome_terminal_draws_and_the_source_on_banner_reads_without_colour(
        tmp_path, monkeypatch):
    """On a monochrome terminal (NO_COLOR, see no-color.org) every screen draws (plot
    included), and the source-on state is still plain: words, and reverse video over
    the whole line."""
    monkeypatch.setenv("NO_COLOR", "1")  # Textual reads it when the app is made
    run = SyntheticRun(tmp_path / "runs" / "20260101-000000_synth")
    run.advance(1000)
    app = PnbenchApp(watch_dir=run.folder)
    assert app.no_color
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.6)
        assert app.state.point_count == run.total
        app.state.outputs["smu"] = True  # as an output event would set it
        await pilot.pause(0.7)  # the next poll of the folder
        banner = app.screen.query_one(SourceBanner)
        assert "SOURCE OUTPUT ON" in str(banner.render())
        assert banner.rich_style.reverse and banner.rich_style.bold
        assert banner.region.width == 80
        app.save_screenshot(str(tmp_path / "mono.svg"))  # renders every line
        app.state.outputs["smu"] = False
        await pilot.pause(0.7)
        assert not banner.rich_style.reverse
        assert "outputs off" in str(banner.render())
