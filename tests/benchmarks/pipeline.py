"""Speed and memory of the acquisition pipeline.

    python tests/benchmarks/pipeline.py [--points N] [--memory-points M]

1. per_point_ratio: the whole pipeline's cost per point (drivers + run folder + events +
   hand-off to the fit worker, with fitting on), at time scale 0 on the simulated bench
   over a real loopback socket, divided by the bare round trip of the same one-message
   query (the message the SMU role sends per point) on the same bench, measured in the
   same run (baseline before and after, averaged). The aim is at most 2.
2. pipeline_points_per_s: points per second of that pipeline.
3. rss_growth_MB over a 1 000 000-point run: the runner, run folder and event stream
   driven by a fast in-process fake SMU (tests/sweepfake.py; no sockets), with a listener
   that queues every event as the app does, fitting off (the incremental fitters keep
   every point by design, so their memory grows with the data). RSS is read from
   /proc/self/status after the first 20 000 points and at the end.

The last line printed is one JSON object with the figures.
"""

from __future__ import annotations

import argparse
import collections
import json
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from plantext import forward, limits, plan_text  # noqa: E402
from sweepfake import FakeBench, FakeSmu  # noqa: E402

from pnbench.drivers.dialect import load_dialect  # noqa: E402
from pnbench.drivers.roles import Smu  # noqa: E402
from pnbench.drivers.session import open_session  # noqa: E402
from pnbench.drivers.sim.bench import SimBench  # noqa: E402
from pnbench.sweeps.events import EventBus  # noqa: E402
from pnbench.sweeps.launch import Launch  # noqa: E402
from pnbench.sweeps.plan import parse_plan  # noqa: E402
from pnbench.sweeps.runner import Runner  # noqa: E402
from pnbench.sweeps.store import RunFolder  # noqa: E402

DEVICE = "lh-vc510"
WARM_UP = 20_000
def plan_of(steps: int, points: int):
    text = plan_text(*(forward(f"s{k}", stop="0.7 V", points=points, nplc=1)
                       for k in range(steps)),
                     device="LH-VC510", limits=limits(max_reverse_voltage=None,
                                                      max_power="1 W"))
    return parse_plan(text, "benchmark.toml")


def bare_round_trip_s(sim: SimBench, n: int) -> float:
    dialect = load_dialect()
    session = open_session(sim.smu_resource, dialect=dialect)
    try:
        smu = Smu(session, dialect)
        smu.configure(source="voltage", limit=0.1)
        smu.output(True)
        c = smu.commands
        messages = [dialect.join([dialect.fill(c.set_voltage, value=0.3 + 0.4 * k / n),
                                  c.read, c.tripped_sourcing_voltage]) for k in range(n)]
        for m in messages[:50]:
            session.ask(m)
        start = time.perf_counter()
        for m in messages:
            session.ask(m)
        elapsed = time.perf_counter() - start
        smu.safe_off()
        return elapsed / n
    finally:
        session.close()


def pipeline_per_point_s(n: int, out: Path) -> float:
    stamps: list[float] = []

    def listener(event) -> None:
        if event.kind == "point":
            stamps.append(time.perf_counter())

    launch = Launch.new(plan_of(1, n), simulate=DEVICE, time_scale=0.0, out_dir=out,
                        listeners=[listener])
    outcome = launch.run()
    if outcome.status != "completed" or len(stamps) != n:
        raise SystemExit(f"pipeline run did not complete: {outcome}")
    return (stamps[-1] - stamps[0]) / (n - 1)


def rss_kB(field: str = "VmRSS") -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    return 0


def memory_run(total: int, out: Path) -> dict:
    steps = 10
    plan = plan_of(steps, total // steps)
    folder = RunFolder.create(out, plan.text, {"device": {"name": "LH-VC510"}}, {})
    bus = EventBus(sink=folder.append_event)
    seen: collections.deque = collections.deque()
    marks: dict[str, float] = {"points": 0}

    def listener(event) -> None:
        seen.append(event)  # as the app does; drained below so it stays short
        if len(seen) > 1000:
            seen.clear()
        if event.kind == "point":
            marks["points"] += 1
            if marks["points"] == WARM_UP:
                marks["rss_start_kB"] = rss_kB()
                marks["t_start"] = time.perf_counter()

    bus.add_listener(listener)
    bench = FakeBench(roles={"smu": FakeSmu()})
    runner = Runner(plan, folder, bench, bus, fit=None, time_scale=0.0)
    outcome = runner.run()
    folder.close()
    end_kB = rss_kB()
    return {"status": outcome.status, "points": total,
            "rss_start_MB": marks["rss_start_kB"] / 1024, "rss_end_MB": end_kB / 1024,
            "rss_growth_MB": (end_kB - marks["rss_start_kB"]) / 1024,
            "fake_points_per_s": (total - WARM_UP) / (time.perf_counter() - marks["t_start"]),
            "points_csv_MB": (folder.path / "points.csv").stat().st_size / 2**20}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=3000)
    parser.add_argument("--memory-points", type=int, default=1_000_000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        sim = SimBench.start(DEVICE, time_scale=0.0)
        try:
            before = bare_round_trip_s(sim, args.points)
        finally:
            sim.close()
        per_point = pipeline_per_point_s(args.points, out / "pipeline")
        sim = SimBench.start(DEVICE, time_scale=0.0)
        try:
            after = bare_round_trip_s(sim, args.points)
        finally:
            sim.close()
        baseline = (before + after) / 2
        print(f"bare one-message round trip: {baseline * 1e6:.1f} us "
              f"(before {before * 1e6:.1f}, after {after * 1e6:.1f})")
        print(f"whole pipeline per point:    {per_point * 1e6:.1f} us "
              f"({1 / per_point:.0f} points/s, fitting on)")
        print(f"per_point_ratio:             {per_point / baseline:.2f} (aim <= 2)")
        memory = memory_run(args.memory_points, out / "memory")
        print(f"{args.memory_points} points on the fake SMU: RSS {memory['rss_start_MB']:.1f} "
              f"-> {memory['rss_end_MB']:.1f} MB (growth {memory['rss_growth_MB']:.2f} MB), "
              f"{memory['fake_points_per_s']:.0f} points/s, points.csv "
              f"{memory['points_csv_MB']:.0f} MB")
    print(json.dumps({
        "per_point_ratio": round(per_point / baseline, 3),
        "pipeline_points_per_s": round(1 / per_point, 1),
        "pipeline_us_per_point": round(per_point * 1e6, 1),
        "bare_round_trip_us": round(baseline * 1e6, 1),
        "memory_points": memory["points"],
        "rss_growth_MB": round(memory["rss_growth_MB"], 3),
        "rss_end_MB": round(memory["rss_end_MB"], 1),
        "fake_pipeline_points_per_s": round(memory["fake_points_per_s"], 1),
    }))


if __name__ == "__main__":
    main()
