"""How long a report takes, and how it grows with the number of points.

Baseline: the report of a complete synthetic run (forward and reverse I-V, C-V, forward
admittance; about 170 points), made in this process after one warm-up report so that
matplotlib's import and font cache are not counted. Then the same run with 20 000 and
50 000 extra forward I-V points (an overnight run's size). Figures: seconds per report,
the ratio to the baseline, and the size of the largest SVG (markers are rasterized above
a few thousand points so it stays small).

Then `pnbench report` as a command, each in a fresh process as a person runs it, on a
folder of 1e4 and one of 1e6 points (the same complete run with that many repeated
forward I-V points, an overnight run's size): wall time and peak resident memory, and
their ratios (issue: within 3x the time and 2x the memory). ``--quick`` stops at 1e5.

    python tests/benchmarks/report.py [--quick]

Last line: one JSON object with the figures.
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tui"))

import report_runs  # noqa: E402  (test helper beside the report tests)

from pnbench.modeling import junction  # noqa: E402
from pnbench.tui.report import build_report  # noqa: E402


def _add_forward_points(run_dir: Path, count: int) -> None:
    rng = np.random.default_rng(3)
    v = np.linspace(0.01, 0.85, count)
    i = junction.current(v, report_runs.TRUE, report_runs.TEMPERATURE_K)
    i = i * (1 + 0.003 * rng.standard_normal(count))
    lines = [f"forward_iv,{1000 + k},iv,{k * 0.01:.6f},{a!r},{b!r},,,,0"
             for k, (a, b) in enumerate(zip(v.tolist(), i.tolist(), strict=True))]
    with open(run_dir / "points.csv", "a", encoding="utf-8") as f:
        f.write("\n".join(lines) + "\n")


def _add_repeated_sweeps(run_dir: Path, count: int) -> None:
    """``count`` forward I-V points as repeated 200-point sweeps of one step, written in
    blocks (the file is what a night of sweeps leaves)."""
    rng = np.random.default_rng(5)
    v = np.linspace(0.3, 0.8, 200)
    i = junction.current(v, report_runs.TRUE, report_runs.TEMPERATURE_K)
    with open(run_dir / "points.csv", "a", encoding="utf-8") as f:
        for start in range(0, count, 100_000):
            n = min(100_000, count - start)
            k = np.arange(start, start + n)
            noisy = i[k % 200] * (1 + 0.003 * rng.standard_normal(n))
            f.write("".join(f"overnight,{a},iv,{a * 0.001:.6f},{b!r},{c!r},,,,0\n"
                            for a, b, c in zip(k.tolist(), v[k % 200].tolist(),
                                               noisy.tolist(), strict=True)))


_COMMAND = """
import resource, sys, time
start = time.perf_counter()
from pnbench.tui import cli
code = cli.main(["report", sys.argv[1]])
print(time.perf_counter() - start, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
      code)
"""


def _command(run_dir: Path) -> tuple[float, float]:
    """(seconds, peak RSS in MiB) of `pnbench report RUN_DIR` in a fresh process."""
    out = subprocess.run([sys.executable, "-c", _COMMAND, str(run_dir)], capture_output=True,
                         text=True, timeout=1200, check=True)
    seconds, kib, code = out.stdout.split()[-3:]
    assert code == "0", out.stderr
    return float(seconds), float(kib) / 1024


def _timed(run_dir: Path, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        build_report(run_dir)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        base = report_runs.make_run(root, name="base")
        build_report(base)  # warm-up: imports, font cache
        t_base = _timed(base, 3)
        print(f"complete run, ~170 points: {t_base:.2f} s per report")
        figures = {"baseline_s": round(t_base, 3)}
        for extra in (20_000, 50_000):
            run_dir = report_runs.make_run(root, name=f"big{extra}")
            _add_forward_points(run_dir, extra)
            t = _timed(run_dir, 1)
            svg_kB = max(p.stat().st_size for p in (run_dir / "figures").glob("*.svg")) / 1e3
            print(f"with {extra} extra points: {t:.2f} s ({t / t_base:.1f} x the baseline), "
                  f"largest SVG {svg_kB:.0f} kB")
            figures[f"extra_{extra}_s"] = round(t, 3)
            figures[f"extra_{extra}_ratio"] = round(t / t_base, 2)
            figures[f"extra_{extra}_largest_svg_kB"] = round(svg_kB)
        sizes = (10_000, 100_000) if "--quick" in sys.argv else (10_000, 1_000_000)
        measured = {}
        for size in sizes:
            run_dir = report_runs.make_run(root, name=f"command{size}")
            _add_repeated_sweeps(run_dir, size)
            build_report(run_dir)  # warm the font cache and the file cache alike
            measured[size] = _command(run_dir)
            print(f"pnbench report, {size} points: {measured[size][0]:.2f} s, "
                  f"peak RSS {measured[size][1]:.0f} MiB")
        small, large = sizes
        figures.update({
            f"command_{small}_s": round(measured[small][0], 3),
            f"command_{large}_s": round(measured[large][0], 3),
            f"command_{small}_peak_MiB": round(measured[small][1], 1),
            f"command_{large}_peak_MiB": round(measured[large][1], 1),
            "command_time_ratio": round(measured[large][0] / measured[small][0], 2),
            "command_memory_ratio": round(measured[large][1] / measured[small][1], 2),
        })
        print(json.dumps(figures))


if __name__ == "__main__":
    main()
