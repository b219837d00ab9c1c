"""`pnbench run PLAN`: run a plan file on the instruments or the simulated bench."""

from __future__ import annotations

import argparse
import sys

from pnbench.tui.commands.options import (
    TIME_SCALE_MAX,
    add_visa_library,
    check_out_dir,
    number,
)

HELP = "run a plan on the instruments (or rehearse it with --simulate DEVICE)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("plan", help="plan file (TOML); see `pnbench check PLAN`")
    add_bench_options(parser)
    parser.add_argument("--no-report", action="store_true",
                        help="do not write report.html at the end (`pnbench report RUN_DIR` "
                        "makes it later)")
    parser.add_argument("--out", default="runs", metavar="DIR",
                        help="folder in which the run folder is created (default: runs)")
    parser.add_argument("--headless", action="store_true",
                        help="progress on the terminal (or plain lines in a log) instead "
                        "of the app")


def add_bench_options(parser: argparse.ArgumentParser, time_scale: float = 1.0) -> None:
    parser.set_defaults(default_time_scale=time_scale)
    parser.add_argument("--simulate", metavar="DUT.toml",
                        help="use the simulated bench with this device file (or the name "
                        "of a bundled one, e.g. lh-qt16) instead of the plan's instruments")
    parser.add_argument("--time-scale", type=number(0.0, TIME_SCALE_MAX), default=None,
                        metavar="X",
                        help="with --simulate: 0 = as fast as possible, 1 = the "
                        f"instruments' real time (default: {time_scale:g})")
    add_visa_library(parser)


def check_bench_options(args, plan=None) -> None:
    """Bad --simulate, --time-scale or --out values exit 2 before anything is created;
    with a plan, its limits and levels are checked against the simulated instruments."""
    from pnbench.errors import BadInput

    if args.time_scale is not None and args.simulate is None:
        print("note: --time-scale only applies with --simulate; ignored", file=sys.stderr)
    if args.time_scale is None:
        args.time_scale = args.default_time_scale
    if not 0 <= args.time_scale <= TIME_SCALE_MAX:  # also NaN, inf
        raise BadInput(f"--time-scale {args.time_scale}: expected a number from 0 to "
                       f"{TIME_SCALE_MAX:g} (0 = as fast as possible, 1 = real instrument "
                       "time)")
    if getattr(args, "out", None) is not None:
        check_out_dir(args.out)
    if args.simulate is not None:
        from pnbench.drivers.sim.device import resolve_device

        device = resolve_device(args.simulate)  # DeviceFileError names the file and key
        if plan is not None:
            from pnbench.sweeps.ratings import check_simulated

            check_simulated(plan, device)


def run(args) -> int:
    from pnbench.sweeps.launch import Launch
    from pnbench.sweeps.plan import load_plan
    from pnbench.tui.headless import app_available, run_headless

    plan = load_plan(args.plan)
    check_bench_options(args, plan)
    if not args.headless and sys.stdout.isatty() and app_available():
        from pnbench.tui.app.application import run_app

        return run_app(plan_path=args.plan, bench=sim_backend(args), out_dir=args.out,
                       autostart=True, report=not args.no_report)
    launch = Launch.new(on_bench(plan, args), out_dir=args.out)
    return run_headless(launch, plan, report=not args.no_report)


def sim_backend(args) -> str | None:
    """What --simulate and --time-scale choose: the simulated bench as a backend string
    (``DUT@pnsim:time_scale=X``, as pyvisa-sim is ``FILE.yaml@sim``), or None."""
    if args.simulate is None:
        return None
    from pnbench.drivers.sim.backend import backend_for

    return backend_for(args.simulate, args.time_scale)


def on_bench(plan, args):
    """``plan`` on the bench the options choose: with --simulate, its instruments become
    the simulated bench; as written otherwise."""
    backend = sim_backend(args)
    return plan if backend is None else plan.on_simulated_bench(backend)
