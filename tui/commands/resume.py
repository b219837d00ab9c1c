"""`pnbench resume RUN_DIR`: finish an interrupted run where it stopped."""

from __future__ import annotations

import argparse
import sys

from pnbench.tui.commands.run import add_bench_options, check_bench_options, on_bench

HELP = ("continue an interrupted run at its next point (same instruments, same plan), or "
        "finish its end work (model, card, report) when every point was measured")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_dir", metavar="RUN_DIR", help="the run folder to continue")
    add_bench_options(parser)
    parser.add_argument("--no-report", action="store_true",
                        help="do not write report.html at the end (`pnbench report RUN_DIR` "
                        "makes it later)")
    parser.add_argument("--headless", action="store_true",
                        help="progress as lines on the terminal (resume always runs this "
                        "way; follow it in the app with `pnbench watch RUN_DIR`)")
    parser.add_argument("--force-identity", action="store_true",
                        help="continue even if an instrument answers with another serial "
                        "number than the run recorded")


def run(args) -> int:
    from pnbench.drivers.sim.backend import parse
    from pnbench.sweeps.launch import Launch, plan_of_run, simulated_backend
    from pnbench.sweeps.record import read_run
    from pnbench.sweeps.statuses import RunStatus
    from pnbench.tui.headless import run_headless

    run_doc = read_run(args.run_dir)  # a folder where nothing was measured says so
    if run_doc.status == RunStatus.COMPLETED:
        print(f"{args.run_dir}: the run is already completed; nothing to resume")
        return 0
    recorded = simulated_backend(run_doc)
    if args.simulate is None and recorded is not None:
        args.simulate = parse(recorded).device
        print(f"simulated run: using the simulated bench with {args.simulate}",
              file=sys.stderr)
    plan = plan_of_run(args.run_dir, run_doc)
    check_bench_options(args, plan if args.simulate else None)
    launch = Launch.resume_from(args.run_dir, plan=on_bench(plan, args),
                                force_identity=args.force_identity)
    return run_headless(launch, launch.plan, report=not args.no_report)
