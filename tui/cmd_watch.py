"""`pnbench watch RUN_DIR`: follow a run folder read-only (points, events, status)."""

from __future__ import annotations

import argparse

HELP = ("follow a run folder read-only (live plot, parameters, warnings, progress) "
        "without touching the acquisition; quit and come back at any time")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_dir", metavar="RUN_DIR",
                        help="the run's folder (named like 20250101-120000_device)")


def run(args: argparse.Namespace) -> int:
    from pnbench.tui.app import run_watch

    return run_watch(args.run_dir)
