"""`pnbench qpoint --temperature` against ngspice `.temp` runs of the same card.

Reference: ngspice-39 (batch mode, level-1 diode, TNOM on the card); GMIN folded into
the shunt as tests/spicehelp.py documents. Tolerance 2e-3 relative, the one qpoint meets
at 300 K.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from spicehelp import NGSPICE_GMIN, ac_admittance, operating_point

from pnbench.modeling.modelset import ModelSet
from pnbench.tui import cli

pytestmark = pytest.mark.ngspice

#: An invented switching diode with temperature parameters (sigmas as a fit gives them).
MODEL = ModelSet(values={"IS": 4e-14, "N": 1.03, "RS": 2.0, "CJO": 4e-12, "VJ": 0.75,
                         "M": 0.4, "TT": 5e-9, "EG": 1.13, "XTI": 3.2, "TRS": 3e-3},
                 sigmas={"IS": 1e-15, "EG": 0.01}, temperature_K=300.15,
                 extras={"device": "LAB-SW1"})


@pytest.mark.parametrize("bias", [["--bias-current", "1mA"], ["--bias-voltage=-4"],
                                  ["--bias-voltage", "0"]])
def test_qpoint_at_400_K_matches_ngspice(ngspice, tmp_path, capsys, bias):
    path = tmp_path / "model.json"
    path.write_text(json.dumps(MODEL.to_json_dict()))
    freqs = [1e3, 1e6, 1e8]
    code = cli.main(["qpoint", str(path), *bias, "--temperature", "400", "--freq",
                     *map(str, freqs), "--json"])
    assert code == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["temperature_K"] == 400.0
    v = doc["bias_voltage_V"]
    ref = operating_point(ngspice, MODEL, [v], 400.0 - 273.15)
    assert doc["cj_F"] + doc["cd_F"] == pytest.approx(ref["cd"][0], rel=2e-3, abs=0)
    if v >= 0:
        assert doc["gd_S"] + NGSPICE_GMIN == pytest.approx(ref["gd"][0], rel=2e-3)
        assert doc["rd_ohm"] == pytest.approx(1 / (ref["gd"][0] - NGSPICE_GMIN), rel=2e-3)
        assert doc["bias_current_A"] == pytest.approx(ref["id"][0], rel=2e-3)
    # RS moved with TRS: 2 ohm * (1 + 3e-3 * 99.85).
    assert doc["rs_ohm"] == pytest.approx(2.0 * (1 + 3e-3 * (400.0 - 300.15)), rel=1e-12)
    y_ref = ac_admittance(ngspice, MODEL, [v], freqs, 400.0 - 273.15)[0]
    y = np.array([complex(e["conductance_S"], e["susceptance_S"]) for e in doc["admittance"]])
    np.testing.assert_allclose(y.imag, y_ref.imag, rtol=2e-3)
    if v >= 0:  # gd >= 1e-8 S here at 400 K: GMIN (1e-12 S) does not show at 2e-3
        np.testing.assert_allclose(y.real, y_ref.real, rtol=2e-3)
