"""The bundled demo recovers its simulated part: the fixture's stray capacitance is the
bench's, and every fitted parameter lands within three standard errors of the truth
written in sim_configs/lh-vc510.toml (the simulated bench draws its readings from the
project's exact model with the noise that file states). The live fits the run prints at
each step's end model the same network as its final fit, so the live TT lands within two
standard errors of the truth too."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from pnbench.modeling import junction
from pnbench.modeling.materials import material
from pnbench.sweeps import record
from pnbench.tui import cli

CONFIG = Path(__file__).resolve().parents[2] / "sim_configs" / "lh-vc510.toml"


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    assert cli.main(["demo", "--headless", "--time-scale", "0", "--out", str(out)]) == 0
    (folder,) = [p for p in out.iterdir() if p.is_dir()]
    return folder


def test_demo_ends_with_every_parameter_within_three_sigma(demo_folder, capsys):
    capsys.readouterr()
    folder = demo_folder
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
    assert "fixture_resistance_ohm" not in doc  # the demo's fixture has no series R
    assert "RFIX (fixture series resistance) not fitted" in doc["fits"]["cv"]["message"]
    doping = doc["doping"]
    assert "artefact" not in doping  # the corrected Vbi is no longer above the band gap
    vbi = truth["VJ"] + junction.thermal_voltage(300.15)
    assert abs(doping["built_in_voltage_V"] - vbi) < 3 * doping["built_in_sigma_V"]
    # the abrupt junction's doping, N = 2*VJ*CJO**2/(q*eps*A**2) (docs/physics.md §7)
    eps = material("Si").permittivity_F_per_m
    n = 2 * truth["VJ"] * truth["CJO"] ** 2 / (constants.e * eps * doping["area_m2"] ** 2)
    assert abs(doping["doping_per_m3"] - n) < 3 * doping["doping_sigma_per_m3"]


def test_the_live_tt_at_the_admittance_step_end_is_within_two_sigma(demo_folder):
    """The admittance step's last fit event (what headless prints at the step's end)
    holds the I-V and C-V steps' values, models the meter's test level and the
    fixture, and its TT is within two of its standard errors of the part's."""
    truth = tomllib.loads(CONFIG.read_text(encoding="utf-8"))["diode"]["TT"]
    events = [json.loads(line) for line in
              (demo_folder / "events.jsonl").read_text(encoding="utf-8").splitlines()]
    (last,) = [e for e in events if e["kind"] == "fit" and e["step"] == "admittance"
               and e.get("final")]
    tt = last["parameters"]["TT"]
    assert abs(tt["value"] - truth) < 2 * tt["sigma"], (tt, last["message"])
    # the same network on nearly the same points: the live value agrees with the run's
    # final one to within two of the final's (smaller) standard errors
    final = json.loads((demo_folder / "model.json").read_text(encoding="utf-8"))
    final_tt = final["parameters"]["TT"]
    assert abs(tt["value"] - final_tt["value"]) < 2 * final_tt["sigma"], (tt, final_tt)
    cv = [e for e in events if e["kind"] == "fit" and e["step"] == "cv" and e.get("final")]
    assert "CFIX" in cv[-1]["parameters"], cv[-1]["message"]  # the fixture, found live


def test_review_refit_and_fit_run_dir_give_the_runs_own_model(demo_folder, capsys):
    """One folder, three fits: the run's model.json (fitted at its end from memory),
    `pnbench fit RUN_DIR` and the app's review refit (both read the folder back through
    the same inputs) agree on every parameter, sigma and fixture figure to 1e-9."""
    from pnbench.tui.app.review import load_review, refit

    run = json.loads((demo_folder / "model.json").read_text(encoding="utf-8"))
    capsys.readouterr()
    assert cli.main(["fit", str(demo_folder), "--json"]) == 0
    fitted = json.loads(capsys.readouterr().out)
    review = load_review(demo_folder)
    refit(review)
    for doc in (fitted, review.refit_doc):
        assert set(doc["parameters"]) == set(run["parameters"])
        for name, entry in run["parameters"].items():
            for key in ("value", "sigma"):
                if entry[key] is None:
                    assert doc["parameters"][name][key] is None
                else:
                    assert math.isclose(doc["parameters"][name][key], entry[key],
                                        rel_tol=1e-9), (name, key)
        for key in ("fixture_capacitance_F", "doping"):
            assert doc[key].keys() == run[key].keys()
        assert math.isclose(doc["fixture_capacitance_F"]["value"],
                            run["fixture_capacitance_F"]["value"], rel_tol=1e-9)
        assert doc["device"] == run["device"]


def test_a_fixture_series_resistance_on_the_simulated_bench_is_the_benchs(demo_folder,
                                                                          tmp_path, capsys):
    """The demo's part with 0.5 ohm of fixture leads (the simulated meter puts them in
    series outside the stray capacitance): forward C readings drop by several percent;
    the run's fit finds RFIX within two standard errors, states it as the bench's, and
    RS and TT stay within two standard errors of the part's; the live admittance fit
    at the step's end finds TT within two of its own."""
    text = CONFIG.read_text(encoding="utf-8").replace(
        "fixture_capacitance_F = 3.5e-13",
        "fixture_capacitance_F = 3.5e-13\nfixture_resistance_ohm = 0.5")
    device = tmp_path / "leads.toml"
    device.write_text(text, encoding="utf-8")
    out = tmp_path / "runs"
    assert cli.main(["demo", "--headless", "--time-scale", "0", "--simulate", str(device),
                     "--out", str(out)]) == 0
    capsys.readouterr()
    (folder,) = [p for p in out.iterdir() if p.is_dir()]
    with_leads, without = (record.read_columns(f) for f in (folder, demo_folder))
    top = with_leads.step_mask("admittance") & (with_leads.voltage_V > 0.7)
    drop = with_leads.capacitance_F[top] / without.capacitance_F[top]  # same noise draws
    assert np.median(drop) < 0.97
    doc = json.loads((folder / "model.json").read_text(encoding="utf-8"))
    truth = tomllib.loads(text)["diode"]
    series = doc["fixture_resistance_ohm"]
    assert abs(series["value"] - 0.5) < 2 * series["sigma"], series
    assert "RFIX" not in doc["parameters"]
    for name in ("RS", "TT"):
        par = doc["parameters"][name]
        assert abs(par["value"] - truth[name]) < 2 * par["sigma"], (name, par)
    events = [json.loads(line) for line in
              (folder / "events.jsonl").read_text(encoding="utf-8").splitlines()]
    (last,) = [e for e in events if e["kind"] == "fit" and e["step"] == "admittance"
               and e.get("final")]
    tt = last["parameters"]["TT"]
    assert abs(tt["value"] - truth["TT"]) < 2 * tt["sigma"], (tt, last["message"])
    report = (folder / "report.html").read_text(encoding="utf-8")
    assert "Fixture series resistance (the bench" in report
    from pnbench.tui.app.review import load_review, review_state

    shown = review_state(load_review(folder)).parameters  # the review shows the bench's
    assert shown["RFIX"].value == series["value"] and "CFIX" in shown
    assert cli.main(["fit", str(folder)]) == 0
    assert "fixture series resistance (the bench's leads, not RS" in capsys.readouterr().out


def test_a_run_folder_without_its_plan_is_still_fitted_and_says_so(demo_folder, tmp_path,
                                                                   capsys):
    """Without plan.toml the folder's steps come from run.json: `pnbench fit RUN_DIR`
    still fits it, and says what is then unknown (the test level, the breakdown
    current)."""
    import shutil

    copy = tmp_path / demo_folder.name
    shutil.copytree(demo_folder, copy)
    record.plan_path(copy).unlink()
    capsys.readouterr()
    assert cli.main(["fit", str(copy)]) == 0
    out = capsys.readouterr().out
    assert "plan does not load" in out and "test level unknown" in out
    assert "TT" in out and "CJO" in out


def test_the_report_and_terminal_set_the_fit_against_the_simulated_part(demo_folder,
                                                                       capsys):
    """The rehearsal check (sweeps/rehearsal.py) gives the same z as this module's own
    truth for every parameter, the report has its section, and headless and
    `pnbench fit RUN_DIR` print it."""
    import io

    from pnbench.sweeps.rehearsal import from_folder
    from pnbench.tui.headless import print_part_check

    doc = json.loads((demo_folder / "model.json").read_text(encoding="utf-8"))
    truth = dict(tomllib.loads(CONFIG.read_text(encoding="utf-8"))["diode"])
    a = truth["N"] * junction.thermal_voltage(300.15)
    truth["BV"] = truth["BV"] + a * math.log(doc["parameters"]["IBV"]["value"] / truth["IBV"])
    check = from_folder(demo_folder)
    rows = {r.name: r for r in check.rows}
    for name in ("IS", "N", "RS", "CJO", "VJ", "M", "TT", "BV"):
        par = doc["parameters"][name]
        assert rows[name].z == pytest.approx((par["value"] - truth[name]) / par["sigma"],
                                             rel=1e-9, abs=1e-9), name
    assert {"CFIX", "doping", "Vbi"} <= set(rows)
    page = (demo_folder / "report.html").read_text(encoding="utf-8")
    assert 'id="rehearsal"' in page and "LH-VC510" in page
    out = io.StringIO()
    print_part_check(demo_folder, out)
    assert out.getvalue().startswith("against the simulated part LH-VC510: ")
    assert f"of {len(check.rows)} values within 1 sigma" in out.getvalue()
    capsys.readouterr()
    assert cli.main(["fit", str(demo_folder)]) == 0
    assert out.getvalue().strip() in capsys.readouterr().out
