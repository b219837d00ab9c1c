"""Options and files are checked before anything is created: a bad --out, a non-finite
or absurd number, a pathologically nested TOML file and an absurd model card all end
with exit 2 and a message naming the option or file, never a traceback, a numpy warning
or an empty run folder left behind."""

from __future__ import annotations

import pytest
from plantext import forward, limits, plan_text

from pnbench.tui.cli import main

PLAN = plan_text(forward(start="0.2 V", stop="0.75 V", points=6, compliance="50 mA"),
                 device="LH-ZL560",
                 limits=limits(max_reverse_voltage="8 V", max_power="100 mW"))


def exit_code(argv) -> int:
    try:
        return main(argv)
    except SystemExit as stop:  # argparse refuses an option
        return int(stop.code)


@pytest.fixture
def plan(tmp_path):
    path = tmp_path / "plan.toml"
    path.write_text(PLAN, encoding="utf-8")
    return str(path)


def _commands(plan: str, out: str, *extra: str) -> list[list[str]]:
    return [["run", plan, "--simulate", "lh-zl560", "--headless", "--out", out, *extra],
            ["demo", "--headless", "--out", out, *extra]]


@pytest.mark.parametrize("which", [0, 1], ids=["run", "demo"])
def test_out_that_is_a_file_or_inside_one_exits_2_naming_the_option(
        tmp_path, plan, capsys, which):
    afile = tmp_path / "afile"
    afile.write_text("not a folder")
    for out in (afile, afile / "runs"):
        assert exit_code(_commands(plan, str(out), "--time-scale", "0")[which]) == 2
        err = capsys.readouterr().err
        assert "--out" in err and "file" in err and "Traceback" not in err
    assert afile.read_text() == "not a folder"


@pytest.mark.parametrize("value", ["inf", "-inf", "nan", "-1", "1e9"])
@pytest.mark.parametrize("which", [0, 1], ids=["run", "demo"])
def test_time_scale_must_be_finite_and_sane_before_any_folder(
        tmp_path, plan, capsys, value, which):
    out = tmp_path / "runs"
    assert exit_code(_commands(plan, str(out), f"--time-scale={value}")[which]) == 2
    err = capsys.readouterr().err
    assert "--time-scale" in err and "Traceback" not in err
    assert not out.exists()


def _nested(depth: int) -> str:
    return "x = " + "[" * depth + "]" * depth + "\n"


@pytest.mark.parametrize("command", ["check", "run"])
def test_deeply_nested_plan_exits_2_naming_the_file(tmp_path, capsys, command):
    path = tmp_path / "deep.toml"
    path.write_text(PLAN + _nested(100_000), encoding="utf-8")
    out = tmp_path / "runs"
    argv = [command, str(path)] + (["--headless", "--out", str(out)] if command == "run"
                                   else [])
    assert exit_code(argv) == 2
    err = capsys.readouterr().err
    assert str(path) in err and "nested too deeply" in err and "Traceback" not in err
    assert not out.exists()


def test_deeply_nested_device_and_dialect_files_exit_2(tmp_path, plan, capsys):
    device = tmp_path / "dut.toml"
    device.write_text(_nested(100_000), encoding="utf-8")
    assert exit_code(["run", plan, "--simulate", str(device), "--headless",
                      "--out", str(tmp_path / "runs")]) == 2
    err = capsys.readouterr().err
    assert str(device) in err and "nested too deeply" in err
    dialect = tmp_path / "smu.toml"
    dialect.write_text(_nested(100_000), encoding="utf-8")
    assert exit_code(["probe", "TCPIP0::192.0.2.1::5025::SOCKET", "--role", "smu",
                      "--dialect", str(dialect)]) == 2
    err = capsys.readouterr().err
    assert "nested too deeply" in err and "Traceback" not in err


CARD = ".model LH D(IS={IS} N={N} RS=2 CJO=10p VJ=0.7 M=0.4 TT=5n)\n"


@pytest.mark.parametrize("card, options, words", [
    ({"IS": "1e308", "N": "1.5"}, ["--bias-voltage", "0.5"], "IS = 1e+308"),
    ({"IS": "1e-14", "N": "1e-308"}, ["--bias-voltage", "0.5"], "N = 1e-308"),
    ({"IS": "1e-14", "N": "1.5"}, ["--bias-current", "1e308"], "--bias-current"),
    ({"IS": "1e-14", "N": "1.5"}, ["--bias-voltage", "1e308"], "--bias-voltage"),
    ({"IS": "1e-14", "N": "1.5"}, ["--bias-voltage", "0.5", "--freq", "1e300"], "--freq"),
    ({"IS": "1e-14", "N": "1.5"}, ["--bias-voltage", "0.5", "--temperature", "1e300"],
     "--temperature"),
    ({"IS": "1e-14", "N": "1.5"}, ["--bias-voltage", "0.5", "--ac-level", "1e300"],
     "--ac-level"),
])
def test_qpoint_refuses_absurd_cards_and_biases_without_warnings(tmp_path, capfd, card,
                                                                  options, words):
    path = tmp_path / "lh.lib"
    path.write_text(CARD.format(**card), encoding="utf-8")
    assert exit_code(["qpoint", str(path), *options]) == 2
    out, err = capfd.readouterr()
    assert words in err and "Traceback" not in err
    assert "Warning" not in err and "inf" not in out and "nan" not in out


def test_qpoint_still_answers_for_a_sane_card(tmp_path, capsys):
    path = tmp_path / "lh.lib"
    path.write_text(CARD.format(IS="1e-14", N="1.5"), encoding="utf-8")
    assert exit_code(["qpoint", str(path), "--bias-voltage", "0.5", "--freq", "1k"]) == 0


@pytest.mark.parametrize("argv", [
    ["sim", "--smu-port", "70000"],
    ["sim", "--time-scale", "nan"],
    ["probe", "--timeout-ms", "0"],
    ["probe", "--time-scale", "inf"],
])
def test_other_numeric_options_are_bounded(argv, capsys):
    assert exit_code(argv) == 2
    assert argv[1] in capsys.readouterr().err


@pytest.mark.parametrize("table, line, words", [
    ('[instruments.smu]\nresource = "TCPIP0::192.0.2.1::5025::SOCKET"\ntimeout = "1e308 s"\n',
     "instruments.smu.timeout", "outside"),
    ('[instruments.smu]\nresource = "TCPIP0::192.0.2.1::5025::SOCKET"\ntimeout = "0.1 ms"\n',
     "instruments.smu.timeout", "outside"),
])
def test_absurd_plan_numbers_exit_2_naming_the_key(tmp_path, capsys, table, line, words):
    path = tmp_path / "plan.toml"
    path.write_text(PLAN.replace("[limits]", table + "\n[limits]"), encoding="utf-8")
    assert exit_code(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert line in err and words in err and "Traceback" not in err


def test_limits_beyond_any_bench_instrument_exit_2(tmp_path, capsys):
    path = tmp_path / "plan.toml"
    path.write_text(PLAN.replace('max_power = "100 mW"', 'max_power = "1e308 W"'),
                    encoding="utf-8")
    assert exit_code(["check", str(path)]) == 2
    assert "limits.max_power: 1e+308 W is beyond any bench instrument" in (
        capsys.readouterr().err)
