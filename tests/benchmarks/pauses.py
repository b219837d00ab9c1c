"""Pauses between points, and how much of each was the machine's doing.

    python tests/benchmarks/pauses.py [--points 100000]

On a shared machine a long gap between two points is often no pause of ours: the
acquisition thread, or the simulated instrument's thread it waits on, was ready to run
and no core was free. Linux counts that time per thread (the second field of
/proc/self/task/TID/schedstat: time spent waiting on a run queue). This runs the
overnight plan shape (`overnight.plan_for`) in this process, on the simulated bench at
time scale 0 with fitting on, and at every point reads that count for the acquisition
and the simulator threads. For each gap it reports the wall time and what is left after
taking out the longer of the two threads' waits for a core (a bound on our own share:
the interpreter lock held by the fit thread, I/O, the run's own work), as the longest,
the 99th and 99.9th percentiles, and the six longest gaps with their waits. The fit
thread's own waits are listed beside them but not taken out: when it waited for a core
while holding the interpreter lock, the acquisition thread waited too, and nothing here
can tell whether it held it.

The last line printed is one JSON object with the figures. Linux only.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from overnight import DEVICE, plan_for  # noqa: E402

from pnbench.sweeps.launch import Launch  # noqa: E402
from pnbench.sweeps.plan import parse_plan  # noqa: E402


class RunQueueClock:
    """Seconds a thread has waited for a core so far (schedstat), by native thread id."""

    def __init__(self) -> None:
        self._files: dict[int, object] = {}

    def waited_s(self, tid: int | None) -> float:
        if tid is None:
            return 0.0
        f = self._files.get(tid)
        if f is None:
            f = self._files[tid] = open(f"/proc/self/task/{tid}/schedstat", "rb",  # noqa: SIM115
                                        buffering=0)
        f.seek(0)
        return int(f.read().split()[1]) / 1e9

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
    clock = RunQueueClock()
    seen = [0]
    tids: list[int | None] = []

    def listener(event) -> None:
        k = seen[0]
        if event.kind != "point" or k >= points:
            return
        if not tids:
            tids.extend([threading.get_native_id(), thread_id("pnbench-simbench"),
                         thread_id("pnbench-fit")])
        wall[k] = time.perf_counter()
        waited[k] = [clock.waited_s(t) for t in tids]
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
    worst = np.argsort(gaps)[::-1][:6]

    def figures(x: np.ndarray) -> dict:
        return {"longest_ms": float(x.max()), "p99_ms": float(np.percentile(x, 99)),
                "p999_ms": float(np.percentile(x, 99.9)),
                "over_50_ms": int((x > 50).sum())}

    return {"points": n, "status": str(outcome.status),
            "wall_per_point_us": float((wall[n - 1] - wall[0]) / (n - 1) * 1e6),
            "gaps": figures(gaps), "without_waits_for_a_core": figures(own),
            "longest": [{"after_point": int(i + 1), "gap_ms": float(gaps[i]),
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
                       ("without_waits_for_a_core", "less the waits for a core")):
        f = r[key]
        print(f"{label:>27}: longest {f['longest_ms']:.1f} ms, 99 % under {f['p99_ms']:.2f}"
              f" ms, 99.9 % under {f['p999_ms']:.2f} ms, {f['over_50_ms']} over 50 ms")
    for w in r["longest"]:
        print(f"  {w['gap_ms']:6.1f} ms after point {w['after_point']}: "
              f"{w['waited_for_a_core_ms']:.1f} ms of it waiting for a core (the fit "
              f"thread waited {w['fit_thread_waited_ms']:.1f} ms)")
    print(json.dumps(r))


if __name__ == "__main__":
    main()
