"""`pnbench run over_temperature.toml --simulate DEVICE --headless --time-scale 0`: the
issue's command, end to end, with the report's Arrhenius figure and headless lines that
say at which temperature each step runs."""

from __future__ import annotations

import json
from importlib import resources
from pathlib import Path

from pnbench.tui import cli

PLAN = Path(str(resources.files("pnbench.sim_configs") / "plans" / "over_temperature.toml"))


def test_the_command_of_the_issue(tmp_path, capsys):
    code = cli.main(["run", str(PLAN), "--simulate", "lh-zl560", "--headless",
                     "--time-scale", "0", "--out", str(tmp_path)])
    out = capsys.readouterr().out
    assert code == 0, out
    run_dir = next(tmp_path.glob("*"))
    model = json.loads((run_dir / "model.json").read_text())
    assert {"EG", "XTI"} <= set(model["parameters"])
    assert "EG=" in next(run_dir.glob("*.lib")).read_text()
    page = (run_dir / "report.html").read_text(encoding="utf-8")
    assert 'id="fig-arrhenius"' in page and (run_dir / "figures" / "arrhenius.png").is_file()
    assert 'id="fig-iv_over_temperature"' in page
    # the forward I-V figure shows the set point at TNOM against the model there
    assert "DUT over temperature at 298.1" in (run_dir / "figures" / "iv_forward.svg").read_text()
    assert "step forward@248.15K (iv_forward): 37 points at 248.15 K (-25 degC)" in out
    assert "stage: to 398.15 K (125 degC) at 20 K/min" in out
    assert "stage: stable at 398.15 K (125 degC)" in out
    # pnbench fit on the run folder fits it per set point, as the run did
    assert cli.main(["fit", str(run_dir), "--json"]) == 0
    refit = json.loads(capsys.readouterr().out)
    eg = model["parameters"]["EG"]
    assert abs(refit["parameters"]["EG"]["value"] - eg["value"]) <= eg["sigma"]
    assert len(refit["temperatures"]) == 4
