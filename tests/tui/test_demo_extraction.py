"""The bundled demo recovers its simulated part: the fixture's stray capacitance is the
bench's, and every fitted parameter lands within three standard errors of the truth
written in sim_configs/lh-vc510.toml (the simulated bench draws its readings from the
project's exact model with the noise that file states)."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

from pnbench.modeling import junction
from pnbench.tui import cli

CONFIG = Path(__file__).resolve().parents[2] / "sim_configs" / "lh-vc510.toml"


def test_demo_ends_with_every_parameter_within_three_sigma(tmp_path, capsys):
    assert cli.main(["demo", "--headless", "--time-scale", "0", "--out",
                     str(tmp_path)]) == 0
    capsys.readouterr()
    (folder,) = [p for p in tmp_path.iterdir() if p.is_dir()]
    doc = json.loads((folder / "model.json").read_text(encoding="utf-8"))
    cfg = tomllib.loads(CONFIG.read_text(encoding="utf-8"))
    truth = dict(cfg["diode"])
    par = doc["parameters"]
    # BV is stated at the plan's IBV: the junction voltage where the breakdown term of
    # the exact model, IBV_device*exp((|Vd| - BV)/(N*Vt)), reaches it
    a = truth["N"] * junction.thermal_voltage(300.15)
    truth["BV"] = truth["BV"] + a * math.log(par["IBV"]["value"] / truth["IBV"])
    for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"):
        z = (par[name]["value"] - truth[name]) / par[name]["sigma"]
        assert abs(z) < 3.0, (name, z)
    fixture = doc["fixture_capacitance_F"]
    z = (fixture["value"] - cfg["lcr"]["fixture_capacitance_F"]) / fixture["sigma"]
    assert abs(z) < 3.0
    doping = doc["doping"]
    assert "artefact" not in doping  # the corrected Vbi is no longer above the band gap
    vbi = truth["VJ"] + junction.thermal_voltage(300.15)
    assert abs(doping["built_in_voltage_V"] - vbi) < 3 * doping["built_in_sigma_V"]
