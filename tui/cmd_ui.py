"""`pnbench ui [PLAN]`: the terminal app (bench, plan, run, review screens)."""

from __future__ import annotations

import argparse

HELP = ("open the terminal app: bench, plan editor and checker, live run with plots and "
        "parameters, review of finished runs")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("plan", metavar="PLAN", nargs="?",
                        help="plan file to open (optional; the Plan screen can open one)")
    parser.add_argument("--simulate", metavar="DUT.toml",
                        help="use the simulated bench with this device file (or bundled "
                             "device name) instead of the plan's instruments")
    parser.add_argument("--time-scale", metavar="X", default=None,
                        help="with --simulate: 0 = as fast as possible, 1 = the "
                             "instruments' real measurement time (default 1)")
    parser.add_argument("--out", metavar="DIR", default="runs",
                        help="folder in which run folders are created (default ./runs)")


def run(args: argparse.Namespace) -> int:
    import sys

    from pnbench.modeling.errors import BadInput
    from pnbench.sweeps.quantities import parse_quantity

    time_scale = 1.0
    if args.time_scale is not None:
        if not args.simulate:
            raise BadInput("--time-scale: only meaningful with --simulate DUT.toml")
        time_scale = parse_quantity(args.time_scale, "", what="--time-scale")
        if time_scale < 0:
            raise BadInput(f"--time-scale: {args.time_scale!r} is negative; expected 0 "
                           "(as fast as possible) or more (1 = real time)")
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise BadInput("pnbench ui needs a terminal; for runs without one use "
                       "`pnbench run PLAN --headless`")
    from pnbench.tui.app import run_app

    return run_app(args.plan, simulate=args.simulate, time_scale=time_scale,
                   out_dir=args.out)
