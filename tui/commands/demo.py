"""`pnbench demo`: a full characterization on the simulated bench, ending in a model card."""

from __future__ import annotations

import argparse
import sys
from importlib import resources
from pathlib import Path

from pnbench.tui.commands.run import (
    add_bench_options,
    check_bench_options,
    on_bench,
    sim_backend,
)

HELP = "characterize a bundled part on the simulated bench (I-V, C-V, admittance, model card)"
DEFAULT_DEVICE = "lh-vc510"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--headless", action="store_true",
                        help="progress on the terminal instead of the app")
    add_bench_options(parser, time_scale=1.0)
    parser.add_argument("--out", default="runs", metavar="DIR",
                        help="folder in which the run folder is created (default: runs)")
    parser.add_argument("--no-report", action="store_true",
                        help="do not write report.html at the end")


def bundled_plans() -> dict[str, Path]:
    folder = resources.files("pnbench.sim_configs") / "plans"
    return {p.name.removesuffix(".toml"): Path(str(p)) for p in folder.iterdir()
            if p.name.endswith(".toml")}


def demo_plan(simulate: str) -> Path:
    """The bundled plan for a bundled device (by its name or file name); the default
    device's plan otherwise."""
    plans = bundled_plans()
    key = Path(simulate).name.lower().removesuffix(".toml")
    return plans.get(key, plans[DEFAULT_DEVICE])


def plan_for(simulate: str, out_dir: str) -> Path:
    """The bundled plan of a bundled part (by name, file name or the part named in the
    device file); for a device file of one's own, a plan fitted to it, written under
    `out_dir` so the run folder keeps a copy as always."""
    from pnbench.drivers.sim.device import resolve_device
    from pnbench.tui.commands.demoplan import fitted_plan_text

    plans = bundled_plans()
    key = Path(simulate).name.lower().removesuffix(".toml")
    if key in plans:
        return plans[key]
    device = resolve_device(simulate)  # DeviceFileError names the file and key
    part = device.part.lower()
    if part in plans:
        return plans[part]
    folder = Path(out_dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{key}-demo-plan.toml"
    path.write_text(fitted_plan_text(device), encoding="utf-8")
    return path


def run(args) -> int:
    from pnbench.sweeps.launch import Launch
    from pnbench.sweeps.plan import load_plan
    from pnbench.tui.headless import app_available, run_headless

    simulate = args.simulate or DEFAULT_DEVICE
    args.simulate = simulate
    plan_path = plan_for(simulate, args.out)
    plan = load_plan(plan_path)
    check_bench_options(args, plan)
    print(f"demo: plan {plan_path.name} on the simulated bench with {simulate} "
          f"(time scale {args.time_scale:g})", file=sys.stderr)
    if not args.headless and sys.stdout.isatty() and app_available():
        from pnbench.tui.app.application import run_app

        return run_app(plan_path=plan_path, bench=sim_backend(args), out_dir=args.out,
                       autostart=True, report=not args.no_report)
    launch = Launch.new(on_bench(plan, args), out_dir=args.out)
    return run_headless(launch, plan, report=not args.no_report)
