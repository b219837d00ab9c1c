"""The simulated bench chosen by a backend string (as pyvisa-sim is ``FILE.yaml@sim``):
``DEVICE@pnsim[:time_scale=X]`` with resources PNSIM::SMU and PNSIM::LCR, so nothing
above the drivers passes simulate or time-scale parameters around."""

from __future__ import annotations

import pytest

from pnbench.drivers.opening import open_session
from pnbench.drivers.sim.backend import REGISTRY, backend_for, parse
from pnbench.errors import BadInput
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.cli import main


def test_strings_round_trip_and_bad_ones_are_named():
    assert backend_for("lh-vc510") == "lh-vc510@pnsim"
    assert backend_for("lh-vc510", 0.0) == "lh-vc510@pnsim:time_scale=0"
    spec = parse("dut.toml@pnsim:time_scale=0.5,watchdog=off")
    assert (spec.device, spec.time_scale, spec.watchdog) == ("dut.toml", 0.5, False)
    assert parse(spec.backend) == spec
    for bad in ("@pnsim", "x@pnsim:time_scale=inf", "x@pnsim:time_scale=-1",
                "x@pnsim:colour=red", "x@pnsimfoo"):
        with pytest.raises(BadInput, match="backend"):
            parse(bad)


def test_sessions_on_one_string_share_one_bench_that_ends_with_them():
    backend = "lh-qt16@pnsim:time_scale=0"
    with open_session("PNSIM::SMU", backend, timeout_ms=1000) as smu:
        bench = REGISTRY.running(backend)
        assert bench is not None and bench.time_scale == 0.0
        with open_session("PNSIM::LCR", backend, timeout_ms=1000) as lcr:
            assert REGISTRY.running(backend) is bench
            assert "simulated SMU" in smu.identify() and "LCR" in lcr.identify()
        assert REGISTRY.running(backend) is bench
    assert REGISTRY.running(backend) is None
    with pytest.raises(BadInput, match="PNSIM::SMU"):
        open_session("PNSIM::DMM", backend)


PLAN = """[device]
name = "LH-QT16"

[instruments.smu]
resource = "PNSIM::SMU"
backend = "lh-qt16@pnsim:time_scale=0"

[limits]
max_voltage = "1 V"
max_reverse_voltage = "20 V"
max_current = "50 mA"
max_power = "50 mW"

[[steps]]
name = "forward"
kind = "iv_forward"
start = "0.3 V"
stop = "0.65 V"
points = 6
compliance = "20 mA"
"""


def test_a_plan_may_name_the_simulated_bench_and_runs_on_it(tmp_path, capsys):
    path = tmp_path / "plan.toml"
    path.write_text(PLAN, encoding="utf-8")
    plan = parse_plan(PLAN, str(path))
    assert plan.simulated.device == "lh-qt16" and plan.simulated.time_scale == 0.0
    assert main(["check", str(path)]) == 0
    assert "pnbench's simulated bench with lh-qt16, time scale 0" in capsys.readouterr().out
    out = tmp_path / "runs"
    assert main(["run", str(path), "--headless", "--no-report", "--out", str(out)]) == 0
    from pnbench.sweeps.store import read_run

    run = read_run(next(out.iterdir()))
    assert run["simulated"] == "lh-qt16" and run["status"] == "completed"
    assert run["instruments"]["smu"]["backend"] == "lh-qt16@pnsim:time_scale=0"
