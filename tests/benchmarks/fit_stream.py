"""Streaming fit speed and statistical efficiency.

Run: python tests/benchmarks/fit_stream.py [--quick]

* speedup_10k: a forward I-V sweep of 10 000 noisy points is fed to the
  IncrementalFitter one point at a time (add + snapshot per point). The median time of
  such an update near 10 000 points is compared with refitting all points from scratch
  with scipy.optimize.curve_fit (start values from the data, log-current residuals,
  exact model), measured in the same run.
* efficiency: over Monte Carlo draws of instrument-like noise (0.1 % of reading + 1 pA),
  the spread of each estimate divided by the Cramér–Rao bound at the truth
  ((J^T W J)^-1, docs/physics.md §9; Kay, 1993, ch. 3; 1.0 is the best any unbiased
  estimator can do). The
  same figure for a textbook two-region method (slope of ln I over the decades
  1 nA to 10 uA for N and IS, then RS from the excess voltage above 10 mA) shows the gain.

Data come from the project's exact junction model (checked against ngspice in
tests/modeling/test_junction_ngspice.py) so the script needs nothing but numpy/scipy.
The last line printed is one JSON object with the figures.
"""

from __future__ import annotations

import json
import math
import sys
import time

import numpy as np
from scipy.optimize import curve_fit

from pnbench.modeling import fit_iv, junction
from pnbench.modeling.incremental import IncrementalFitter
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

#: The invented part of the benchmark (a Schottky-like diode with visible RS).
TRUTH = DiodeParams(IS=4e-8, N=1.03, RS=0.35)
REL, FLOOR = 1e-3, 1e-12
VT = junction.thermal_voltage(DEFAULT_TEMPERATURE_K)


def noisy(rng, i):
    return i + REL * i * rng.standard_normal(i.shape) + FLOOR * rng.standard_normal(i.shape)


def stream_timing(n_points: int, rng) -> tuple[float, float, float, dict]:
    """(median update s near n_points, amortized s per point, total s, final values)."""
    v = np.linspace(0.02, 0.62, n_points)
    i = noisy(rng, junction.current(v, TRUTH))
    order = rng.permutation(n_points)
    f = IncrementalFitter("iv_forward")
    times = np.empty(n_points)
    start = time.perf_counter()
    for k, j in enumerate(order):
        t0 = time.perf_counter()
        f.add(v[j], i[j])
        f.snapshot()
        times[k] = time.perf_counter() - t0
    total = time.perf_counter() - start
    near = times[-max(200, n_points // 50):]
    return float(np.median(near)), total / n_points, total, dict(f.snapshot().values)


def _log_model(v, ln_is, n, rs):
    p = DiodeParams(IS=math.exp(ln_is), N=max(n, 0.3), RS=max(rs, 0.0))
    return np.log(np.maximum(junction.current(v, p), 1e-300))


def curve_fit_timing(n_points: int, rng, repeats: int) -> float:
    """Median time of a from-scratch curve_fit over n_points (same data kind)."""
    v = np.linspace(0.02, 0.62, n_points)
    i = noisy(rng, junction.current(v, TRUTH))
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        ok = i > 10 * FLOOR
        p0 = fit_iv.start_values(v[ok], i[ok], DEFAULT_TEMPERATURE_K)[:3]
        sigma = np.sqrt(REL**2 + (FLOOR / i[ok]) ** 2)
        curve_fit(_log_model, v[ok], np.log(i[ok]), p0=p0, sigma=sigma, absolute_sigma=False)
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def crb(v) -> np.ndarray:
    """Cramér–Rao bound of (ln IS, N, RS): central differences of junction.current."""
    base = np.array([math.log(TRUTH.IS), TRUTH.N, TRUTH.RS])

    def cur(t):
        return junction.current(v, TRUTH.with_values(IS=math.exp(t[0]), N=t[1], RS=t[2]))

    h = 1e-6
    jac = np.column_stack([(cur(base + d) - cur(base - d)) / (2 * h) for d in np.eye(3) * h])
    i = cur(base)
    w = 1.0 / ((REL * i) ** 2 + FLOOR**2)
    return np.linalg.inv(jac.T @ (jac * w[:, None]))


def two_region(v, i) -> tuple[float, float, float]:
    """Textbook extraction: ln I slope over 1 nA..10 uA, then RS from excess voltage."""
    low = (i > 1e-9) & (i < 1e-5)
    slope, icpt = np.polyfit(v[low], np.log(i[low]), 1)
    n = 1.0 / (slope * VT)
    high = i > 1e-2
    excess = v[high] - n * VT * np.log(i[high] / math.exp(icpt) + 1.0)
    rs = float(np.sum(excess * i[high]) / np.sum(i[high] ** 2))  # least squares through 0
    return float(icpt), float(n), rs


def efficiency(draws: int, rng) -> tuple[dict, dict, float]:
    v = np.linspace(0.02, 0.62, 80)
    i_true = junction.current(v, TRUTH)
    fits, books = [], []
    start = time.perf_counter()
    for _ in range(draws):
        i = noisy(rng, i_true)
        r = fit_iv.fit_forward(v, i)
        fits.append([math.log(r.values["IS"]), r.values["N"], r.values.get("RS", 0.0)])
        books.append(two_region(v, i))
    elapsed = time.perf_counter() - start
    bound = np.sqrt(np.diag(crb(v)))
    names = ("IS", "N", "RS")
    ours = dict(zip(names, (np.std(fits, axis=0) / bound).round(3).tolist(), strict=True))
    book = dict(zip(names, (np.std(books, axis=0) / bound).round(3).tolist(), strict=True))
    return ours, book, elapsed / draws


def main(argv: list[str]) -> int:
    quick = "--quick" in argv
    rng = np.random.default_rng(20261201)
    n = 2000 if quick else 10_000
    update_s, amortized_s, total_s, values = stream_timing(n, rng)
    print(f"streaming {n} points: median update near {n} points {update_s * 1e3:.3f} ms, "
          f"amortized {amortized_s * 1e3:.3f} ms per point (total {total_s:.1f} s, "
          f"full refits included)")
    print(f"  final estimate: IS {values['IS']:.4g} A, N {values['N']:.5f}, "
          f"RS {values.get('RS', float('nan')):.4f} ohm (truth {TRUTH.IS:.4g}, {TRUTH.N}, "
          f"{TRUTH.RS})")
    refit_s = curve_fit_timing(n, rng, 3 if quick else 7)
    speedup = refit_s / update_s
    print(f"curve_fit from scratch at {n} points: median {refit_s * 1e3:.1f} ms "
          f"-> speedup {speedup:.0f}x per update")
    draws = 60 if quick else 500
    ours, book, per_fit = efficiency(draws, rng)
    print(f"Monte Carlo spread / Cramer-Rao bound over {draws} draws (1.0 is ideal; each "
          f"ratio carries a sampling error of about +-{1 / math.sqrt(2 * (draws - 1)):.2f}): "
          f"fitter {ours}, textbook two-region {book} ({per_fit * 1e3:.1f} ms per fit)")
    print(json.dumps({
        "speedup_10k": round(speedup, 1),
        "n_points": n,
        "update_ms_10k": round(update_s * 1e3, 4),
        "amortized_ms_per_point": round(amortized_s * 1e3, 4),
        "curve_fit_ms_10k": round(refit_s * 1e3, 2),
        "efficiency": ours,
        "efficiency_two_region": book,
        "efficiency_draws": draws,
    }))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
