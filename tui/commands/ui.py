"""`pnbench ui [PLAN]`: the terminal app (bench, plan, run and review screens)."""

from __future__ import annotations

import argparse

HELP = ("open the terminal app: bench, plan editor and check, live run with plots and "
        "parameters, review of finished runs (keyboard only; 80x24 is enough)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from pnbench.tui.commands.run import add_bench_options

    parser.add_argument("plan", metavar="PLAN", nargs="?",
                        help="plan file to open (optional: the Plan screen opens one, or "
                             "starts from the bundled example)")
    add_bench_options(parser)
    parser.add_argument("--out", metavar="DIR", default="runs",
                        help="folder in which run folders are created (default: runs)")
    parser.add_argument("--no-report", action="store_true",
                        help="do not write report.html when a sweep ends (`pnbench report "
                        "RUN_DIR` makes it later)")


def run(args: argparse.Namespace) -> int:
    import sys

    from pnbench.errors import BadInput
    from pnbench.tui.commands.run import check_bench_options

    check_bench_options(args)
    if args.plan is not None:
        from pathlib import Path

        plan = Path(args.plan)
        if not plan.is_file():
            raise BadInput(f"{plan}: no such plan file (give a TOML plan, or no PLAN to "
                           "start from the Plan screen)")
        try:
            plan.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise BadInput(f"{plan}: cannot be read as a UTF-8 text plan ({exc})") from None
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise BadInput("pnbench ui needs a terminal (stdin and stdout); without one, run "
                       "a plan with `pnbench run PLAN --headless` and follow it with "
                       "`pnbench watch RUN_DIR` from a terminal")
    from pnbench.tui.app.application import run_app
    from pnbench.tui.commands.run import sim_backend

    return run_app(args.plan, bench=sim_backend(args), out_dir=args.out,
                   report=not args.no_report)
