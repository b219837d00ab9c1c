"""`pnbench report RUN_DIR`: (re)make the report of a run folder."""

from __future__ import annotations

import argparse
import json

HELP = "write the report of a run folder (report.html and figures/) from its files"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run_dir", metavar="RUN_DIR",
                        help="the run folder (holds run.json, points.csv, events.jsonl)")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object (report path, figure files, what is "
                             "missing) instead of text")


def run(args: argparse.Namespace) -> int:
    from pnbench.tui.report import build_report

    report = build_report(args.run_dir)
    if args.json:
        print(json.dumps({"report": str(report.path),
                          "figures": [str(p) for p in report.figures],
                          "missing": list(report.missing)}))
        return 0
    print(f"report: {report.path}")
    pngs = [p for p in report.figures if p.suffix == ".png"]
    where = pngs[0].parent if pngs else report.path.parent
    print(f"figures: {len(pngs)} in {where} (PNG and SVG)")
    for line in report.missing:
        print(f"missing: {line}")
    return 0
