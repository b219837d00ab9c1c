"""A plan is data: it cannot make pnbench load native code. The VISA library comes from
the user (command line, environment, configuration file), never from a plan, and
`check` says what each instrument would connect to and through what."""

from __future__ import annotations

import pytest
from plantext import forward, limits, plan_text

from pnbench.drivers import backends
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.cli import main


def plan_with(backend: str | None) -> str:
    """A one-step plan whose SMU names ``backend`` (on line 6), or none."""
    return plan_text(forward(start="0.2 V", stop="0.75 V", points=6, compliance="50 mA"),
                     device="LH-ZL560",
                     instruments={"smu": {"resource": "TCPIP0::192.0.2.1::5025::SOCKET",
                                          "backend": backend}},
                     limits=limits(max_reverse_voltage="8 V", max_power="100 mW"))


@pytest.fixture(autouse=True)
def no_user_choice(monkeypatch, tmp_path):
    monkeypatch.delenv(backends.ENV_VAR, raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    backends.choose_visa_library(None)


def write(tmp_path, backend: str | None) -> str:
    path = tmp_path / "plan.toml"
    path.write_text(plan_with(backend), encoding="utf-8")
    return str(path)


@pytest.mark.parametrize("value", ["/usr/lib/libvisa.so", "C:/Windows/visa64.dll",
                                   "libvisa.so.7", "@ni", "lib@sim", "../x.so@py"])
@pytest.mark.parametrize("command", ["check", "run"])
def test_a_plan_naming_a_library_is_refused_with_key_and_line(tmp_path, capsys, value,
                                                              command):
    plan = write(tmp_path, value)
    out = tmp_path / "runs"
    argv = [command, plan] + (["--headless", "--out", str(out)] if command == "run" else [])
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "line 6, instruments.smu.backend" in err and "cannot choose a VISA library" in err
    assert not out.exists()


@pytest.mark.parametrize("value, expected", [(None, "@py"), ("@py", "@py"), ("@ivi", "@ivi"),
                                             ("@sim", "@sim"),
                                             ("bench.yaml@sim", "bench.yaml@sim")])
def test_backends_a_plan_may_name(tmp_path, value, expected):
    plan = parse_plan(plan_with(value), "p.toml", base_dir=tmp_path)
    assert plan.instruments["smu"].backend == expected


def test_the_user_chooses_the_library_in_this_order(tmp_path, monkeypatch, capsys):
    config = tmp_path / "config" / "pnbench" / "config.toml"
    config.parent.mkdir(parents=True)
    config.write_text('visa_library = "/opt/from-config/libvisa.so"\n', encoding="utf-8")
    plan = write(tmp_path, "@ivi")
    assert main(["check", plan]) == 0
    out = capsys.readouterr().out
    assert "/opt/from-config/libvisa.so" in out and str(config) in out
    assert "connects to TCPIP0::192.0.2.1::5025::SOCKET" in out
    monkeypatch.setenv(backends.ENV_VAR, "/opt/from-env/libvisa.so")
    assert main(["check", plan]) == 0
    assert "/opt/from-env/libvisa.so (VISA library chosen by PNBENCH_VISA_LIBRARY)" in (
        capsys.readouterr().out)
    assert main(["check", plan, "--visa-library", "/opt/cli/libvisa.so"]) == 0
    assert "/opt/cli/libvisa.so (VISA library chosen by --visa-library)" in (
        capsys.readouterr().out)
    # the command line's choice ends with the command
    assert backends.user_visa_library()[1] == backends.ENV_VAR
    # a plan that says "@py" keeps the pure-Python backend whatever the user configured
    plan = write(tmp_path, "@py")
    assert main(["check", plan]) == 0
    assert "through @py (pyvisa-py, pure Python)" in capsys.readouterr().out


def test_a_broken_configuration_file_is_named(tmp_path, capsys):
    config = tmp_path / "config" / "pnbench" / "config.toml"
    config.parent.mkdir(parents=True)
    config.write_text("visa_library = 3\n", encoding="utf-8")
    assert main(["check", write(tmp_path, None)]) == 2
    assert str(config) in capsys.readouterr().err
