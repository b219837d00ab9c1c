"""EG and XTI over temperature: accuracy on clean data, sigma coverage on noisy data.

Run: python tests/benchmarks/fit_temperature.py [--quick]

An invented silicon rectifier (EG 1.12 eV, XTI 3.3, TRS 3e-3/K) measured as forward I-V
at four temperatures spanning 150 K (250, 300, 350, 400 K; 30 points from 10 nA to
100 mA each). Data come from the project's temperature model
(modeling.temperature, checked against ngspice .temp runs in
tests/modeling/test_temperature_ngspice.py), so the script needs nothing but numpy/scipy.

* clean: relative error of EG and XTI from noise-free data (the issue asks < 1 % and
  < 5 %).
* coverage: over Monte Carlo draws of 1 % Gaussian current noise, the fraction of draws
  whose truth lies within 1 and 2 reported sigmas (0.683 and 0.954 for honest sigmas),
  and the spread of (estimate - truth)/sigma (1.0 for honest sigmas).
* cost: time of the global fit over the four temperatures against one per-temperature
  forward fit of the same points, measured in the same run.

The last line printed is one JSON object with the figures.
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np

from pnbench.modeling import fit_iv, junction
from pnbench.modeling import temperature as tm
from pnbench.modeling.fit_temperature import fit_over_temperature
from pnbench.modeling.params import DiodeParams

TRUTH = DiodeParams(IS=3e-14, N=1.04, RS=1.2, EG=1.12, XTI=3.3, TRS=3e-3)
TEMPERATURES_K = (250.0, 300.0, 350.0, 400.0)
TNOM_K = 300.15
NAMES = ("EG", "XTI", "IS", "N", "RS", "TRS")


def _clean():
    out = []
    for t in TEMPERATURES_K:
        p = tm.params_at(TRUTH, t, TNOM_K)
        v = junction.voltage(np.logspace(-8, -1, 30), p, t)
        out.append((t, v, junction.current(v, p, t)))
    return out


def _sets(clean, rng=None, rel=0.01):
    sets = []
    for t, v, i in clean:
        if rng is not None:
            i = i * (1 + rel * rng.standard_normal(i.size))
        sets.append((t, {"iv": {"voltage_V": v, "current_A": i}}))
    return sets


def main(quick: bool = False) -> dict:
    clean = _clean()
    fit = fit_over_temperature(_sets(clean), tnom_K=TNOM_K).model
    err_eg = abs(fit.values["EG"] / TRUTH.EG - 1)
    err_xti = abs(fit.values["XTI"] / TRUTH.XTI - 1)
    print(f"clean data: EG {fit.values['EG']:.6f} eV (error {err_eg:.2e}), "
          f"XTI {fit.values['XTI']:.5f} (error {err_xti:.2e})")
    draws = 30 if quick else 200
    rng = np.random.default_rng(7)
    z = {n: [] for n in NAMES}
    t_global = 0.0
    for _ in range(draws):
        sets = _sets(clean, rng)
        start = time.perf_counter()
        m = fit_over_temperature(sets, tnom_K=TNOM_K).model
        t_global += time.perf_counter() - start
        for n in NAMES:
            truth = getattr(TRUTH, n)
            if n in m.values and m.sigma(n):
                z[n].append((m.values[n] - truth) / m.sigma(n))
    t_global /= draws
    t0 = time.perf_counter()
    reps = 10
    for _ in range(reps):
        fit_iv.fit_forward(clean[1][1], clean[1][2], temperature_K=TEMPERATURES_K[1])
    t_single = (time.perf_counter() - t0) / reps
    figures = {"clean_EG_rel_error": err_eg, "clean_XTI_rel_error": err_xti,
               "draws": draws, "global_vs_single_fit_time": t_global / t_single}
    for n in NAMES:
        a = np.array(z[n])
        figures[f"{n}_coverage_1sigma"] = float(np.mean(np.abs(a) < 1))
        figures[f"{n}_coverage_2sigma"] = float(np.mean(np.abs(a) < 2))
        figures[f"{n}_z_spread"] = float(np.std(a))
        print(f"{n:>4}: within 1 sigma {figures[f'{n}_coverage_1sigma']:.3f}, within 2 sigma "
              f"{figures[f'{n}_coverage_2sigma']:.3f}, spread of z {np.std(a):.2f} "
              f"over {a.size} draws")
    print(f"global fit over 4 temperatures: {t_global * 1e3:.0f} ms, "
          f"{figures['global_vs_single_fit_time']:.1f}x one forward fit")
    print(json.dumps(figures))
    return figures


if __name__ == "__main__":
    main(quick="--quick" in sys.argv)
