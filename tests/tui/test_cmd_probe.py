"""`pnbench probe` over pyvisa-sim and the simulated bench: output, exit codes, safety."""

from __future__ import annotations

import json
import shutil
import tomllib
from importlib import resources

import pytest
import tomli_w

from pnbench.drivers.dialect import default_dialect_text
from pnbench.drivers.opening import open_session
from pnbench.tui import cli

SMU = "TCPIP0::192.0.2.11::5025::SOCKET"
LCR = "TCPIP0::192.0.2.12::5025::SOCKET"
BROKEN_SMU = "TCPIP0::192.0.2.13::5025::SOCKET"


@pytest.fixture
def backend(tmp_path) -> str:
    """A private copy of the bundled pyvisa-sim bench (fresh device state per test)."""
    target = tmp_path / "protocol_bench.yaml"
    with resources.as_file(resources.files("pnbench.sim_configs") / "protocol_bench.yaml") as p:
        shutil.copy(p, target)
    return f"{target}@sim"


def probe(capsys, *argv: str) -> tuple[int, str, str]:
    code = cli.main(["probe", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_lists_resources_with_identities(capsys, backend):
    code, out, _ = probe(capsys, "--backend", backend, "--json")
    assert code == 0
    rows = {r["resource"]: r for r in json.loads(out)["resources"]}
    assert rows[SMU]["identity"] == "Harrow Lane Lab,protocol SMU,HL-0001,1.0"
    assert rows[LCR]["identity"].startswith("Harrow Lane Lab,protocol LCR")


def test_smu_role_check_leaves_output_off(capsys, backend):
    code, out, _ = probe(capsys, SMU, "--backend", backend, "--role", "smu")
    assert code == 0
    assert "works for the SMU role" in out
    with open_session(SMU, backend, timeout_ms=300) as s:
        assert s.query(":OUTPut:STATe?") == "OFF"
        assert s.query(":SOURce:FUNCtion:MODE?") == "VOLTage"


def test_lcr_role_check_reads_and_leaves_bias_off(capsys, backend):
    code, out, _ = probe(capsys, LCR, "--backend", backend, "--role", "lcr", "--json")
    assert code == 0
    report = json.loads(out)
    reading = report["checks"]["reading_1kHz"]
    assert (reading["primary"], reading["secondary"]) == (1e-10, 1e-6)
    with open_session(LCR, backend, timeout_ms=300) as s:
        assert s.query(":SOURce:BIAS:STATe?") == "OFF"


def test_instrument_with_output_on_is_left_alone(capsys, backend):
    with open_session(SMU, backend, timeout_ms=300) as s:
        s.write(":OUTPut:STATe ON;:SOURce:CURRent:PROTection:LEVel 0.05")
    code, _, err = probe(capsys, SMU, "--backend", backend, "--role", "smu")
    assert code == 4 and "output is ON" in err
    with open_session(SMU, backend, timeout_ms=300) as s:
        assert s.query(":OUTPut:STATe?") == "ON"  # untouched
        assert float(s.query(":SOURce:CURRent:PROTection:LEVel?")) == 0.05


def test_instrument_faults_exit_3(capsys, backend):
    code, _, err = probe(capsys, BROKEN_SMU, "--backend", backend, "--role", "smu",
                         "--timeout-ms", "100")
    assert code == 3 and "not an error entry" in err
    code, _, err = probe(capsys, "TCPIP0::192.0.2.77::5025::SOCKET", "--backend", backend)
    assert code == 3 and SMU in err


def test_rejected_dialect_command_exit_3_with_instruments_message(capsys, backend, tmp_path):
    data = tomllib.loads(default_dialect_text())
    data["smu"]["integration_nplc"] = ":SENSe:CURRent:APERture {value}"
    path = tmp_path / "other.toml"
    path.write_bytes(tomli_w.dumps(data).encode())
    code, _, err = probe(capsys, SMU, "--backend", backend, "--role", "smu", "--dialect",
                         str(path))
    assert code == 3 and '-100,"Command error"' in err and "APERture" in err


def test_bad_dialect_and_options_exit_2(capsys, backend, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(default_dialect_text().replace("output_query", "output_ask"))
    code, _, err = probe(capsys, SMU, "--backend", backend, "--role", "smu", "--dialect",
                         str(bad))
    assert code == 2 and "bad.toml" in err and "output_ask" in err
    assert probe(capsys, "--role", "smu")[0] == 2
    assert probe(capsys, SMU, "--simulate", "lh-qt16")[0] == 2


def test_simulated_bench_both_roles(capsys):
    code, out, _ = probe(capsys, "--simulate", "lh-qt16", "--role", "smu", "--json")
    assert code == 0
    report = json.loads(out)
    assert report["nodelay"] is True and report["checks"]["output"] == "off"
    code, out, _ = probe(capsys, "--simulate", "lh-qt16", "--role", "lcr")
    assert code == 0 and "works for the LCR role" in out


def test_simulated_stage_role_is_read_and_left_where_it_was(capsys):
    code, out, _ = probe(capsys, "--simulate", "lh-qt16", "--role", "stage", "--json")
    assert code == 0
    report = json.loads(out)
    assert "thermal stage" in report["identity"]
    assert report["checks"]["set_point_K"] == pytest.approx(300.15)
    assert report["checks"]["temperature_K"] == pytest.approx(300.15, abs=0.1)
    assert report["checks"]["regulating"] == "on"
    code, out, _ = probe(capsys, "--simulate", "lh-qt16")
    assert code == 0 and "simulated thermal stage" in out


def test_stage_role_needs_a_stage_table(capsys, tmp_path):
    text = default_dialect_text()
    no_stage = tmp_path / "no-stage.toml"
    no_stage.write_text(text[: text.index("[stage]")], encoding="utf-8")
    code, _, err = probe(capsys, "--simulate", "lh-qt16", "--role", "stage", "--dialect",
                         str(no_stage))
    assert code == 2 and "no [stage] table" in err
