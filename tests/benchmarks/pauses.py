"""Pauses between points, and how much of each was the machine's doing.

    python tests/benchmarks/pauses.py [--points 100000]

On a shared machine a long gap between two points is often no pause of ours: the
acquisition thread, or the simulated instrument's thread it waits on, was ready to run
and no core was free, or the fit thread was put off a core while it held the interpreter
lock. Linux counts per thread the time spent on a core and the time spent waiting on a
run queue (/proc/self/task/TID/schedstat). This runs the overnight plan shape
(`overnight.plan_for`) in this process, on the simulated bench at time scale 0 with
fitting on, and at every point reads both counts for every thread of the process. Each
gap is reported three ways:

* ``gaps``: the wall time;
* ``without_waits_for_a_core``: less the longer of the acquisition and simulator
  threads' waits for a core (what the earlier version of this benchmark reported; the
  fit thread's waits are listed beside it but not taken out, since nothing here tells
  whether it held the interpreter lock while it waited);
* ``process_cpu``: the CPU time every thread of the process spent during the gap,
  capped at the gap. The interpreter lock lets one thread run Python at a time, so on an
  idle machine a gap is about this long; it is the best estimate of the pause the run
  itself causes, whatever the machine's load (it counts numpy work that runs without
  the lock beside the acquisition as pause, so it errs long);
* ``fit_thread_cpu``: the fit thread's share of that, what the live fits cost a gap.

The figures are the longest, the 99th and 99.9th percentiles and the count over 50 ms,
then the six longest gaps (by ``process_cpu``) with their parts and the fit thread's
share. The last line printed is one JSON object with the figures. Linux only.

Measured on 2 shared cores (load ~7) with the fit thread's fixes of issue 16 (one BLAS
thread, warm-up before the first point, a 1 ms switch interval, blocked sums): over 1e5
points no gap over 50 ms once the waits for a core are taken out (longest 30 ms), the
fit thread's share of any gap at most 15 ms; over 3e5 points (30 000-point steps) 3 gaps
over 50 ms less the waits (the longest 109 ms, in a gap of 237 ms of which the fit
thread waited 126 ms for a core: the load), the fit thread's share over 50 ms once. The
simulated bench's own thread takes 20-40 ms now and then (drivers/sim), with no fit
work in the gap. Before the fixes a threaded BLAS's dot products alone held the lock
for up to 100 ms behind a 100k-point noise estimate, and with Python's 5 ms switch
interval the fit thread took up to 60 ms of a single gap.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

# isort: off
import pnbench  # noqa: F401 - first, as in the command: it sets the BLAS threads
import numpy as np
# isort: on

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from overnight import DEVICE, plan_for  # noqa: E402

from pnbench.sweeps.launch import Launch  # noqa: E402
from pnbench.sweeps.plan import parse_plan  # noqa: E402

#: How often (in points) the list of the process's threads is read again.
RESCAN_POINTS = 500


class ThreadClocks:
    """Per thread of this process: seconds on a core and seconds waiting for one so far
    (schedstat), by native thread id."""

    def __init__(self) -> None:
        self._files: dict[int, object] = {}

    def rescan(self) -> None:
        for name in os.listdir("/proc/self/task"):
            tid = int(name)
            if tid not in self._files:
                try:
                    self._files[tid] = open(f"/proc/self/task/{tid}/schedstat", "rb",  # noqa: SIM115
                                            buffering=0)
                except OSError:
                    pass

    def read(self, tid: int | None) -> tuple[float, float]:
        """(on a core, waiting for a core) of one thread, 0 for one gone or unknown."""
        f = self._files.get(tid) if tid is not None else None
        if f is None:
            return 0.0, 0.0
        try:
            f.seek(0)
            on, wait = f.read().split()[:2]
        except (OSError, ValueError):
            return 0.0, 0.0
        return int(on) / 1e9, int(wait) / 1e9

    def process_cpu_s(self) -> float:
        """CPU seconds of every thread known so far (ended threads keep their last)."""
        return sum(self.read(tid)[0] for tid in list(self._files))

    def close(self) -> None:
        for f in self._files.values():
            f.close()


def thread_id(name: str) -> int | None:
    return next((t.native_id for t in threading.enumerate() if t.name == name), None)


def measure(points: int, out: Path) -> dict:
    plan = parse_plan(plan_for(points), "overnight.toml").on_simulated_bench(
        f"{DEVICE}@pnsim:time_scale=0")
    wall = np.zeros(points)
    waited = np.zeros((points, 3))  # acquisition, simulator and fit threads
    fit_cpu = np.zeros(points)
    cpu = np.zeros(points)  # every thread's
    clock = ThreadClocks()
    seen = [0]
    tids: dict[str, int | None] = {}

    def listener(event) -> None:
        k = seen[0]
        if event.kind != "point" or k >= points:
            return
        if k % RESCAN_POINTS == 0 or None in tids.values():
            clock.rescan()
            tids.update(main=threading.get_native_id(), sim=thread_id("pnbench-simbench"),
                        fit=thread_id("pnbench-fit"))
        wall[k] = time.perf_counter()
        reads = {name: clock.read(tid) for name, tid in tids.items()}
        waited[k] = [reads["main"][1], reads["sim"][1], reads["fit"][1]]
        fit_cpu[k] = reads["fit"][0]
        cpu[k] = clock.process_cpu_s()
        seen[0] = k + 1

    try:
        outcome = Launch.new(plan, out_dir=out, listeners=[listener]).run()
    finally:
        clock.close()
    n = seen[0]
    gaps = np.diff(wall[:n]) * 1e3
    waits = np.diff(waited[:n], axis=0) * 1e3
    machine = waits[:, :2].max(axis=1)
    own = np.maximum(gaps - machine, 0.0)
    # a thread first seen at a rescan adds all its earlier CPU at once: never above the gap
    busy = np.clip(np.diff(cpu[:n]) * 1e3, 0.0, gaps)
    fit_busy = np.clip(np.diff(fit_cpu[:n]) * 1e3, 0.0, gaps)
    worst = np.argsort(busy)[::-1][:6]

    def figures(x: np.ndarray) -> dict:
        return {"longest_ms": float(x.max()), "after_point": int(np.argmax(x) + 1),
                "p99_ms": float(np.percentile(x, 99)),
                "p999_ms": float(np.percentile(x, 99.9)),
                "over_50_ms": int((x > 50).sum())}

    return {"points": n, "status": str(outcome.status),
            "wall_per_point_us": float((wall[n - 1] - wall[0]) / (n - 1) * 1e6),
            "gaps": figures(gaps), "without_waits_for_a_core": figures(own),
            "process_cpu": figures(busy), "fit_thread_cpu": figures(fit_busy),
            "longest": [{"after_point": int(i + 1), "gap_ms": float(gaps[i]),
                         "process_cpu_ms": float(busy[i]),
                         "fit_thread_cpu_ms": float(fit_busy[i]),
                         "waited_for_a_core_ms": float(machine[i]),
                         "fit_thread_waited_ms": float(waits[i, 2])} for i in worst]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=100_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        r = measure(args.points, Path(tmp))
    print(f"{r['points']} points, {r['wall_per_point_us']:.0f} us/point")
    for key, label in (("gaps", "gaps between points"),
                       ("without_waits_for_a_core", "less the waits for a core"),
                       ("process_cpu", "the process's CPU in them"),
                       ("fit_thread_cpu", "the fit thread's share")):
        f = r[key]
        print(f"{label:>27}: longest {f['longest_ms']:.1f} ms (after point "
              f"{f['after_point']}), 99 % under {f['p99_ms']:.2f} ms, 99.9 % under "
              f"{f['p999_ms']:.2f} ms, {f['over_50_ms']} over 50 ms")
    for w in r["longest"]:
        print(f"  after point {w['after_point']}: {w['gap_ms']:6.1f} ms, the process's CPU "
              f"{w['process_cpu_ms']:.1f} ms (the fit thread's {w['fit_thread_cpu_ms']:.1f});"
              f" waiting for a core {w['waited_for_a_core_ms']:.1f} ms (the fit thread "
              f"{w['fit_thread_waited_ms']:.1f} ms)")
    print(json.dumps(r))


if __name__ == "__main__":
    main()
