"""Invented devices and their ngspice reference data for the fitter tests.

Four parts of an invented lab (the Northfield characterization bench):

* ``sig``: a small-signal silicon switching diode,
* ``sch``: a Schottky-like diode, N close to 1 and a low VJ,
* ``rec``: a power rectifier whose RS dominates above ~100 mA (rd = N*Vt/I falls below
  RS there),
* ``lky``: a leaky diode with a shunt RSH that shows below the exponential region.

Data come from ngspice in batch mode (tests/spicehelp.py), GMIN 1e-12 S as ngspice has
it by default: a fit sees that shunt too, so comparisons of RSH use
``spicehelp.reference_params``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from spicehelp import ac_admittance, dc_sweep

from pnbench.modeling import junction
from pnbench.modeling.params import DiodeParams

DEVICES = {
    "sig": DiodeParams(IS=2.5e-15, N=1.06, RS=1.9, CJO=2.1e-12, VJ=0.71, M=0.37, TT=5.5e-9,
                       BV=72.0, IBV=1e-4),
    "sch": DiodeParams(IS=4e-8, N=1.03, RS=0.35, CJO=1.3e-10, VJ=0.34, M=0.47, TT=2e-10,
                       BV=40.0, IBV=1e-3),
    "rec": DiodeParams(IS=1.5e-9, N=1.75, RS=0.5, CJO=4.5e-11, VJ=0.62, M=0.44, TT=4.2e-6,
                       BV=600.0, IBV=1e-5),
    "lky": DiodeParams(IS=1e-12, N=1.4, RS=3.0, RSH=2e5, CJO=8e-12, VJ=0.8, M=0.33,
                       TT=2e-8, BV=30.0, IBV=1e-3),
}

#: Forward sweep end [V] per device (the current there is 0.1 A to 2 A).
FORWARD_TOP_V = {"sig": 1.0, "sch": 0.62, "rec": 1.45, "lky": 1.1}
#: Reverse sweep end [V] (beyond BV where breakdown is to be reached, else short of it).
REVERSE_START_V = {"sig": -73.0, "sch": -41.0, "rec": -50.0, "lky": -31.0}
#: Bias frequencies for C-V and admittance [Hz]: the rectifier's diffusion capacitance
#: is large, so it is measured lower down.
FREQUENCIES_HZ = {"sig": (1e5, 1e6), "sch": (1e5, 1e6), "rec": (1e3, 1e4),
                  "lky": (1e5, 1e6)}
#: Forward bias up to which the admittance sweep goes [V].
CV_TOP_V = {"sig": 0.78, "sch": 0.36, "rec": 0.78, "lky": 0.72}


@dataclass(frozen=True)
class DeviceData:
    name: str
    params: DiodeParams
    forward_v: np.ndarray
    forward_i: np.ndarray
    reverse_v: np.ndarray
    reverse_i: np.ndarray
    cv_v: np.ndarray
    cv_f: np.ndarray
    cv_c: np.ndarray
    cv_g: np.ndarray


def rel(value: float, truth: float) -> float:
    """Relative difference of a fitted value from the truth."""
    return abs(value / truth - 1.0)


def forward_voltages(name: str) -> np.ndarray:
    return np.linspace(0.02, FORWARD_TOP_V[name], 120)


def reverse_voltages(name: str) -> np.ndarray:
    """Reverse bias points: coarse up to 1 V short of BV, then (for parts whose sweep is
    meant to reach breakdown) points placed at currents from 1e-7 A to 1e-2 A through
    the knee, like a sweep that slows down there."""
    p = DEVICES[name]
    start = REVERSE_START_V[name]
    coarse = np.linspace(-0.05, max(start, -p.BV + 1.0), 40)
    if start < -p.BV + 1.0:
        knee = junction.voltage(-np.logspace(-7, -2, 30), p)
        return np.concatenate([coarse, knee[knee < coarse[-1]]])
    return coarse


def cv_voltages(name: str) -> np.ndarray:
    return np.concatenate([np.linspace(-10.0, 0.0, 26)[:-1],
                           np.linspace(0.0, CV_TOP_V[name], 40)])


def dc_sweep_chunked(ngspice: str, p: DiodeParams, voltages: np.ndarray, chunk: int = 20):
    """dc_sweep in runs of at most ``chunk`` points with reltol 1e-7.

    ngspice's reverse branch switches from its cubic form to its breakdown exponential
    near -BV; with the reference runner's reltol of 1e-9 its Newton iteration can cycle
    there without end (seen with ngspice 39). 1e-7 converges and is still far below
    every tolerance these tests use.
    """
    vs, cs = [], []
    for k in range(0, voltages.size, chunk):
        v, i = dc_sweep(ngspice, p, voltages[k:k + chunk], options={"reltol": 1e-7})
        vs.append(v)
        cs.append(i)
    return np.concatenate(vs), np.concatenate(cs)


def make(ngspice: str, name: str) -> DeviceData:
    p = DEVICES[name]
    fv, fi = dc_sweep(ngspice, p, forward_voltages(name))
    rv, ri = dc_sweep_chunked(ngspice, p, reverse_voltages(name))
    vv = cv_voltages(name)
    f = np.asarray(FREQUENCIES_HZ[name])
    y = ac_admittance(ngspice, p, vv, f)
    cv_v = np.repeat(vv, f.size)
    cv_f = np.tile(f, vv.size)
    yy = y.ravel()
    return DeviceData(name, p, fv, fi, rv, ri, cv_v, cv_f, yy.imag / (2 * np.pi * cv_f),
                      yy.real)


def instrument_noise(rng: np.random.Generator, y: np.ndarray, rel: float, floor: float,
                     draws: int | None = None) -> np.ndarray:
    """Readings with Gaussian noise of sigma = sqrt((rel*y)**2 + floor**2): percent of
    reading plus a floor, as instrument specifications state accuracy (common practice,
    no source)."""
    shape = y.shape if draws is None else (draws,) + y.shape
    return (y + rel * y * rng.standard_normal(shape) + floor * rng.standard_normal(shape))


def inverse_fisher(jac: np.ndarray, y: np.ndarray, rel: float, floor: float) -> np.ndarray:
    """(J^T W J)^-1: the Cramér-Rao bound of the parameters whose derivatives are the
    columns of ``jac``, for readings ``y`` with the noise of `instrument_noise`
    (W = 1/((rel*y)**2 + floor**2); docs/physics.md §9; Kay, 1993, ch. 3)."""
    w = 1.0 / ((rel * y) ** 2 + floor**2)
    return np.linalg.inv(jac.T @ (jac * w[:, None]))


def draw_stats(est, sig, truth, bound) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Of fits to many noise draws (rows of ``est`` and their ``sig``), per parameter: the
    share of draws whose truth lies within 2 sigma, the mean sigma and the spread of the
    estimates, both over the Cramér-Rao ``bound``."""
    est, sig = np.asarray(est), np.asarray(sig)
    inside = np.mean(np.abs(est - truth) < 2 * sig, axis=0)
    return inside, sig.mean(axis=0) / bound, est.std(axis=0) / bound
