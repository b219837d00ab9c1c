"""`pnbench fit FILE [FILE ...]`: files at several temperatures into one model.

Reference data: ngspice-39 `.temp` runs (batch mode, level-1 diode) of an invented
Schottky barrier with EG 0.69 eV and XTI 2, GMIN lowered to 1e-15 S.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from spicehelp import dc_sweep

from pnbench.modeling import junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.params import DiodeParams
from pnbench.tui import cli

pytestmark = pytest.mark.ngspice

CARD = DiodeParams(IS=2e-9, N=1.03, RS=0.5, EG=0.69, XTI=2.0)
TEMPERATURES_K = (250.0, 300.0, 350.0, 400.0)


@pytest.fixture(scope="module")
def files(ngspice, tmp_path_factory):
    folder = tmp_path_factory.mktemp("over_t")
    paths = []
    for k, t in enumerate(TEMPERATURES_K):
        p = tm.params_at(CARD, t, 300.15)
        v = junction.voltage(np.logspace(-8, -1, 30), p, t)
        v, i = dc_sweep(ngspice, CARD, v, t - 273.15, gmin=1e-15)
        meta = "" if k == 0 else f"# temperature_K = {t!r}\n"  # the first: --temperature
        rows = "".join(f"{a!r},{b!r}\n" for a, b in zip(v.tolist(), i.tolist(), strict=True))
        path = folder / f"lh-sk-{int(t)}K.csv"
        path.write_text(f"{meta}voltage_V,current_A\n{rows}", encoding="utf-8")
        paths.append(str(path))
    return paths


def test_four_files_give_eg_and_xti_in_model_json(files, capsys):
    code = cli.main(["fit", *files, "--temperature", "250", "--tnom", "300.15", "--json"])
    assert code == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["temperature_K"] == 300.15
    eg, xti = doc["parameters"]["EG"], doc["parameters"]["XTI"]
    assert eg["unit"] == "eV" and abs(eg["value"] / 0.69 - 1) < 0.01
    assert abs(xti["value"] / 2.0 - 1) < 0.05 and xti["sigma"] > 0
    assert [r["temperature_K"] for r in doc["temperatures"]] == list(TEMPERATURES_K)
    assert doc["fits"]["temperature"]["success"]


def test_table_names_every_file_its_temperature_and_the_correlation(files, capsys):
    assert cli.main(["fit", *files, "--temperature", "250"]) == 0
    out = capsys.readouterr().out
    for path, t in zip(files, TEMPERATURES_K, strict=True):
        assert f"{path}: 30 IV points, {t:g} K" in out
    assert "model at TNOM = 300 K" in out  # the measured temperature nearest 300.15 K
    assert "correlation of EG and XTI" in out and "  EG " in out and "  XTI " in out


def test_a_file_without_temperature_is_assumed_at_300_15_and_says_so(files, capsys):
    assert cli.main(["fit", *files[1:3], files[0]]) == 0
    out = capsys.readouterr().out
    assert "assumed 300.15 K" in out


@pytest.mark.parametrize("argv, fragment", [
    (["{f}", "missing.csv"], "missing.csv"),
    (["{f}", "{f}", "--tnom=-4"], "--tnom: -4 K is out of range"),
    (["{f}", "{f}", "--temperature", "0"], "--temperature: 0 K is out of range"),
])
def test_bad_input_exits_2(files, capsys, argv, fragment):
    code = cli.main(["fit", *[files[1] if a == "{f}" else a for a in argv]])
    err = capsys.readouterr().err
    assert code == 2 and fragment in err and "Traceback" not in err
