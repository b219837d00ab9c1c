"""Throughput of the exact DC model against a per-point root solve, in one run.

    python tests/benchmarks/junction.py [--points N] [--sample M]

For each invented card the model evaluates I(V) at N points (default 1e6) spanning
-(BV + 5 V) (or -55 V) to the voltage that carries 10 A, in one vectorized call, and
V(I) back. The baseline solves the same implicit equation I = Ij(V - I*RS) point by
point with scipy.optimize.brentq, with the junction current written for scalars with the
math module (what a careful scalar implementation would do: numpy on scalars costs
microseconds per call and would flatter the model by an order of magnitude; checked to
agree with the model's junction current before timing). A million brentq calls take
a while, so it is timed on an evenly spaced subsample of M points (default 2000) and
scaled to N (stated in the output). Times are the best of three runs, CPU time of
this process (the machine is shared). The last line is one JSON object with the figures.
"""

from __future__ import annotations

import argparse
import json
import math
import time

import numpy as np
from scipy import optimize

from pnbench.modeling import junction
from pnbench.modeling.params import DiodeParams

#: Invented parts: a switching diode, a leaky Schottky, a high-voltage rectifier
#: (breakdown, no shunt: the case that used to refine many points), a low-voltage zener.
CARDS = {
    "rs_only": DiodeParams(IS=1e-14, N=1.0, RS=0.5),
    "rs_shunt": DiodeParams(IS=2e-9, N=1.03, RS=0.9, RSH=2e5),
    "breakdown_50V": DiodeParams(IS=1e-14, N=1.0, RS=0.5, BV=50.0, IBV=1e-4),
    "zener_3V": DiodeParams(IS=1e-14, N=1.0, RS=0.5, BV=3.0, IBV=1e-4),
}


def _best_cpu(fn, repeats: int = 3) -> float:
    best = math.inf
    for _ in range(repeats):
        start = time.process_time()
        fn()
        best = min(best, time.process_time() - start)
    return best


def _scalar_junction(p: DiodeParams):
    """Ij(vd) for one float with the math module: IS*expm1(vd/a) + vd/RSH minus the
    breakdown term K*(exp(-vd/a) - 1), K = IBV*exp(-BV/a), exponents capped as the
    model caps them."""
    a = p.N * junction.thermal_voltage()
    g = 0.0 if math.isinf(p.RSH) else 1.0 / p.RSH
    log_k = math.log(p.IBV) - p.BV / a if math.isfinite(p.BV) else None
    k = math.exp(log_k) if log_k is not None else 0.0
    cap, is_, expm1, exp = 700.0, p.IS, math.expm1, math.exp

    def ij(vd: float) -> float:
        x = vd / a
        out = is_ * expm1(min(max(x, -cap), cap)) + g * vd
        if log_k is not None:
            y = log_k - x
            out -= (exp(min(y, cap)) if y > -cap else 0.0) - k
        return out
    return ij


def _brentq_current(v: float, p: DiodeParams, ij) -> float:
    """I at terminal V from the implicit equation I = Ij(V - I*RS), by brentq on a
    bracket grown from [-1, 1] A by decades until it holds the root."""
    rs = p.RS

    def f(i):
        return i - ij(v - i * rs)
    lo, hi = -1.0, 1.0
    while f(lo) > 0:
        lo *= 10.0
    while f(hi) < 0:
        hi *= 10.0
    return optimize.brentq(f, lo, hi, xtol=1e-300, rtol=1e-15, maxiter=500)


def run_card(name: str, p: DiodeParams, points: int, sample: int) -> dict:
    low = -(p.BV + 5.0) if math.isfinite(p.BV) else -55.0
    high = junction.voltage(10.0, p)
    v = np.linspace(low, high, points)
    t_model = _best_cpu(lambda: junction.current(v, p))
    i = junction.current(v, p)
    t_inverse = _best_cpu(lambda: junction.voltage(i, p))
    pick = np.linspace(0, points - 1, sample).astype(int)
    ref = np.empty(sample)
    ij = _scalar_junction(p)
    vd = v[pick] - i[pick] * p.RS
    want = junction.junction_current(vd, p)
    got = np.array([ij(float(x)) for x in vd])
    if not np.allclose(got, want, rtol=1e-12, atol=1e-300):
        raise SystemExit(f"{name}: the scalar baseline disagrees with the model")
    points_list = [float(v[idx]) for idx in pick]

    def solve_all():
        for k, x in enumerate(points_list):
            ref[k] = _brentq_current(x, p, ij)

    t_sample = _best_cpu(solve_all, repeats=1)
    t_brentq = t_sample * points / sample
    big = np.abs(ref) > 1e-12
    agreement = float(np.max(np.abs(i[pick][big] / ref[big] - 1.0))) if big.any() else 0.0
    return {
        "card": name,
        "points": points,
        "model_s": t_model,
        "inverse_s": t_inverse,
        "brentq_scaled_s": t_brentq,
        "brentq_sample": sample,
        "speedup": t_brentq / t_model,
        "max_relative_difference": agreement,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=1_000_000)
    parser.add_argument("--sample", type=int, default=2000)
    args = parser.parse_args()
    results = []
    for name, p in CARDS.items():
        r = run_card(name, p, args.points, args.sample)
        results.append(r)
        print(f"{name:>14}: I(V) {r['model_s']:.3f} s, V(I) {r['inverse_s']:.3f} s for "
              f"{r['points']:.0e} points; brentq {r['brentq_scaled_s']:.1f} s (timed on "
              f"{r['brentq_sample']} points, scaled); ratio {r['speedup']:.0f}x; "
              f"max difference {r['max_relative_difference']:.1e}")
    print(json.dumps({"benchmark": "junction", "cpu_time": True, "results": results}))


if __name__ == "__main__":
    main()
