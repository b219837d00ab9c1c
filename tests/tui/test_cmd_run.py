"""`pnbench run`, `check`, `resume` and `demo` from the command line: exit codes, one
clear message for bad input, no traceback, no instrument touched, and graceful ends on
SIGTERM, SIGHUP and Ctrl-C with the outputs off."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time

import pytest
from plantext import Raw, cv, forward, limits, plan_text, table

from pnbench.drivers.sim.bench import SimBench
from pnbench.sweeps.statuses import reason_for_signal, status_for_signal
from pnbench.sweeps.store import read_points, read_run
from pnbench.tui.cli import main

GOOD = plan_text(
    forward(start="0.2 V", stop="0.75 V", points=Raw("{points}"), compliance="50 mA"),
    device="LH-ZL560",
    instruments={"smu": {"resource": Raw('"{smu}"'), "max_voltage": "20 V",
                         "max_current": "1 A"}},
    limits=limits(max_reverse_voltage="8 V", max_power="100 mW"))

BAD = {
    "unknown key": ('points = 12', 'points = 12\ncolour = "red"', "unknown key 'colour'"),
    "wrong unit": ('compliance = "50 mA"', 'compliance = "50 mV"', "expected 'A'"),
    "reversed range": ('stop = "0.75 V"', 'stop = "0.1 V"', "must be above start"),
    "beyond the instrument": ('max_reverse_voltage = "8 V"', 'max_reverse_voltage = "30 V"',
                              "beyond the SMU's rating of 20 V"),
    "zero points": ("points = 12", "points = 0", "0 is out of range"),
    "hazardous without acknowledgment": (
        'max_current = "1 A"\n', 'max_current = "1 A"\nmax_voltage = "200 V"\n',
        "hazardous-voltage threshold"),
}


@pytest.fixture
def listener():
    """A TCP port nothing should ever connect to while a bad plan is refused."""
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    sock.listen(4)
    sock.setblocking(False)
    yield f"TCPIP0::127.0.0.1::{sock.getsockname()[1]}::SOCKET", sock
    sock.close()


def write(tmp_path, text, name="plan.toml"):
    path = tmp_path / name
    path.write_bytes(text if isinstance(text, bytes) else text.encode())
    return str(path)


def assert_untouched(sock):
    with pytest.raises(BlockingIOError):
        sock.accept()


@pytest.mark.parametrize("case", sorted(BAD))
@pytest.mark.parametrize("command", ["check", "run"])
def test_bad_plans_exit_2_with_one_message(case, command, tmp_path, listener, capsys):
    resource, sock = listener
    old, new, words = BAD[case]
    text = GOOD.format(smu=resource, points=12)
    assert old in text
    if case == "hazardous without acknowledgment":
        text = text.replace("[limits]\nmax_voltage = \"2 V\"", "[limits]\nmax_voltage = \"200 V\"")
        text = text.replace('max_voltage = "20 V"', 'max_voltage = "300 V"')
    else:
        text = text.replace(old, new, 1)
    plan = write(tmp_path, text)
    out = tmp_path / "runs"
    args = [command, plan] + (["--headless", "--out", str(out)] if command == "run" else [])
    assert main(args) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"pnbench {command}: plan {plan}")
    assert words in err and "Traceback" not in err
    assert err.count("pnbench ") == 1  # one message
    assert not out.exists()
    assert_untouched(sock)


def test_random_bytes_plan(tmp_path, listener, capsys):
    plan = write(tmp_path, os.urandom(300) + b"\x00\xff")
    assert main(["run", plan, "--headless", "--out", str(tmp_path / "runs")]) == 2
    err = capsys.readouterr().err
    assert "not UTF-8" in err or "not valid TOML" in err
    assert "Traceback" not in err and not (tmp_path / "runs").exists()


def test_bad_simulated_device_and_time_scale_exit_2(tmp_path, capsys):
    plan = write(tmp_path, GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET", points=5))
    out = str(tmp_path / "runs")
    assert main(["run", plan, "--simulate", "no-such-part", "--headless", "--out", out]) == 2
    assert main(["run", plan, "--simulate", "lh-zl560", "--time-scale", "-1", "--headless",
                 "--out", out]) == 2
    err = capsys.readouterr().err
    assert "no-such-part" in err and "--time-scale" in err
    assert not (tmp_path / "runs").exists()


def test_plan_beyond_the_simulated_instruments_exits_2(tmp_path, capsys):
    """The bundled LH-ZL560 device file keeps the simulated LCR meter's defaults: 20 Hz
    to 2 MHz."""
    text = GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET", points=5) + "\n" + table(
        "[steps]", cv(bias=[0, -1], frequencies=None, frequency="5 MHz"))
    plan = write(tmp_path, text)
    assert main(["run", plan, "--simulate", "lh-zl560", "--headless",
                 "--out", str(tmp_path / "runs")]) == 2
    err = capsys.readouterr().err
    assert "simulated bench" in err and "2e+06 Hz" in err and "Traceback" not in err
    assert not (tmp_path / "runs").exists()


def test_check_lists_steps_duration_and_power(tmp_path, capsys):
    plan = write(tmp_path, GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET", points=56))
    assert main(["check", plan]) == 0
    out = capsys.readouterr().out
    assert "valid" in out and "forward" in out and "iv_forward" in out
    assert "estimated" in out and "worst-case power" in out
    assert main(["check", plan, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    # 56 points x (1 NPLC at 50 Hz + 2 ms overhead) = 1.232 s
    assert doc["estimate"]["total_s"] == pytest.approx(56 * (0.02 + 0.002))
    assert doc["steps"][0]["worst_case_power_W"] == pytest.approx(0.75 * 0.05)


def test_run_simulated_headless_prints_lines_and_folder(tmp_path, capsys):
    plan = write(tmp_path, GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET", points=20))
    out = tmp_path / "runs"
    code = main(["run", plan, "--simulate", "lh-zl560", "--time-scale", "0", "--headless",
                 "--out", str(out), "--no-report"])
    assert code == 0
    text = capsys.readouterr().out
    run_dir = next(out.iterdir())
    assert f"run folder: {run_dir}" in text
    assert "step forward" in text and "\x1b[" not in text  # plain lines, not a terminal
    assert len(read_points(run_dir)) == 20
    assert main(["resume", str(run_dir)]) == 0
    assert "already completed" in capsys.readouterr().out


def test_resume_of_a_folder_that_is_no_run(tmp_path, capsys):
    assert main(["resume", str(tmp_path)]) == 2
    assert "no run.json" in capsys.readouterr().err


def test_demo_headless_ends_in_a_model_card(tmp_path, capsys):
    out = tmp_path / "runs"
    assert main(["demo", "--headless", "--time-scale", "0", "--out", str(out),
                 "--no-report"]) == 0
    run_dir = next(out.iterdir())
    card = (run_dir / "LH-VC510.lib").read_text()
    assert ".model LH-VC510 D(" in card and "TT=" in card and "BV=" in card
    steps = {s["kind"] for s in read_run(run_dir)["steps"]}
    assert steps == {"iv_forward", "iv_reverse", "cv", "admittance"}
    # one line per step with the step's final fit, even when the fit comes in after the
    # step has ended (time scale 0): what each kind of step found, or why not
    fits = {line.split("fit ", 1)[1].split(":", 1)[0]: line.split(": ", 1)[1]
            for line in capsys.readouterr().out.splitlines() if " fit " in line}
    assert set(fits) == {"forward", "reverse", "breakdown", "cv", "admittance"}
    assert all(name + " = " in fits["forward"] for name in ("IS", "N", "RS"))
    assert fits["reverse"].startswith("no breakdown (IBV = 10 uA not reached); leakage")
    assert fits["breakdown"].startswith("BV = 34.") and "at IBV = 10 uA" in fits["breakdown"]
    assert all(name + " = " in fits["cv"] for name in ("CJO", "VJ", "M"))
    # the device's TT is 2 ns (sim_configs/lh-vc510.toml)
    assert fits["admittance"].startswith("TT = ") and "CJO" not in fits["admittance"]
    tt_ns = float(fits["admittance"].split()[2])
    assert fits["admittance"].split()[3] == "ns" and abs(tt_ns - 2.0) < 0.2


def test_report_failure_is_a_warning_not_a_lost_run(tmp_path, capsys, monkeypatch):
    import pnbench.tui.report as report

    def broken(run_dir):
        raise RuntimeError("figure engine unavailable")

    monkeypatch.setattr(report, "write_report", broken)
    plan = write(tmp_path, GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET", points=5))
    out = tmp_path / "runs"
    assert main(["run", plan, "--simulate", "lh-zl560", "--time-scale", "0", "--headless",
                 "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "warning: the report could not be written" in err and "figure engine" in err
    assert len(read_points(next(out.iterdir()))) == 5


@pytest.fixture(scope="module")
def slow_bench():
    sim = SimBench.start("lh-zl560", time_scale=0.5, off_on_disconnect=False)
    yield sim
    sim.close()


@pytest.mark.parametrize("signum, status", [(signal.SIGTERM, "interrupted"),
                                            (signal.SIGHUP, "interrupted"),
                                            (signal.SIGINT, "aborted")])
def test_signals_stop_gracefully_with_outputs_off(slow_bench, tmp_path, signum, status):
    plan = write(tmp_path, GOOD.format(smu=slow_bench.smu_resource, points=400))
    out = tmp_path / "runs"
    proc = subprocess.Popen([sys.executable, "-m", "pnbench.tui.cli", "run", plan,
                             "--headless", "--no-report", "--out", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        end = time.monotonic() + 30
        while time.monotonic() < end and not list(out.glob("*/points.csv")):
            time.sleep(0.01)
        run_dir = next(out.glob("*/points.csv")).parent
        while time.monotonic() < end and run_dir.joinpath("points.csv").read_text().count(
                "\n") < 8:
            time.sleep(0.01)
        assert slow_bench.outputs()["smu_output"] is True
        proc.send_signal(signum)
        stdout, stderr = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 4, stderr
    assert "Traceback" not in stderr
    run = read_run(run_dir)
    assert run["status"] == status and run["outputs_off_confirmed"] is True
    # the one rule both front ends follow (the app's side: test_app_signals.py)
    assert status == status_for_signal(signum) and run["reason"] == reason_for_signal(signum)
    assert slow_bench.outputs() == {"smu_output": False, "lcr_bias": False}
    assert f"run folder: {run_dir}" in stdout
    assert 0 < run["steps"][0]["done"] < 400


def test_resume_of_a_simulated_run_uses_its_device(tmp_path, capsys):
    import threading

    from pnbench.sweeps.launch import Launch
    from pnbench.sweeps.plan import load_plan

    plan = load_plan(write(tmp_path, GOOD.format(smu="TCPIP0::192.0.2.1::5025::SOCKET",
                                                 points=40)))
    launch = Launch.new(plan.on_simulated_bench("lh-zl560@pnsim:time_scale=0"),
                        out_dir=tmp_path / "runs")

    def listener(event):
        if event.kind == "point" and event["index"] == 15:
            threading.Thread(target=launch.abort).start()

    launch.listeners.append(listener)
    assert launch.run().status == "aborted"
    assert main(["resume", str(launch.run_dir), "--time-scale", "0", "--no-report"]) == 0
    assert "simulated bench with lh-zl560" in capsys.readouterr().err
    assert [p.index for p in read_points(launch.run_dir)] == list(range(40))


def test_plan_without_the_instruments_it_needs_exits_2_before_any_run_folder(tmp_path,
                                                                              capsys):
    """No --simulate and no [instruments] entry for a needed role: bad input, said before
    a run folder is made (no failed run left behind, no instrument involved)."""
    from importlib import resources

    plan = resources.files("pnbench.sim_configs").joinpath("plans/lh-qt16.toml")
    out = tmp_path / "runs"
    assert main(["run", str(plan), "--headless", "--out", str(out)]) == 2
    assert "has no 'lcr' entry" in capsys.readouterr().err
    assert not out.exists()
