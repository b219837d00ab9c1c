"""Long unattended runs: does a run cost the same per point, hold flat memory and end
promptly however long it is?

    python tests/benchmarks/overnight.py [--big] [--sizes 10000,100000] [--keep DIR]

Each size runs the same plan shape (ten steps, forward I-V and C-V in turn, the points
split evenly between them, no two steps at the same levels) with
`pnbench run --headless --no-report` on the simulated bench at time scale 0, each in its
own process, fitting on. From each run:

* peak_rss_MiB: the run process's peak resident memory (``wait4`` rusage), end work
  included; acquisition_peak_rss_MiB: its peak until the last point (the kernel's
  high-water mark, VmHWM, read from /proc every RSS_POLL_S), and rss_last_point_MiB its
  resident memory then (VmRSS): the acquisition side apart from the run's final fit;
* wall_per_point_us: the time from the first to the last point (points.csv ``time_s``)
  divided by the points between them;
* end_tail_s: from the last point to the run process's exit (run start from run.json,
  plus the last point's ``time_s``, against the moment the process was reaped);
* longest_pause_ms: the longest gap between two consecutive points, and where it was
  (``longest_pause_where``: the step and the point); also the longest within a step (a
  step's first point waits for the instrument to be configured for it) and the 99th and
  99.9th percentiles of the gaps. On a shared machine the longest pause includes
  whatever else the machine was doing (another process holding both cores); the
  percentiles say what is typical, and `pauses.py` takes the machine's share out.

The ratios (second size against the first, and with ``--big`` 1e6 against 1e4) are what
means something on a shared machine; the absolute figures depend on the machine's load.
The last line printed is one JSON object with every figure; its last key, ``done_when``,
gives per size what the issue's done-when lines read: peak RSS (and until the last
point), the end tail, and the longest pause with where it fell.

Measured on 2 shared cores (load 4-6, 640 us a point at both sizes), before and after the
run's final fit got its closed-form meter model and its coarse-to-fine rounds
(modeling/describing.py, modeling/coarse.py): end tail at 1e4 1.09 s -> 0.52 s, at 1e5
13.8 s -> 3.0 s (the final fit's CPU at 1e5 11.8 s -> 1.9 s with estimated noise, 0.75 s
against the simulated bench's stated noise; the rest is the load); peak RSS 1e5 vs 1e4
x1.42 -> x1.30.

Measured with ``--big`` (same shared machine, load ~7), after the BLAS was held to one
thread, the fit worker's warm-up and 1 ms switch interval, the blocked noise sums and
model values, and the final fit taking the worker's columns without a copy: 1e4 / 1e5 /
1e6 points at 634 / 468 / 496 us a point, peak RSS 97.3 / 109.8 / 212.4 MiB (1e6 before:
297 MiB on an idle machine, 289 under load), until the last point 94.8 / 102.4 /
151.1 MiB, end tail 0.95 / 0.73 / 12.2 s (the 1e6 final fit's 6 s of CPU, stretched by
the load), pauses 99.9 % under 23.3 / 11.2 / 12.4 ms. The longest raw pauses (113, 181,
328 ms) were the machine's: `pauses.py` over 1e5 points found no gap where the run's
own threads used more than 30 ms of CPU (the fit thread's share at most 15 ms).
"""

from __future__ import annotations

import argparse
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

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from plantext import cv, forward, limits, plan_text  # noqa: E402

DEVICE = "lh-vc510"
STEPS = 10
RSS_POLL_S = 0.1


def plan_for(points: int) -> str:
    per = max(2, points // STEPS)
    # every step's levels differ a little from the others': the simulated instruments
    # remember recent operating points, and repeated levels would make short runs look
    # cheaper than long ones (their steps fit in that memory, a long run's do not)
    steps = [forward(f"iv{k}", points=per, stop=f"{0.75 + 1e-3 * k:.4f} V") if k % 2 == 0
             else cv(f"cv{k}", bias_stop=f"{-20 - 0.1 * k:.2f} V", bias_points=per,
                     frequencies=None, frequency="100 kHz", ac_level="20 mV")
             for k in range(STEPS)]
    return plan_text(*steps, plan={"format": 1, "title": "overnight benchmark"},
                     device={"name": "LH-VC510", "temperature": "300.15 K"},
                     limits=limits(max_power="1 W"))


def point_times(run_dir: Path) -> tuple[np.ndarray, np.ndarray, list[str], np.ndarray]:
    """Each point's time, whether it starts a new step, its step and its index there."""
    with open(run_dir / "points.csv", encoding="utf-8") as f:
        cells = [line.split(",", 4) for line in f if line[:1] not in ("#", "s")]
    steps = np.array([c[0] for c in cells])
    first = np.concatenate([[True], steps[1:] != steps[:-1]])
    return (np.array([float(c[3]) for c in cells]), first, [c[0] for c in cells],
            np.array([int(c[1]) for c in cells]))


def where(steps: list[str], index: np.ndarray, first: np.ndarray, k: int) -> str:
    """Where the gap before point ``k`` (0-based) fell, in words."""
    if k <= 0:
        return "before the first point"
    at = f"before point {index[k]} of step {steps[k]} (point {k + 1} of the run)"
    return at + (", the step's first (its configuration comes first)" if first[k] else "")


def memory_samples(pid: int, stop: threading.Event) -> list[tuple[float, float, float]]:
    """(time, VmRSS MiB, VmHWM MiB) of a process every RSS_POLL_S until ``stop`` (or the
    process is gone); filled in by a thread."""
    samples: list[tuple[float, float, float]] = []

    def poll() -> None:
        while not stop.is_set():
            try:
                text = Path(f"/proc/{pid}/status").read_text()
            except OSError:
                return
            fields = dict(line.split(":", 1) for line in text.splitlines() if ":" in line)
            try:
                rss, hwm = (int(fields[k].split()[0]) / 1024 for k in ("VmRSS", "VmHWM"))
            except (KeyError, ValueError, IndexError):
                return  # a zombie has no memory lines
            samples.append((time.time(), rss, hwm))
            stop.wait(RSS_POLL_S)

    threading.Thread(target=poll, daemon=True).start()
    return samples


def at_last_point(samples, t_last: float) -> tuple[float, float]:
    """(VmRSS, VmHWM) of the last sample taken before the last point (NaN without)."""
    before = [s for s in samples if s[0] <= t_last]
    return (before[-1][1], before[-1][2]) if before else (math.nan, math.nan)


def one_run(points: int, base: Path) -> dict:
    out = base / f"n{points}"
    out.mkdir(parents=True, exist_ok=True)
    plan = out / "plan.toml"
    plan.write_text(plan_for(points), encoding="utf-8")
    cmd = [sys.executable, "-m", "pnbench.tui.cli", "run", str(plan), "--simulate", DEVICE,
           "--time-scale", "0", "--headless", "--no-report", "--out", str(out / "runs")]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    stop = threading.Event()
    samples = memory_samples(proc.pid, stop)
    _, status, usage = os.wait4(proc.pid, 0)
    ended = time.time()
    stop.set()
    proc.returncode = os.waitstatus_to_exitcode(status)
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    run_dir = next((out / "runs").iterdir())
    run = json.loads((run_dir / "run.json").read_text(encoding="utf-8"))
    started = datetime.fromisoformat(run["started"].replace("Z", "+00:00")).timestamp()
    t, first, steps, index = point_times(run_dir)
    gaps = np.diff(t)
    within = gaps[~first[1:]]
    worst = int(np.argmax(gaps)) if gaps.size else 0
    inside = np.where(first[1:], -np.inf, gaps)
    worst_within = int(np.argmax(inside)) if within.size else 0
    rss_last, hwm_last = at_last_point(samples, started + t[-1])
    return {
        "points": int(t.size), "exit_code": proc.returncode, "status": run["status"],
        "peak_rss_MiB": usage.ru_maxrss / 1024.0,
        "acquisition_peak_rss_MiB": hwm_last, "rss_last_point_MiB": rss_last,
        "wall_per_point_us": (t[-1] - t[0]) / max(t.size - 1, 1) * 1e6,
        "end_tail_s": ended - (started + t[-1]),
        "longest_pause_ms": float(gaps.max() * 1e3) if gaps.size else 0.0,
        "longest_pause_after_point": worst + 1,
        "longest_pause_where": where(steps, index, first, worst + 1) if gaps.size else "",
        # a step's first point follows the instrument's configuration for that step
        "longest_pause_within_step_ms": float(within.max() * 1e3) if within.size else 0.0,
        "longest_pause_within_step_where": where(steps, index, first, worst_within + 1)
        if within.size else "",
        "pause_p99_ms": float(np.percentile(gaps, 99) * 1e3) if gaps.size else 0.0,
        "pause_p999_ms": float(np.percentile(gaps, 99.9) * 1e3) if gaps.size else 0.0,
        "model_written": (run_dir / "model.json").exists(),
        "stderr_tail": err[-300:] if proc.returncode else "",
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,100000", help="point counts, comma-separated")
    ap.add_argument("--big", action="store_true", help="also run 1 000 000 points")
    ap.add_argument("--keep", type=Path, help="keep the run folders here")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")] + ([1_000_000] if args.big else [])
    with tempfile.TemporaryDirectory() as tmp:
        base = args.keep or Path(tmp)
        runs = []
        for n in sizes:
            r = one_run(n, base)
            runs.append(r)
            print(f"{r['points']:>8} points: {r['wall_per_point_us']:7.0f} us/point, "
                  f"peak RSS {r['peak_rss_MiB']:6.1f} MiB (until the last point "
                  f"{r['acquisition_peak_rss_MiB']:.1f}, at it {r['rss_last_point_MiB']:.1f}),"
                  f" end tail {r['end_tail_s']:5.2f} s,"
                  f" longest pause {r['longest_pause_ms']:6.1f} ms ("
                  f"{r['longest_pause_where']}; within a step "
                  f"{r['longest_pause_within_step_ms']:.1f} ms, "
                  f"{r['longest_pause_within_step_where']}; 99 % under "
                  f"{r['pause_p99_ms']:.1f} ms, 99.9 % under {r['pause_p999_ms']:.1f} ms),"
                  f" exit {r['exit_code']}", flush=True)
    first = runs[0]
    ratios = {f"{r['points']}_vs_{first['points']}": {
        "peak_rss": r["peak_rss_MiB"] / first["peak_rss_MiB"],
        "acquisition_peak_rss": r["acquisition_peak_rss_MiB"]
        / first["acquisition_peak_rss_MiB"],
        "wall_per_point": r["wall_per_point_us"] / first["wall_per_point_us"],
        "end_tail": r["end_tail_s"] / max(first["end_tail_s"], 1e-9)} for r in runs[1:]}
    # what the done-when lines read, per size: last in the JSON
    done_when = {str(r["points"]): {
        "peak_rss_MiB": round(r["peak_rss_MiB"], 1),
        "peak_rss_until_last_point_MiB": round(r["acquisition_peak_rss_MiB"], 1),
        "end_tail_s": round(r["end_tail_s"], 2),
        "longest_pause_ms": round(r["longest_pause_ms"], 1),
        "longest_pause_where": r["longest_pause_where"],
        "longest_pause_within_step_ms": round(r["longest_pause_within_step_ms"], 1),
        "longest_pause_within_step_where": r["longest_pause_within_step_where"],
        "pause_p999_ms": round(r["pause_p999_ms"], 1)} for r in runs}
    print(json.dumps({"runs": runs, "ratios": ratios,
                      "longest_pause_ms": max(r["longest_pause_ms"] for r in runs),
                      "done_when": done_when}))


if __name__ == "__main__":
    main()
