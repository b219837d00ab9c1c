"""Speed and memory of the acquisition pipeline.

    python tests/benchmarks/pipeline.py [--points N] [--memory-points M]

1. per_point_ratio: the whole pipeline's cost per point (drivers + run folder + events +
   the fit worker, fitting on as in a real run), at time scale 0 on the simulated bench
   over a real loopback socket, divided by the bare round trip of the same one-message
   set-and-read query (the `;`-joined message the SMU role sends per point) on the same
   bench. Rounds are interleaved (each round measures the bare message, `*OPC?`, the
   pipeline with fitting on and with it off, in an order that turns from round to round)
   and each ratio is taken within its round, so a machine that slows down for a while
   slows both sides of it; the median over the rounds is the figure, with the spread
   (lowest and highest round) beside it. The aim is at most 1.3. fit_off_ratio is the
   same with fitting off: the difference is what the fit thread costs the acquisition
   thread (through the interpreter lock). cpu_ratio compares the process's CPU time per
   point the same way (simulator, pipeline and fit thread together): on a loaded machine
   it varies far less than the wall time. That bare message includes the simulator's own
   work (parsing, the device physics), which a real instrument does on its own
   processor; so also
2. opc_ratio: the same pipeline cost against a bare `*OPC?` round trip (the transport
   alone, nearly no work on the simulated instrument): what the pipeline costs on top
   of the wire, simulator included.
3. pipeline_points_per_s: points per second of that pipeline.
4. rss_growth_MB over a long run (default 300 000 points, --memory-points): the runner,
   run folder, event stream and the fit worker with fitting on, driven by a fast
   in-process fake SMU (tests/sweepfake.py; no sockets), with a listener that queues
   every event as the app does. The fit worker keeps every point as columns (about 41
   bytes) and the running step's fitter its own copy, so some growth per point is by
   design: rss_bytes_per_point states it (from the first 20 000 points to the last
   point, RSS from /proc/self/status); rss_end_MB is after the run's final fit over
   every point, whose working memory grows with the run. The fake SMU never waits on
   I/O, so the acquisition thread holds the interpreter lock nearly all the time and
   the fit thread falls behind; it takes the rows from the columns when it gets the
   lock, so nothing queues. ``--memory-points 0`` leaves this part out.

The last line printed is one JSON object with the figures.
"""

from __future__ import annotations

import argparse
import collections
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from plantext import forward, limits, plan_text  # noqa: E402
from sweepfake import FakeBench, FakeSmu  # noqa: E402

from pnbench.drivers.dialect import load_dialect  # noqa: E402
from pnbench.drivers.opening import open_session  # noqa: E402
from pnbench.drivers.roles import Smu  # noqa: E402
from pnbench.drivers.sim.bench import SimBench  # noqa: E402
from pnbench.sweeps.events import EventBus  # noqa: E402
from pnbench.sweeps.fitfeed import FitWorker  # noqa: E402
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


def clock() -> tuple[float, float]:
    """(wall, the process's CPU) seconds: a side's cost is both per point, since the
    CPU time is what a loaded machine hands out and the wall time what a run waits."""
    return time.perf_counter(), time.process_time()


def per_point(start: tuple[float, float], end: tuple[float, float], n: int):
    return (end[0] - start[0]) / n, (end[1] - start[1]) / n


def bare_round_trip_s(sim: SimBench, n: int) -> tuple[float, float]:
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
        start = clock()
        for m in messages:
            session.ask(m)
        elapsed = per_point(start, clock(), n)
        smu.safe_off()
        return elapsed
    finally:
        session.close()


def opc_round_trip_s(sim: SimBench, n: int) -> tuple[float, float]:
    """A bare `*OPC?` query and its reply: the transport with nearly no instrument work."""
    dialect = load_dialect()
    session = open_session(sim.smu_resource, dialect=dialect)
    try:
        for _ in range(50):
            session.ask("*OPC?")
        start = clock()
        for _ in range(n):
            session.ask("*OPC?")
        return per_point(start, clock(), n)
    finally:
        session.close()


def pipeline_per_point_s(n: int, out: Path, fit: bool = True) -> tuple[float, float]:
    stamps: list[tuple[float, float]] = []

    def listener(event) -> None:
        if event.kind == "point":
            stamps.append(clock())

    launch = Launch.new(plan_of(1, n).on_simulated_bench(f"{DEVICE}@pnsim:time_scale=0"),
                        out_dir=out, listeners=[listener], fit=fit)
    outcome = launch.run()
    if outcome.status != "completed" or len(stamps) != n:
        raise SystemExit(f"pipeline run did not complete: {outcome}")
    return per_point(stamps[0], stamps[-1], n - 1)


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
            if marks["points"] == total:  # before the run's final fit
                marks["rss_last_point_kB"] = rss_kB()

    bus.add_listener(listener)
    bench = FakeBench(roles={"smu": FakeSmu(noise_rel=1e-3)})
    fit = FitWorker(plan.steps, bus, temperature_K=plan.device.temperature_K)
    runner = Runner(plan, folder, bench, bus, fit=fit, time_scale=0.0)
    outcome = runner.run()
    folder.close()
    end_kB = rss_kB()
    return {"status": outcome.status, "points": total,
            "rss_start_MB": marks["rss_start_kB"] / 1024, "rss_end_MB": end_kB / 1024,
            "rss_growth_MB": (end_kB - marks["rss_start_kB"]) / 1024,
            "rss_bytes_per_point": (marks["rss_last_point_kB"] - marks["rss_start_kB"]) * 1024
            / (total - WARM_UP),
            "rss_last_point_MB": marks["rss_last_point_kB"] / 1024,
            "fake_points_per_s": (total - WARM_UP) / (time.perf_counter() - marks["t_start"]),
            "points_csv_MB": (folder.path / "points.csv").stat().st_size / 2**20}


def one_round(k: int, points: int, out: Path) -> dict[str, float]:
    """Seconds per point of each side, measured in an order that turns with ``k``."""
    got: dict[str, float] = {}

    def bare() -> None:
        sim = SimBench.start(DEVICE, time_scale=0.0)
        try:
            got["bare"], got["bare_cpu"] = bare_round_trip_s(sim, points)
            got["opc"], got["opc_cpu"] = opc_round_trip_s(sim, points)
        finally:
            sim.close()

    def fit_on() -> None:
        got["on"], got["on_cpu"] = pipeline_per_point_s(points, out / f"on{k}")

    def fit_off() -> None:
        got["off"], got["off_cpu"] = pipeline_per_point_s(points, out / f"off{k}",
                                                          fit=False)

    order = [bare, fit_on, fit_off]
    for side in order[k % 3:] + order[:k % 3]:
        side()
    return got


def spread(values: list[float]) -> str:
    return (f"{statistics.median(values):.2f} (rounds {min(values):.2f}..{max(values):.2f})"
            if values else "-")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=3000)
    parser.add_argument("--memory-points", type=int, default=300_000)
    parser.add_argument("--rounds", type=int, default=6,
                        help="interleaved rounds (each ratio within a round; the median "
                        "over rounds counts)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        rounds = [one_round(k, args.points, out) for k in range(args.rounds)]
        ratio = [r["on"] / r["bare"] for r in rounds]
        off_ratio = [r["off"] / r["bare"] for r in rounds]
        opc_ratio = [r["on"] / r["opc"] for r in rounds]
        cpu_ratio = [r["on_cpu"] / r["bare_cpu"] for r in rounds]
        cpu_off_ratio = [r["off_cpu"] / r["bare_cpu"] for r in rounds]

        def us(key):
            return ", ".join(f"{r[key] * 1e6:.0f}" for r in rounds)

        def med(key):
            return statistics.median(r[key] for r in rounds)
        baseline, opc, per_point = med("bare"), med("opc"), med("on")
        print(f"bare set-and-read message:   {baseline * 1e6:.1f} us (rounds: {us('bare')})")
        print(f"bare *OPC? round trip:       {opc * 1e6:.1f} us (rounds: {us('opc')})")
        print(f"whole pipeline per point:    {per_point * 1e6:.1f} us "
              f"({1 / per_point:.0f} points/s, fitting on; rounds: {us('on')})")
        print(f"  the same with fitting off: {med('off') * 1e6:.1f} us (rounds: {us('off')})")
        print(f"per_point_ratio:             {spread(ratio)} (aim <= 1.3)")
        print(f"fit_off_ratio:               {spread(off_ratio)}")
        print(f"opc_ratio:                   {spread(opc_ratio)}")
        print(f"cpu_ratio:                   {spread(cpu_ratio)} (process CPU per point, "
              f"fitting on; off: {spread(cpu_off_ratio)}; bare {med('bare_cpu') * 1e6:.0f} "
              f"us, pipeline {med('on_cpu') * 1e6:.0f} us)")
        if not args.memory_points:
            memory = None
        else:
            memory = memory_run(args.memory_points, out / "memory")
            print(f"{args.memory_points} points on the fake SMU: RSS {memory['rss_start_MB']:.1f} "
                  f"-> {memory['rss_last_point_MB']:.1f} MB at the last point "
                  f"({memory['rss_bytes_per_point']:.0f} B/point, fitting on) -> "
                  f"{memory['rss_end_MB']:.1f} MB after the final fit, "
                  f"{memory['fake_points_per_s']:.0f} points/s, points.csv "
                  f"{memory['points_csv_MB']:.0f} MB")
    print(json.dumps({
        "per_point_ratio": round(statistics.median(ratio), 3),
        "per_point_ratio_rounds": [round(x, 3) for x in ratio],
        "fit_off_ratio": round(statistics.median(off_ratio), 3),
        "opc_ratio": round(statistics.median(opc_ratio), 3),
        "cpu_ratio": round(statistics.median(cpu_ratio), 3),
        "cpu_off_ratio": round(statistics.median(cpu_off_ratio), 3),
        "opc_round_trip_us": round(opc * 1e6, 1),
        "pipeline_points_per_s": round(1 / per_point, 1),
        "pipeline_us_per_point": round(per_point * 1e6, 1),
        "bare_round_trip_us": round(baseline * 1e6, 1),
        **({} if memory is None else {
            "memory_points": memory["points"],
            "rss_growth_MB": round(memory["rss_growth_MB"], 3),
            "rss_bytes_per_point": round(memory["rss_bytes_per_point"], 1),
            "rss_last_point_MB": round(memory["rss_last_point_MB"], 1),
            "rss_end_MB": round(memory["rss_end_MB"], 1),
            "fake_pipeline_points_per_s": round(memory["fake_points_per_s"], 1)}),
    }))


if __name__ == "__main__":
    main()
