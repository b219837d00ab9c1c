"""Speed and memory of the acquisition pipeline.

    nice python tests/benchmarks/pipeline.py [--points N] [--rounds R] [--memory-points M]

1. The pipeline's cost per point against the bare message. The pipeline is a whole run
   (drivers, run folder, events, the fit worker with fitting on as in a real run) on the
   simulated bench at time scale 0 over a real loopback socket; its cost per point is
   taken from its first point to its last. The bare side sends the same one-message
   set-and-read query the SMU role sends per point (the `;`-joined set, read and
   tripped query) through the same session, the cheapest way the session offers (its
   query count given, as the role gives it), and nothing else. A second bare side is a
   bare `*OPC?` round trip: the transport with nearly no work on the instrument.

   Both are measured as wall time and as the process's CPU time per point. The
   simulated bench runs in this process, so the CPU figures hold the simulator's own
   work (parsing, the device physics), which a real instrument does on its own
   processor: against the bare message that work is on both sides of the ratio;
   against `*OPC?` it is on the pipeline's side only. The CPU time is also split by
   thread (acquisition, fit worker, simulator, the run folder's sync thread) so that
   the extra cost of the pipeline is placed where it is spent.

   A short round first is not counted (what the process pays once: imports, first
   calls). Rounds are interleaved: each round measures the bare sides and the pipeline with
   fitting on and off, in an order that turns from round to round, and each ratio is
   taken within its round, so a machine that slows down for a while slows both sides.
   The figure is the median over the rounds, with the lowest and highest round beside
   it (on a shared machine the CPU ratio varies far less than the wall ratio), and the
   ratio of each side's best round: load only ever adds time, so the fastest round of
   each side is the least disturbed. The aim is a ratio of at most 1.3 with fitting on
   against the bare message.

   Not in the per-point figures, stated beside them: the fit worker's work at the
   step's end (the last rows, the step's final refit), which is once a step.
2. rss_growth_MB over a long run (default 300 000 points, --memory-points): the runner,
   run folder, event stream and the fit worker with fitting on, driven by a fast
   in-process fake SMU (tests/sweepfake.py; no sockets), with a listener that queues
   every event as the app does. The fit worker keeps every point as columns (about 41
   bytes) and the running step's fitter its own copy, so some growth per point is by
   design: rss_bytes_per_point states it (from the first 20 000 points to the last
   point, RSS from /proc/self/status); rss_end_MB is after the run's final fit over
   every point, whose working memory grows with the run. ``--memory-points 0`` leaves
   this part out.

The last line printed is one JSON object with the figures.
"""

from __future__ import annotations

import argparse
import collections
import json
import math
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from plantext import forward, limits, plan_text  # noqa: E402
from sweepfake import FakeBench, FakeSmu  # noqa: E402

from pnbench.drivers.dialect import load_dialect  # noqa: E402
from pnbench.drivers.opening import open_session  # noqa: E402
from pnbench.drivers.roles import Smu  # noqa: E402
from pnbench.drivers.session import count_queries  # noqa: E402
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


#: thread name -> the part of the pipeline it is
THREADS = {"MainThread": "acquisition", "pnbench-fit": "fit", "pnbench-simbench": "simulator",
           "pnbench-sync": "sync"}


def clock() -> dict[str, float]:
    """Wall and process CPU seconds, and the CPU seconds of each thread of the pipeline
    (a side's cost is all of them per point: the CPU time is what a loaded machine hands
    out, the wall time what a run waits)."""
    now = {"wall": time.perf_counter(), "cpu": time.process_time()}
    for thread in threading.enumerate():
        part = THREADS.get(thread.name)
        if part is not None and thread.ident is not None:
            try:
                now[part] = time.clock_gettime(time.pthread_getcpuclockid(thread.ident))
            except (OSError, AttributeError):  # ended meanwhile; no per-thread clocks
                pass
    return now


def per_point(start: dict[str, float], end: dict[str, float], n: int) -> dict[str, float]:
    """Seconds per point of each clock read at both ends."""
    return {k: (end[k] - start[k]) / n for k in end if k in start}


def bare_round_trip_s(sim: SimBench, n: int) -> dict[str, float]:
    dialect = load_dialect()
    session = open_session(sim.smu_resource, dialect=dialect)
    try:
        smu = Smu(session, dialect)
        smu.configure(source="voltage", limit=0.1)
        smu.output(True)
        c = smu.commands
        # the pipeline's own levels, so that the simulator does the same work on both sides
        messages = [dialect.join([dialect.fill(c.set_voltage, value=level), c.read,
                                  c.tripped_sourcing_voltage])
                    for level in plan_of(1, n).steps[0].levels]
        queries = count_queries(messages[0], dialect.separator)
        for m in messages[:50]:
            session.ask(m, queries)
        start = clock()
        for m in messages:
            session.ask(m, queries)
        elapsed = per_point(start, clock(), n)
        smu.safe_off()
        return elapsed
    finally:
        session.close()


def opc_round_trip_s(sim: SimBench, n: int) -> dict[str, float]:
    """A bare `*OPC?` query and its reply: the transport with nearly no instrument work."""
    dialect = load_dialect()
    session = open_session(sim.smu_resource, dialect=dialect)
    try:
        for _ in range(50):
            session.ask("*OPC?", 1)
        start = clock()
        for _ in range(n):
            session.ask("*OPC?", 1)
        return per_point(start, clock(), n)
    finally:
        session.close()


def pipeline_per_point_s(n: int, out: Path, fit: bool = True) -> dict[str, float]:
    """Per point from the first point to the last; ``fit_end`` is the fit worker's CPU
    seconds from the last point to the step's final fit event (once a step)."""
    marks: dict[str, dict[str, float]] = {}
    count = [0]

    def listener(event) -> None:
        if event.kind == "point":
            count[0] += 1
            if count[0] == 1:
                marks["first"] = clock()
            elif count[0] == n:
                marks["last"] = clock()
        elif event.kind == "fit" and event.final and "last" in marks:
            marks["fitted"] = clock()

    launch = Launch.new(plan_of(1, n).on_simulated_bench(f"{DEVICE}@pnsim:time_scale=0"),
                        out_dir=out, listeners=[listener], fit=fit)
    outcome = launch.run()
    if outcome.status != "completed" or count[0] != n:
        raise SystemExit(f"pipeline run did not complete: {outcome}")
    got = per_point(marks["first"], marks["last"], n - 1)
    if "fitted" in marks and "fit" in marks["fitted"] and "fit" in marks["last"]:
        got["fit_end"] = marks["fitted"]["fit"] - marks["last"]["fit"]
    return got


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


def one_round(k: int, points: int, out: Path) -> dict[str, dict[str, float]]:
    """Seconds per point of each side, measured in an order that turns with ``k``."""
    got: dict[str, dict[str, float]] = {}

    def bare() -> None:
        sim = SimBench.start(DEVICE, time_scale=0.0)
        try:
            got["bare"] = bare_round_trip_s(sim, points)
            got["opc"] = opc_round_trip_s(sim, points)
        finally:
            sim.close()

    def fit_on() -> None:
        got["on"] = pipeline_per_point_s(points, out / f"on{k}")

    def fit_off() -> None:
        got["off"] = pipeline_per_point_s(points, out / f"off{k}", fit=False)

    order = [bare, fit_on, fit_off]
    for side in order[k % 3:] + order[:k % 3]:
        side()
    return got


def spread(values: list[float]) -> dict[str, float]:
    return {"median": round(statistics.median(values), 3), "low": round(min(values), 3),
            "high": round(max(values), 3)}


def shown(s: dict[str, float]) -> str:
    return (f"{s['median']:.2f} (rounds {s['low']:.2f}..{s['high']:.2f}; "
            f"best rounds {s['best']:.2f})")


def ratios(rounds: list[dict], side: str, base: str, clock_name: str) -> dict[str, float]:
    """The ratio within each round (median, lowest, highest) and the ratio of the two
    sides' best rounds (``best``): a loaded machine only ever adds time, so the fastest
    round of each side is the one least disturbed."""
    out = spread([r[side][clock_name] / r[base][clock_name] for r in rounds])
    out["best"] = round(min(r[side][clock_name] for r in rounds)
                        / min(r[base][clock_name] for r in rounds), 3)
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=3000)
    parser.add_argument("--memory-points", type=int, default=300_000)
    parser.add_argument("--rounds", type=int, default=8,
                        help="interleaved rounds (each ratio within a round; the median "
                        "over rounds counts)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        # a round not counted: what a process pays once (imports, first calls)
        one_round(0, min(args.points, 500), out / "warm-up")
        rounds = []
        for k in range(args.rounds):
            rounds.append(one_round(k, args.points, out))
            print(f"round {k + 1}/{args.rounds}: wall ratio "
                  f"{rounds[-1]['on']['wall'] / rounds[-1]['bare']['wall']:.2f}, CPU ratio "
                  f"{rounds[-1]['on']['cpu'] / rounds[-1]['bare']['cpu']:.2f}", flush=True)

        def us(side: str, key: str) -> float:
            return statistics.median(r[side].get(key, math.nan) for r in rounds) * 1e6

        print(f"\nper point, median of {args.rounds} rounds of {args.points} points (us)")
        print(f"{'':24s}{'wall':>8s}{'CPU':>8s}   CPU by thread")
        for side, name in (("bare", "bare message"), ("opc", "bare *OPC?"),
                           ("on", "pipeline, fitting on"), ("off", "pipeline, fitting off")):
            parts = ", ".join(f"{part} {us(side, part):.1f}" for part in THREADS.values()
                              if not math.isnan(us(side, part)))
            print(f"{name:24s}{us(side, 'wall'):8.1f}{us(side, 'cpu'):8.1f}   {parts}")
        extra = {part: round(us("on", part) - us("bare", part), 1)
                 for part in ("acquisition", "simulator")}
        extra["fit"] = round(us("on", "fit"), 1)
        extra["sync"] = round(us("on", "sync"), 1)
        fit_end = statistics.median(r["on"].get("fit_end", math.nan) for r in rounds)
        print(f"extra CPU of the pipeline over the bare message, by thread (us/point): "
              f"{extra}; fit worker at the step's end {fit_end * 1e3:.0f} ms (once a step)")
        figures = {
            "wall_ratio": ratios(rounds, "on", "bare", "wall"),
            "cpu_ratio": ratios(rounds, "on", "bare", "cpu"),
            "opc_wall_ratio": ratios(rounds, "on", "opc", "wall"),
            "opc_cpu_ratio": ratios(rounds, "on", "opc", "cpu"),
            "fit_off_wall_ratio": ratios(rounds, "off", "bare", "wall"),
            "fit_off_cpu_ratio": ratios(rounds, "off", "bare", "cpu"),
        }
        for key, value in figures.items():
            print(f"{key + ':':20s} {shown(value)}"
                  + ("   (aim <= 1.3)" if key in ("wall_ratio", "cpu_ratio") else ""))
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
        "points": args.points, "rounds": args.rounds,
        **figures,
        "per_point_ratio": figures["wall_ratio"]["median"],
        "bare_round_trip_us": round(us("bare", "wall"), 1),
        "opc_round_trip_us": round(us("opc", "wall"), 1),
        "pipeline_us_per_point": round(us("on", "wall"), 1),
        "pipeline_cpu_us_per_point": round(us("on", "cpu"), 1),
        "bare_cpu_us_per_point": round(us("bare", "cpu"), 1),
        "extra_cpu_us_by_thread": extra,
        "fit_end_ms": round(fit_end * 1e3, 1),
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
