"""`pnbench sim`: resource strings, serving until interrupted, exit codes."""

from __future__ import annotations

import json
import signal
import socket
import subprocess
import sys

import pytest

from pnbench.drivers.opening import open_session
from pnbench.tui import cli


def _start(*options: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "pnbench.tui.cli", "sim", *options],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.mark.parametrize("stop", [signal.SIGINT, signal.SIGTERM])
def test_serves_until_interrupted_then_exits_0(stop):
    proc = _start("--dut", "lh-vc510", "--time-scale", "0")
    try:
        smu_line = proc.stdout.readline().split()
        lcr_line = proc.stdout.readline().split()
        assert smu_line[0] == "SMU" and lcr_line[0] == "LCR"
        with open_session(smu_line[1]) as smu, open_session(lcr_line[1]) as lcr:
            assert smu.identify().startswith("pnbench,simulated SMU")
            assert lcr.identify().startswith("pnbench,simulated LCR")
            assert smu.query(":OUTP ON;:OUTP?") == "1"
            proc.send_signal(stop)
            out, err = proc.communicate(timeout=20)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 0, err
    assert "outputs off" in err
    assert "Traceback" not in err


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_json_resources_and_given_ports():
    port = _free_port()
    proc = _start("--dut", "lh-qt16", "--json", "--time-scale", "0", "--smu-port", str(port))
    try:
        info = json.loads(proc.stdout.readline())
        assert info["device"] == "LH-QT16"
        assert info["smu_resource"] == f"TCPIP0::127.0.0.1::{port}::SOCKET"
        with open_session(info["lcr_resource"]) as lcr:
            assert lcr.query(":SOUR:BIAS:STAT?") == "0"
        with open_session(info["stage_resource"]) as stage:
            # Served on its own at time scale 0, the stage is settled at once.
            reply = stage.query(":SOUR:TEMP:SPO 85;:MEAS:TEMP?")
            assert float(reply) == pytest.approx(85.0, abs=0.1)
    finally:
        proc.terminate()
        proc.communicate(timeout=20)
    assert proc.returncode == 0


def test_lists_bundled_devices(capsys):
    assert cli.main(["sim", "--list"]) == 0
    listed = capsys.readouterr().out
    for name in ("lh-qt16", "lh-hm27", "lh-vc510", "lh-vh720", "lh-zl560"):
        assert name in listed


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        ("[diode]\nIS = -3\n", "[diode] IS (line 2)"),
        ("[lcr]\nnoise_floor_F = \"big\"\n", "[lcr] noise_floor_F (line 2)"),
        ("[timing]\nwarp = 1\n", "[timing] warp"),
    ],
)
def test_bad_device_files_exit_2_naming_file_and_key(tmp_path, capsys, content, expected):
    path = tmp_path / "dut.toml"
    path.write_text(content)
    assert cli.main(["sim", "--dut", str(path)]) == 2
    err = capsys.readouterr().err
    assert str(path) in err and expected in err
    assert "Traceback" not in err


def test_bad_options_exit_2(capsys):
    assert cli.main(["sim", "--dut", "lh-nothing"]) == 2
    assert "lh-vc510" in capsys.readouterr().err  # the message lists what exists
    assert cli.main(["sim"]) == 2
    assert "--dut" in capsys.readouterr().err
    assert cli.main(["sim", "--dut", "lh-vc510", "--time-scale", "-2"]) == 2
    assert "--time-scale" in capsys.readouterr().err
