"""`pnbench watch`: follow a run folder that another process is writing, read-only."""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

from test_app_synth import STEPS

from pnbench.tui.app.application import PnbenchApp
from pnbench.tui.cli import main

WRITER = Path(__file__).with_name("test_app_synth.py")
TOTAL = sum(len(items) for _, _, items in STEPS)


def fingerprint(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir())}


async def test_watch_follows_a_folder_another_process_writes_and_changes_nothing(tmp_path):
    folder = tmp_path / "run"
    folder.mkdir()  # the watch starts first and waits for the files
    app = PnbenchApp(watch_dir=folder)
    writer = None
    try:
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause(0.2)
            writer = subprocess.Popen([sys.executable, str(WRITER), str(folder), "0.08"],
                                      stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
            seen = []
            for _ in range(1200):
                await pilot.pause(0.05)
                seen.append(app.state.point_count)
                if app.state.finished:
                    break
            await pilot.pause(0.6)  # one more poll after the last line
            assert app.state.status == "completed"
            assert app.state.point_count == TOTAL
            assert all(p.done == p.planned for p in app.state.steps.values())
            assert len(set(seen)) > 3  # it grew while we watched, not all at once
            assert {"IS", "N", "CJO", "TT"} <= set(app.state.parameters)
            assert any(e.tag == "COMPL" for e in app.state.log)
            assert not app.source_on  # the last output event switched it off
            # watching offers no control over the acquisition
            keys = {b.binding.key for b in app.screen.active_bindings.values()
                    if b.enabled and b.binding.show}
            assert not keys & {"s", "space", "x"}
            before = fingerprint(folder)
            await pilot.press("v", "p", "b", "escape")
            await pilot.press("ctrl+q")  # leaves at once, nothing to confirm
            await pilot.pause(0.1)
        assert fingerprint(folder) == before
    finally:
        if writer is not None:
            writer.wait(30)
    assert writer.returncode == 0, writer.stderr.read().decode()


async def test_watch_waits_for_a_folder_that_has_only_just_been_created(tmp_path):
    folder = tmp_path / "run"
    folder.mkdir()
    (folder / "points.csv").write_text("# device = x\n", encoding="utf-8")
    app = PnbenchApp(watch_dir=folder)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause(0.2)
        assert app.state.point_count == 0
        with open(folder / "points.csv", "a", encoding="utf-8") as f:
            f.write("step,index,kind,time_s,voltage_V,current_A,frequency_Hz,capacitance_F,"
                    "conductance_S,compliance\nfwd,0,iv,0.1,0.5,1e-6,,,,0\n")
        for _ in range(40):
            await pilot.pause(0.05)
            if app.state.point_count:
                break
        assert app.state.point_count == 1


def test_watch_of_a_missing_folder_is_bad_input(tmp_path, capsys):
    assert main(["watch", str(tmp_path / "nowhere")]) == 2
    assert "nowhere" in capsys.readouterr().err
    (tmp_path / "empty").mkdir()
    assert main(["watch", str(tmp_path / "empty")]) == 2
    assert "holds no run.json" in capsys.readouterr().err
