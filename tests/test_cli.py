"""The command line: version, help, and the one place errors become exit codes."""

from __future__ import annotations

import subprocess
import sys

import pytest

from pnbench.errors import DataFileError, InstrumentError, OperatorStop
from pnbench.tui import cli


def test_version_prints_the_package_version(capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.strip() == f"pnbench {cli.version()}"


def test_console_script_runs_in_a_fresh_process():
    out = subprocess.run(
        [sys.executable, "-m", "pnbench.tui.cli", "--version"],
        capture_output=True, text=True, check=True,
    )
    assert out.stdout.startswith("pnbench ")


def test_every_listed_command_has_help(capsys):
    commands = cli._available_commands()
    for name in commands:
        with pytest.raises(SystemExit) as stop:
            cli.main([name, "--help"])
        assert stop.value.code == 0, name
        assert "usage: pnbench " + name in capsys.readouterr().out


class _Raising:
    HELP = "raises"

    def __init__(self, exc):
        self.exc = exc

    def add_arguments(self, parser):
        pass

    def run(self, args):
        raise self.exc


@pytest.mark.parametrize(
    ("exc", "code"),
    [
        (DataFileError("data.csv: no column voltage_V"), 2),
        (InstrumentError("TCPIP0::127.0.0.1::5025::SOCKET: timed out on :READ?"), 3),
        (OperatorStop("aborted"), 4),
    ],
)
def test_errors_map_to_exit_codes_without_traceback(monkeypatch, capsys, exc, code):
    monkeypatch.setattr(cli, "_available_commands", lambda: {"boom": _Raising(exc)})
    assert cli.main(["boom"]) == code
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert str(exc) in err


def test_unexpected_errors_are_internal_with_traceback(monkeypatch, capsys):
    monkeypatch.setattr(cli, "_available_commands",
                        lambda: {"boom": _Raising(ZeroDivisionError("x"))})
    assert cli.main(["boom"]) == 1
    assert "Traceback" in capsys.readouterr().err


def test_a_closed_pipe_is_not_an_error():
    """`pnbench --help | head -1` ends quietly: no traceback, exit 0 (common practice)."""
    talker = (
        "import sys; from pnbench.tui import cli; "
        "cli._available_commands = lambda: {'talk': type('T', (), {'HELP': 'x', "
        "'add_arguments': staticmethod(lambda p: None), "
        "'run': staticmethod(lambda a: [print('line', k) for k in range(200000)] and 0)})()}; "
        "sys.exit(cli.main(['talk']))"
    )
    shell = f"{sys.executable} -c \"{talker}\" | head -1"
    out = subprocess.run(["bash", "-c", f"set -o pipefail; {shell}"], capture_output=True,
                         text=True)
    assert "Traceback" not in out.stderr
    assert out.stdout == "line 0\n"
    assert out.returncode == 0
