"""`pnbench watch RUN_DIR`: follow a run folder read-only (points, events, status)."""

from __future__ import annotations

import argparse

HELP = ("follow a run folder read-only (live plot, parameters, warnings, progress) "
        "without touching the acquisition; quit and come back at any time")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_dir", metavar="RUN_DIR",
                        help="the run's folder (named like 20250101-120000_device)")


def run(args: argparse.Namespace) -> int:
    import sys

    from pnbench.errors import BadInput
    from pnbench.tui.app.application import run_watch
    from pnbench.tui.app.folder import check_run_folder

    check_run_folder(args.run_dir)  # no run folder is bad input, terminal or not
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise BadInput("pnbench watch needs a terminal (stdin and stdout); without one, "
                       f"read {args.run_dir}/run.log or run.json")
    return run_watch(args.run_dir)
