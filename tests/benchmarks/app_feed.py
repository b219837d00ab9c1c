"""Does the app keep up with a long sweep, at the same cost per point and flat memory?

    python tests/benchmarks/app_feed.py [--big] [--sizes 10000,100000] [--keep DIR]

For each size the plan of `overnight.py` (ten steps, forward I-V and C-V in turn) runs on
the simulated bench at time scale 0, fitting on, no report, twice, each in its own
process: once with `pnbench run --headless`, once in the app (its run screen at 80x24,
driven by Textual's pilot with the headless driver, so everything is drawn as on a
terminal). From each run:

* wall_per_point_us: from the first to the last point (points.csv ``time_s``) over the
  points between them: the acquisition's pace, which the app's UI thread slows when it
  holds the interpreter lock;
* peak_rss_MiB: the process's peak resident memory (``wait4`` rusage), end work
  included, and acquisition_peak_rss_MiB its high-water mark up to the last point;
* for the app, shown_lag_s: from the last point to the moment the app's state held
  every point (how far its feed fell behind; its drain runs every 0.1 s), and
  shown_points.

The last line printed is one JSON object with every figure and the ratios: the app
against headless at each size (time per point, peak RSS), and the app's largest size
against its smallest (peak RSS up to the last point). The aims: the app within 1.3x of
headless in time per point, and its memory flat (ratio near 1) between 1e4 and 1e5
points. On a shared machine the ratios mean more than the absolute figures.

Measured on 2 shared cores under load, before and after the app took its points as
columns and bounded its plot data and redraws: at 1e5 points the app went from 7179 to
592 us a point (headless 641 and 443 in the same rounds: x11.2 -> x1.34), its peak RSS
from 298 to 150 MiB (headless 115 and 110), and it showed the last point 15.7 s -> 0.16 s
after it was taken. On a lighter load afterwards: app against headless x0.95 (1e4) and
x1.21 (1e5) in time per point; the app's RSS up to the last point 118 MiB at 1e4 and
140 MiB at 1e5 (x1.19; headless 95 and 104, x1.09), last point shown 0.07 s after it
was taken. At 1e6 (one run each, not interleaved): 467 against 502 us a point, peak RSS
273 against 234 MiB, the last point shown 0.09 s after it was taken.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import math
import os
import subprocess
import sys
import tempfile
import threading
import time
from datetime import datetime
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))
from overnight import DEVICE, at_last_point, memory_samples, plan_for  # noqa: E402


async def app_child(plan: Path, out: Path, result: Path) -> None:
    """Run `plan` in the app (pilot, 80x24) and write what it showed to `result`."""
    from pnbench.tui.app.application import PnbenchApp

    app = PnbenchApp(plan, bench=f"{DEVICE}@pnsim:time_scale=0", out_dir=out,
                     autostart=True, report=False)
    figures: dict = {}
    counts: list[tuple[float, int]] = []  # (time, points the app's state holds)
    async with app.run_test(size=(80, 24)) as pilot:
        while app.live is None or app.live.run_dir is None:
            await pilot.pause(0.05)
        while app.live.running or not app.state.finished:
            await pilot.pause(0.05)
            counts.append((time.time(), app.state.point_count))
        figures["counts"] = counts
        figures["shown_points"] = app.state.point_count
        figures["status"] = app.state.status
        await pilot.pause(0.3)  # a last redraw of everything
        await pilot.press("ctrl+q")
        await pilot.pause(0.2)
    result.write_text(json.dumps(figures), encoding="utf-8")


def point_times(run_dir: Path) -> np.ndarray:
    with open(run_dir / "points.csv", encoding="utf-8") as f:
        return np.array([float(line.split(",", 4)[3]) for line in f
                         if line[:1] not in ("#", "s")])


def one_run(points: int, base: Path, mode: str) -> dict:
    out = base / f"{mode}{points}"
    out.mkdir(parents=True, exist_ok=True)
    plan = out / "plan.toml"
    plan.write_text(plan_for(points), encoding="utf-8")
    result = out / "app.json"
    if mode == "app":
        cmd = [sys.executable, __file__, "--child", str(plan), str(out / "runs"), str(result)]
    else:
        cmd = [sys.executable, "-m", "pnbench.tui.cli", "run", str(plan), "--simulate",
               DEVICE, "--time-scale", "0", "--headless", "--no-report", "--out",
               str(out / "runs")]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    stop = threading.Event()
    samples = memory_samples(proc.pid, stop)
    _, status, usage = os.wait4(proc.pid, 0)
    stop.set()
    code = os.waitstatus_to_exitcode(status)
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    run_dir = next((out / "runs").iterdir())
    run = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    started = datetime.fromisoformat(run["started"].replace("Z", "+00:00")).timestamp()
    t = point_times(run_dir)
    _, hwm_last = at_last_point(samples, started + t[-1])
    figures = {"mode": mode, "points": int(t.size), "exit_code": code,
               "status": run["status"], "peak_rss_MiB": usage.ru_maxrss / 1024.0,
               "acquisition_peak_rss_MiB": hwm_last,
               "wall_per_point_us": (t[-1] - t[0]) / max(t.size - 1, 1) * 1e6,
               "stderr_tail": err[-300:] if code else ""}
    if mode == "app" and result.exists():
        shown = json.loads(result.read_text(encoding="utf-8"))
        figures["shown_points"] = shown["shown_points"]
        every = next((at for at, n in shown["counts"] if n >= t.size), math.nan)
        figures["shown_lag_s"] = every - (started + t[-1])
    return figures


def main() -> None:
    if sys.argv[1:2] == ["--child"]:
        plan, out, result = (Path(a) for a in sys.argv[2:5])
        asyncio.run(app_child(plan, out, result))
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,100000", help="point counts, comma-separated")
    ap.add_argument("--big", action="store_true", help="also run 1 000 000 points")
    ap.add_argument("--keep", type=Path, help="keep the run folders here")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")] + ([1_000_000] if args.big else [])
    with tempfile.TemporaryDirectory() as tmp:
        base = args.keep or Path(tmp)
        runs: dict[int, dict[str, dict]] = {}
        for n in sizes:
            for mode in ("headless", "app"):  # interleaved: the load is the same for both
                r = one_run(n, base, mode)
                runs.setdefault(n, {})[mode] = r
                lag = (f", shown {r['shown_points']} points {r['shown_lag_s']:.2f} s after "
                       "the last" if "shown_lag_s" in r else "")
                print(f"{mode:>8} {r['points']:>8} points: {r['wall_per_point_us']:7.0f} "
                      f"us/point, peak RSS {r['peak_rss_MiB']:6.1f} MiB (until the last "
                      f"point {r['acquisition_peak_rss_MiB']:.1f}){lag}, exit "
                      f"{r['exit_code']}", flush=True)
    ratios = {f"app_vs_headless_{n}": {
        "wall_per_point": r["app"]["wall_per_point_us"] / r["headless"]["wall_per_point_us"],
        "peak_rss": r["app"]["peak_rss_MiB"] / r["headless"]["peak_rss_MiB"],
        "acquisition_peak_rss": r["app"]["acquisition_peak_rss_MiB"]
        / r["headless"]["acquisition_peak_rss_MiB"]} for n, r in runs.items()}
    small, large = runs[sizes[0]]["app"], runs[sizes[-1]]["app"]
    ratios[f"app_{sizes[-1]}_vs_{sizes[0]}"] = {
        "acquisition_peak_rss": large["acquisition_peak_rss_MiB"]
        / small["acquisition_peak_rss_MiB"],
        "peak_rss": large["peak_rss_MiB"] / small["peak_rss_MiB"],
        "wall_per_point": large["wall_per_point_us"] / small["wall_per_point_us"]}
    print(json.dumps({"runs": {str(n): r for n, r in runs.items()}, "ratios": ratios}))


if __name__ == "__main__":
    main()
