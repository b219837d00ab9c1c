"""`pnbench qpoint` end to end through the command line."""

from __future__ import annotations

import json
import math

import pytest

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.modelset import ModelSet
from pnbench.tui import cli

#: An invented switching diode of an invented lab.
MODEL = ModelSet(values={"IS": 4e-14, "N": 1.0, "RS": 2.0, "CJO": 4e-12, "VJ": 0.75,
                         "M": 0.4, "TT": 5e-9},
                 sigmas={"IS": 1e-15}, temperature_K=300.15, extras={"device": "LAB-SW1"})


@pytest.fixture
def model_json(tmp_path):
    path = tmp_path / "model.json"
    path.write_text(json.dumps(MODEL.to_json_dict()))
    return path


def _json_run(capsys, *argv):
    assert cli.main(["qpoint", *map(str, argv), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_json_output_has_the_issue_keys_and_the_physics(model_json, capsys):
    doc = _json_run(capsys, model_json, "--bias-current", "1mA", "--freq", "1k", "10MHz")
    for key in ("bias_voltage_V", "bias_current_A", "rd_ohm", "gd_S", "cj_F", "cd_F",
                "rs_ohm", "admittance", "temperature_K"):
        assert key in doc
    assert doc["bias_current_A"] == pytest.approx(1e-3)
    assert doc["temperature_K"] == 300.15
    # rd ~ 26 ohm at 1 mA for N = 1 (common practice, no source).
    assert doc["rd_ohm"] == pytest.approx(26.0, abs=0.3)
    q = smallsignal.operating_point(MODEL.to_params(), current=1e-3)
    assert doc["cd_F"] == pytest.approx(q.cd_F, rel=1e-6, abs=0)
    assert doc["cj_F"] == pytest.approx(q.cj_F, rel=1e-6, abs=0)
    assert [e["frequency_Hz"] for e in doc["admittance"]] == [1e3, 1e7]
    for entry in doc["admittance"]:
        y = q.admittance(entry["frequency_Hz"])
        assert entry["conductance_S"] == pytest.approx(y.real, rel=1e-12)
        assert entry["susceptance_S"] == pytest.approx(y.imag, rel=1e-12)
        z = 1 / y
        assert entry["resistance_ohm"] == pytest.approx(z.real, rel=1e-12)
        assert entry["reactance_ohm"] == pytest.approx(z.imag, rel=1e-12)


def test_card_file_and_run_folder_give_the_same_answer(model_json, tmp_path, capsys):
    card = tmp_path / "lab_sw1.lib"
    card.write_text(MODEL.card_text("LAB_SW1"))
    from_json = _json_run(capsys, model_json, "--bias-voltage", "650m")
    from_card = _json_run(capsys, card, "--bias-voltage", "0.65V")
    from_run = _json_run(capsys, tmp_path, "--bias-voltage", "0.65")
    for key in ("bias_current_A", "gd_S", "cj_F", "cd_F"):
        assert from_card[key] == pytest.approx(from_json[key], rel=1e-12)
        assert from_run[key] == from_json[key]


def test_reverse_bias_with_negative_prefixed_value(model_json, capsys):
    doc = _json_run(capsys, model_json, "--bias-voltage=-5", "--freq", "1MHz")
    assert doc["bias_voltage_V"] == -5.0
    assert doc["cj_F"] == pytest.approx(4e-12 * (1 + 5 / 0.75) ** -0.4, rel=1e-6, abs=0)


def test_temperature_moves_is_and_is_always_printed(model_json, capsys):
    doc = _json_run(capsys, model_json, "--bias-voltage", "0.6", "--temperature", "320K")
    p = junction.params_at_temperature(MODEL.to_params(), 320.0, 300.15)
    assert doc["temperature_K"] == 320.0
    assert doc["bias_current_A"] == pytest.approx(junction.current(0.6, p, 320.0), rel=1e-12)
    assert any("temperature equations" in note for note in doc["notes"])
    assert any("no EG or XTI" in note for note in doc["notes"])
    assert cli.main(["qpoint", str(model_json), "--bias-voltage", "0.6"]) == 0
    assert "300.15 K" in capsys.readouterr().out


def test_human_table_and_ac_level_warning(model_json, capsys):
    code = cli.main(["qpoint", str(model_json), "--bias-current", "1m", "--freq", "100k",
                     "--ac-level", "20m"])
    out = capsys.readouterr().out
    assert code == 0
    assert "rd / gd" in out and "100 kHz" in out and "temperature" in out
    assert "AC level WARNING" in out and "not small against N*Vt" in out


def test_json_is_strict_even_with_infinities(model_json, capsys):
    doc = _json_run(capsys, model_json, "--bias-voltage=-80")
    assert doc["rsh_ohm"] is None
    assert doc["rd_ohm"] is None or math.isfinite(doc["rd_ohm"])


@pytest.mark.parametrize("argv, fragment", [
    (["missing.json", "--bias-voltage", "0.5"], "no such file"),
    (["{dir}", "--bias-voltage", "0.5"], "without model.json"),
    (["{bad}", "--bias-voltage", "0.5"], "not valid JSON"),
    (["{json}", "--bias-voltage", "abc"], "--bias-voltage: cannot read 'abc'"),
    (["{json}", "--bias-current", "5 mV"], "unit 'V', expected 'A'"),
    (["{json}", "--bias-voltage", "0.5", "--freq", "0"], "not above 0 Hz"),
    (["{json}", "--bias-voltage", "0.5", "--temperature", "-3"], "not above 0 K"),
    (["{json}", "--bias-current=-1", ], "cannot carry it"),
])
def test_bad_input_exits_2_with_a_message_and_no_traceback(argv, fragment, tmp_path,
                                                          model_json, capsys):
    empty = tmp_path / "empty_run"
    empty.mkdir()
    bad = tmp_path / "bad.json"
    bad.write_text('{"parameters": ')
    names = {"{dir}": str(empty), "{bad}": str(bad), "{json}": str(model_json)}
    code = cli.main(["qpoint", *[names.get(a, a) for a in argv]])
    err = capsys.readouterr().err
    assert code == 2
    assert fragment in err and "Traceback" not in err


def test_reverse_bias_says_the_junction_is_off_with_a_bound_and_the_leakage(model_json,
                                                                            tmp_path, capsys):
    """Reverse biased, the diffusion conductance IS/(N*Vt)*exp(vd/(N*Vt)) is below
    IS/(N*Vt) (Shockley law; from memory): rd > N*Vt/IS. No 1e90-ohm figure is printed."""
    assert cli.main(["qpoint", str(model_json), "--bias-voltage=-5", "--freq", "1k"]) == 0
    out = capsys.readouterr().out
    assert "junction off (reverse biased)" in out and "Cd negligible" in out
    assert "leakage-limited" in out
    assert not any(f"e{k}" in out for k in range(20, 400))  # no 37.826e69-style values
    doc = _json_run(capsys, model_json, "--bias-voltage=-5")
    vt = junction.thermal_voltage(300.15)
    assert doc["junction_off"] is True
    assert doc["rd_bound_ohm"] == pytest.approx(vt / 4e-14, rel=1e-9)
    # with a shunt in the model the leakage conductance is 1/RSH
    shunt = ModelSet(values={**MODEL.values, "RSH": 2e8}, sigmas={}, temperature_K=300.15)
    path = tmp_path / "shunt.json"
    path.write_text(json.dumps(shunt.to_json_dict()))
    doc = _json_run(capsys, path, "--bias-voltage=-5")
    assert doc["leakage_conductance_S"] == pytest.approx(5e-9) and doc["leakage_from"] == "RSH"
    forward = _json_run(capsys, model_json, "--bias-current", "1mA")
    assert forward["junction_off"] is False and "rd_bound_ohm" not in forward
