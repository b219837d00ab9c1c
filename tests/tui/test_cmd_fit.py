"""`pnbench fit` end to end: a table or model.json from files and run folders, exit 2 on
bad input with a message naming the file and the problem (no traceback).

Reference data: ngspice level-1 diode in batch mode (tests/spicehelp.py).
"""

from __future__ import annotations

import json
import re

import fitdevices as fd
import numpy as np
import pytest
from plantext import limits, plan_text, reverse

from pnbench.sweeps import store
from pnbench.tui import cli


@pytest.fixture(scope="module")
def sig(ngspice):
    return fd.make(ngspice, "sig")


def _iv_file(path, v, i, header=""):
    lines = [header, "voltage_V,current_A"] + [f"{a!r},{b!r}" for a, b in
                                               zip(v.tolist(), i.tolist(), strict=True)]
    path.write_text("\n".join(x for x in lines if x) + "\n", encoding="utf-8")
    return path


def _cv_file(path, d):
    lines = ["voltage_V,frequency_Hz,capacitance_F,conductance_S"] + [
        f"{a!r},{b!r},{c!r},{g!r}" for a, b, c, g in
        zip(d.cv_v.tolist(), d.cv_f.tolist(), d.cv_c.tolist(), d.cv_g.tolist(), strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_table_from_an_iv_file(tmp_path, sig, capsys):
    v = np.concatenate([sig.reverse_v, sig.forward_v])
    i = np.concatenate([sig.reverse_i, sig.forward_i])
    path = _iv_file(tmp_path / "sig.csv", v, i, "# temperature_K = 300.15")
    assert cli.main(["fit", str(path), "--ibv", "100u"]) == 0
    out = capsys.readouterr().out
    for name in ("IS", "N", "RS", "BV", "IBV"):
        assert f"  {name} " in out
    # the values (their digits follow their sigma): IS 2.5 fA, N 1.06, BV near 72 V
    assert re.search(r"  IS +2\.[45]\d* fA", out) and re.search(r"  N +1\.0[56]", out)
    assert re.search(r"  BV +7[12]\.\d* V", out)
    assert "iv_forward:" in out and "iv_reverse:" in out


def test_json_from_a_cv_file_yields_tt(tmp_path, sig, capsys):
    path = _cv_file(tmp_path / "sig-cv.csv", sig)
    assert cli.main(["fit", str(path), "--json", "--temperature", "300.15 K"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["temperature_K"] == 300.15
    tt = doc["parameters"]["TT"]
    assert abs(tt["value"] / sig.params.TT - 1) < 0.05 and tt["unit"] == "s"
    assert doc["fits"]["admittance"]["success"]


def test_kind_restricts_a_run_folder(tmp_path, sig, capsys):
    folder = store.RunFolder.create(tmp_path, "# plan\n", {"device": {"name": "sig-a1",
                                                                      "temperature_K": 300.15}},
                                    {})
    for k, (v, i) in enumerate(zip(sig.forward_v.tolist(), sig.forward_i.tolist(),
                                   strict=True)):
        folder.append_point(store.Point("fwd", k, "iv", float(k), voltage_V=v, current_A=i))
    for k, (v, f, c, g) in enumerate(zip(sig.cv_v.tolist(), sig.cv_f.tolist(),
                                         sig.cv_c.tolist(), sig.cv_g.tolist(), strict=True)):
        folder.append_point(store.Point("cv", k, "cv", 100.0 + k, voltage_V=v,
                                        frequency_Hz=f, capacitance_F=c, conductance_S=g))
    folder.close()
    assert cli.main(["fit", str(folder.path), "--json"]) == 0
    both = json.loads(capsys.readouterr().out)["parameters"]
    assert {"IS", "N", "RS", "CJO", "VJ", "M", "TT"} <= set(both)
    assert cli.main(["fit", str(folder.path), "--kind", "cv", "--json"]) == 0
    cv = json.loads(capsys.readouterr().out)
    assert set(cv["fits"]) == {"cv", "admittance"}


@pytest.mark.parametrize("content, problem", [
    ("voltage_V,current_A\n0.1,1e-9\n0.2,oops\n", "line 3, column current_A"),
    ("", "empty"),
    ("voltage_V,current_A\n0.6,1e-3\n", "a single IV point"),
    ("volts,amps\n0.1,1e-9\n0.2,2e-9\n", "missing columns"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2,NaN\n", "not a finite number"),
    ("voltage_V,current_A,compliance\n0.1,0.1,1\n0.2,0.1,1\n", "every point is flagged"),
    ("voltage_V,current_A\n0.1,1e-9\n0.2,2e-9\n0.3,3e-9\n", "nothing could be fitted"),
])
def test_bad_files_exit_2_naming_the_file(tmp_path, capsys, content, problem):
    path = tmp_path / "bad.csv"
    path.write_text(content, encoding="utf-8")
    assert cli.main(["fit", str(path)]) == 2
    err = capsys.readouterr().err
    assert str(path) in err and problem in err and "Traceback" not in err


def test_random_bytes_and_bad_options_exit_2(tmp_path, capsys):
    path = tmp_path / "noise.bin"
    path.write_bytes(np.random.default_rng(1).integers(0, 256, 2048, dtype=np.uint8).tobytes())
    assert cli.main(["fit", str(path)]) == 2
    assert str(path) in capsys.readouterr().err
    good = _iv_file(tmp_path / "ok.csv", np.array([0.1, 0.2]), np.array([1e-9, 2e-9]))
    assert cli.main(["fit", str(good), "--temperature", "hot"]) == 2
    assert "--temperature" in capsys.readouterr().err


RUN_PLAN = plan_text(
    reverse("reverse_iv", start="0 V", stop="-80 V", points=81, breakdown_guard="5 uA"),
    device="hr-sw-101",
    limits=limits(max_reverse_voltage="80 V", max_power="500 mW",
                  acknowledge_hazardous_voltage="80 V"))


def test_run_folder_states_bv_at_the_plans_breakdown_guard(tmp_path, capsys):
    """A refit of a run folder states BV at the current the run stopped at (its breakdown
    guard, as the run's own model.json does), not at the fitter's 1 mA default; the
    synthetic device has BV = 60 V at 10 uA, so 5 uA flows about N*Vt*ln 2 short of it
    (simulator breakdown convention, Nagel, SPICE2, 1975; docs/physics.md §2)."""
    from report_runs import make_run

    run_dir = make_run(tmp_path, parts=("forward", "reverse"))
    (run_dir / "plan.toml").write_text(RUN_PLAN, encoding="utf-8")
    assert cli.main(["fit", str(run_dir), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["parameters"]["IBV"]["value"] == pytest.approx(5e-6)
    assert doc["parameters"]["BV"]["value"] == pytest.approx(60.0, rel=0.01)
    assert cli.main(["fit", str(run_dir), "--json", "--ibv", "1m"]) == 0
    assert "BV" not in json.loads(capsys.readouterr().out)["parameters"]


def test_stated_instrument_noise_options(tmp_path, capsys, sig):
    """--smu-noise judges the I-V fit against a stated noise: ngspice's clean data pass
    a generous one; a malformed option exits 2 naming it."""
    good = _iv_file(tmp_path / "fwd.csv", sig.forward_v, sig.forward_i)
    assert cli.main(["fit", str(good), "--json", "--smu-noise", "1e-3,1pA"]) == 0
    fit = json.loads(capsys.readouterr().out)["fits"]["iv_forward"]
    assert fit["lack_of_fit"]["chi2_probability"] > 1e-3
    for bad in ("abc", "2,5pA", "1e-3,lots"):
        assert cli.main(["fit", str(good), "--smu-noise", bad]) == 2
        assert "--smu-noise" in capsys.readouterr().err
