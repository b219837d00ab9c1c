"""The app driving a real run on the simulated bench (sweeps.launch over loopback
sockets), through its keys: start, see points and parameters, pause, abort, quit."""

from __future__ import annotations

import json
from pathlib import Path

from plantext import sweep_plan

from pnbench.tui.app.application import PnbenchApp, exit_code
from pnbench.tui.app.screens.plan import first_line_number

#: Longest wait for something the run should do (generous: the machine is shared).
PATIENCE_S = 60.0


def write_plan(folder: Path, points: int, reverse_points: int = 11) -> Path:
    path = folder / "plan.toml"
    path.write_text(sweep_plan("LH-QT16-t1", points, reverse_points),
                    encoding="utf-8")
    return path


async def wait_for(pilot, condition, what: str, patience_s: float = PATIENCE_S) -> None:
    """Let the app run until `condition()` holds (fails naming `what` otherwise)."""
    steps = int(patience_s / 0.05)
    for _ in range(steps):
        if condition():
            return
        await pilot.pause(0.05)
    raise AssertionError(f"gave up waiting for {what}")


def run_doc(app: PnbenchApp) -> dict:
    return json.loads((app.last_run_dir / "run.json").read_text(encoding="utf-8"))


async def test_start_see_points_and_parameters_pause_then_abort_leaves_outputs_off(
        tmp_path):
    # long enough that the abort comes before the end, whenever the first fit arrives
    plan = write_plan(tmp_path, points=300, reverse_points=600)
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0.3", out_dir=tmp_path / "runs")
    async with app.run_test(size=(80, 24)) as pilot:
        assert app.current_mode == "run" and app.plan is not None
        await pilot.press("s")  # asks first: a stray key must not switch a source on
        await wait_for(pilot, lambda: app.screen.__class__.__name__ == "ConfirmDialog",
                       "the start question")
        assert app.live is None
        await pilot.press("s")  # the same key again starts
        await wait_for(pilot, lambda: len(app.state.iv) >= 10, "the first points")
        await wait_for(pilot, lambda: app.source_on, "the source-on banner")
        assert "SOURCE OUTPUT ON" in app.output_text
        await pilot.press("space")
        await wait_for(pilot, lambda: app.state.status == "paused", "the pause")
        held = app.state.point_count
        await pilot.pause(0.5)
        assert app.state.point_count <= held + 1  # one reading may have been in flight
        await pilot.press("space")
        await wait_for(pilot, lambda: app.state.status == "running", "the resume")
        await wait_for(pilot, lambda: "IS" in app.state.parameters, "a fit estimate")
        await pilot.press("x")  # asks first ...
        await wait_for(pilot, lambda: app.screen.__class__.__name__ == "ConfirmDialog",
                       "the abort question")
        await pilot.press("y")  # ... then aborts
        await wait_for(pilot, lambda: app.state.finished and not app.live.running,
                       "the end of the run")
        await pilot.pause(0.2)
        assert app.state.status == "aborted"
        assert app.live.outputs() == {"smu_output": False, "lcr_bias": False}
        assert not app.source_on and "outputs off" in app.output_text
        doc = run_doc(app)
        assert doc["status"] == "aborted" and doc["outputs_off_confirmed"] is True
        assert app.state.point_count < 900  # it did stop early
        # the points the screen showed are the points on disk
        rows = [line for line in (app.last_run_dir / "points.csv").read_text().splitlines()
                if line and not line.startswith(("#", "step,"))]
        assert len(rows) == app.state.point_count


async def test_quitting_during_a_run_asks_then_aborts_safely(tmp_path):
    plan = write_plan(tmp_path, points=400)
    app = PnbenchApp(plan, bench="lh-qt16@pnsim", out_dir=tmp_path / "runs",
                     autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: len(app.state.iv) >= 3, "the first points")
        await pilot.press("ctrl+q")
        await wait_for(pilot, lambda: app.screen.__class__.__name__ == "ConfirmDialog",
                       "the quit question")
        text = " ".join(str(w.render()) for w in app.screen.query("Static"))
        assert "headless" in text and "pnbench watch" in text
        await pilot.press("n")  # stay: the run goes on
        await pilot.pause(0.3)
        assert app.live.running
        await pilot.press("ctrl+q")
        await wait_for(pilot, lambda: app.screen.__class__.__name__ == "ConfirmDialog",
                       "the quit question again")
        await pilot.press("y")
        await wait_for(pilot, lambda: not app.is_running, "the app to end")
    assert not app.live.running
    assert app.live.outputs() == {"smu_output": False, "lcr_bias": False}
    doc = run_doc(app)
    assert doc["status"] == "aborted" and doc["outputs_off_confirmed"] is True
    assert exit_code(app) == 4  # stopped by the operator, as the README's exit codes say


async def test_a_plan_error_is_shown_with_the_engines_message_and_nothing_starts(tmp_path):
    plan = tmp_path / "bad.toml"
    plan.write_text(sweep_plan("LH-QT16-t1", 0, 11), encoding="utf-8")
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=tmp_path / "runs",
                     autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        assert app.current_mode == "plan" and app.live is None
        messages = str(app.screen.query_one("#plan-messages").render())
        assert "CHECK FAILED" in messages and "line" in messages and "points" in messages
        editor = app.screen.query_one("TextArea")
        await pilot.press("ctrl+t")  # check again: the cursor goes to the problem
        await pilot.pause(0.1)
        named = first_line_number(app.plan_error)
        assert named is not None and editor.cursor_location[0] == named - 1
        assert "points" in editor.document.get_line(named - 1)
        editor.load_text(sweep_plan("LH-QT16-t1", 5, 11))
        await pilot.press("ctrl+t")
        await pilot.pause(0.1)
        assert app.plan is not None
        messages = str(app.screen.query_one("#plan-messages").render())
        assert "CHECK PASSED" in messages and "estimated" in messages
        await pilot.press("ctrl+s")  # save as: asks where
        await wait_for(pilot, lambda: app.screen.__class__.__name__ == "PathDialog",
                       "the save dialog")
        app.screen.query_one("Input").value = str(tmp_path / "fixed.toml")
        await pilot.press("enter")
        await wait_for(pilot, (tmp_path / "fixed.toml").exists, "the saved plan")
        assert app.plan_path == tmp_path / "fixed.toml"
    assert "points = 5" in (tmp_path / "fixed.toml").read_text()
    assert not (tmp_path / "runs").exists()  # checking and saving never start anything


async def test_a_finished_run_reviews_refits_and_exports_a_card_and_report(tmp_path):
    plan = write_plan(tmp_path, points=25)
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=tmp_path / "runs",
                     autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: app.state.finished and not app.live.running,
                       "the end of the run")
        await pilot.press("f5")
        await wait_for(pilot, lambda: getattr(app.screen, "review", None) is not None,
                       "the review of the run")
        review = app.screen.review
        assert len(review.points) == app.state.point_count
        await pilot.press("t")  # leave out the step under the cursor (forward)
        assert not review.used[0]
        await pilot.press("a")  # take every point again
        assert review.used.all()
        await pilot.press("r")
        await wait_for(pilot, lambda: review.refit_doc is not None
                       or "failed" in app.screen._busy, "the refit")
        assert review.refit_doc is not None, app.screen._busy
        # with every point in use the refit finds what the run itself found
        run_model = json.loads((app.last_run_dir / "model.json").read_text())
        assert set(review.refit_doc["parameters"]) == set(run_model["parameters"])
        assert "IS" in review.refit_doc["parameters"]
        await pilot.press("c")
        await pilot.pause(0.1)
        target = tmp_path / "card.lib"
        dialog_input = app.screen.query_one("Input")
        dialog_input.value = str(target)
        await pilot.press("enter")
        await wait_for(pilot, target.exists, "the card file")
        await pilot.press("e")
        report = app.last_run_dir / "report.html"
        await wait_for(pilot, lambda: report.exists() or "failed" in app.screen._busy,
                       "the report")
        assert report.exists(), app.screen._busy
    assert exit_code(app) == 0
    card = target.read_text()
    assert ".model LH-QT16-t1 D(" in card and "IS=" in card
    assert (tmp_path / "card.json").exists()  # the refit's model.json beside it


async def test_bench_screen_identifies_the_simulated_instruments_and_lists_resources(
        tmp_path):
    plan = write_plan(tmp_path, points=5)
    app = PnbenchApp(plan, bench="lh-qt16@pnsim:time_scale=0", out_dir=tmp_path / "runs")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("f2")
        await pilot.pause(0.2)
        text = str(app.screen.query_one("#bench-instruments").render())
        assert "SMU" in text and "simulated" in text and "-- (i asks it)" in text
        await pilot.press("i")
        await wait_for(pilot, lambda: app.screen._identified, "the identities")
        await pilot.pause(0.6)
        text = str(app.screen.query_one("#bench-instruments").render())
        assert "[answered]" in text and "simulated SMU" in text
        assert "output    ON" not in text
        await pilot.press("l")
        await wait_for(pilot, lambda: app.screen.scanned is not None, "the resource list")
    assert app.live is None  # identifying never starts a sweep


async def test_an_instrument_that_is_not_there_is_reported_and_the_app_stays_up(tmp_path):
    plan = tmp_path / "plan.toml"
    text = sweep_plan("LH-QT16-t1", 5, 11).replace(
        "[limits]", '[instruments.smu]\nrole = "smu"\n'
        'resource = "TCPIP0::127.0.0.1::9::SOCKET"\ntimeout = "0.5 s"\n\n[limits]')
    plan.write_text(text, encoding="utf-8")
    app = PnbenchApp(plan, out_dir=tmp_path / "runs", autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await wait_for(pilot, lambda: app.state.status == "failed", "the failure")
        await wait_for(pilot, lambda: not app.live.running, "the run thread to end")
        assert "127.0.0.1::9" in app.state.reason  # the message names the instrument
        assert not app.source_on
        await pilot.press("f2")  # the app is still there to be used
        await pilot.pause(0.2)
        assert app.current_mode == "bench"
    assert exit_code(app) == 3  # instrument or connection error
