"""The `pnbench` command line: one entry point, one subcommand per module.

Each subcommand lives in its own module `pnbench.tui.cmd_<name>` exposing

    HELP: str                        -- one line for the command list
    def add_arguments(parser): ...   -- its options
    def run(args) -> int: ...        -- does the work, returns an exit code

Modules keep heavy imports inside `run` so `pnbench --help` stays quick. This file is
the one place where errors become exit codes and messages.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback

from pnbench import version
from pnbench.errors import PnbenchError

#: Subcommands in the order `--help` lists them.
COMMANDS = (
    "demo",
    "run",
    "resume",
    "check",
    "fit",
    "qpoint",
    "sim",
    "probe",
    "ui",
    "watch",
    "report",
)



def _available_commands() -> dict[str, object]:
    found = {}
    for name in COMMANDS:
        try:
            found[name] = importlib.import_module(f"pnbench.tui.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"pnbench.tui.commands.{name}":
                raise
    return found


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="pnbench",
        description=(
            "Characterize diodes at the bench: drive a source-measure unit and an LCR "
            "meter over SCPI, fit the junction model while the sweep runs, and write a "
            "model card and a report. Use --simulate DUT.toml to rehearse on the "
            "built-in simulated bench."
        ),
        epilog=(
            "Exit codes: 0 done, 1 internal error, 2 bad input, 3 instrument or "
            "connection error, 4 stopped by a safety limit or the operator."
        ),
    )
    parser.add_argument("--version", action="version", version=f"pnbench {version()}")
    parser.add_argument(
        "--debug", action="store_true", help="show a traceback with every error"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module in _available_commands().items():
        p = sub.add_parser(name, help=module.HELP, description=module.HELP)
        p.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)
        module.add_arguments(p)
        p.set_defaults(_module=module)
    return parser


def _silence_stdout() -> None:
    """Point stdout at the null device so Python's exit flush cannot fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def main(argv: list[str] | None = None) -> int:
    try:
        return _main(argv)
    except BrokenPipeError:
        # The reader went away (`pnbench ... | head`): not an error of ours, no traceback.
        _silence_stdout()
        return 0


def _main(argv: list[str] | None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as stop:
        if stop.code in (0, None):
            raise  # --help, --version
        return 2  # argparse named the option and printed the usage
    if args.command is None:
        parser.print_help()
        return 2
    debug = bool(getattr(args, "debug", False))
    try:
        if getattr(args, "visa_library", None) is not None:
            from pnbench.drivers.backends import choose_visa_library

            choose_visa_library(args.visa_library)  # the user's choice, never a plan's
        code = args._module.run(args)
    except PnbenchError as exc:
        if debug or exc.exit_code == 1:
            traceback.print_exc()
        print(f"pnbench {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except BrokenPipeError:
        raise
    except KeyboardInterrupt:
        print(f"pnbench {args.command}: stopped by the operator (Ctrl-C)", file=sys.stderr)
        return 4
    except Exception:  # noqa: BLE001 - the last line of defence, reported as internal
        traceback.print_exc()
        print(
            f"pnbench {args.command}: internal error (a bug in pnbench; please report "
            "it with the traceback above)",
            file=sys.stderr,
        )
        return 1
    finally:
        if getattr(args, "visa_library", None) is not None:
            from pnbench.drivers.backends import choose_visa_library

            choose_visa_library(None)
    return int(code or 0)


if __name__ == "__main__":
    sys.exit(main())
