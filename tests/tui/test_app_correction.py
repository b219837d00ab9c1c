"""The app asks the operator for each fixture state of a plan's LCR correction (80x24):
confirming every question runs the correction and the sweep; answering no refuses the
run with every output off, and the run folder says why."""

from __future__ import annotations

import json
from pathlib import Path

from plantext import cv, forward, plan_text, table
from test_app_run import wait_for

from pnbench.tui.app.application import PnbenchApp

CORRECTION = {"corrections": ["open", "short"]}


def _plan(folder: Path) -> Path:
    path = folder / "plan.toml"
    path.write_text(plan_text(forward(points=5), cv(bias_points=3), device="LH-VC510")
                    + "\n" + table("lcr_correction", CORRECTION), encoding="utf-8")
    return path


def _dialog_text(app) -> str:
    return " ".join(str(w.render()) for w in app.screen.query("Static"))


async def _question(pilot, app, words: str) -> None:
    await wait_for(pilot, lambda: app.screen.__class__.__name__ == "ConfirmDialog"
                   and words in _dialog_text(app), f"the question on {words!r}")


def _run_doc(app) -> dict:
    return json.loads((app.last_run_dir / "run.json").read_text(encoding="utf-8"))


async def test_confirming_each_fixture_state_runs_the_correction_and_the_sweep(tmp_path):
    app = PnbenchApp(_plan(tmp_path), bench="lh-vc510@pnsim:time_scale=0",
                     out_dir=tmp_path / "runs", autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        for words in ("Open correction", "Short correction", "put the device back"):
            await _question(pilot, app, words)
            assert "No stops the run" in _dialog_text(app)
            await pilot.press("y")
        await wait_for(pilot, lambda: app.state.finished and not app.live.running,
                       "the end of the run")
        doc = _run_doc(app)
    assert doc["status"] == "completed"
    assert doc["lcr_correction"]["done"] and len(doc["lcr_correction"]["runs"]) == 1
    assert app.live.outputs() == {"smu_output": False, "lcr_bias": False}


async def test_answering_no_refuses_the_run_with_outputs_off_and_says_why(tmp_path):
    app = PnbenchApp(_plan(tmp_path), bench="lh-vc510@pnsim:time_scale=0",
                     out_dir=tmp_path / "runs", autostart=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await _question(pilot, app, "Open correction")
        await pilot.press("n")
        await wait_for(pilot, lambda: app.state.finished and not app.live.running,
                       "the end of the run")
        doc = _run_doc(app)
    assert doc["status"] == "aborted" and doc["outputs_off_confirmed"] is True
    assert "did not confirm" in doc["reason"] and "open correction" in doc["reason"]
    assert "lcr_correction" not in doc
    assert app.live.outputs() == {"smu_output": False, "lcr_bias": False}
