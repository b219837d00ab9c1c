"""Readings of the simulated bench taken through the roles, as a run's steps take them
(forward I-V by forced current, reverse C-V at two frequencies, forward admittance), for
tests that need the bench's own noise without a whole run."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from pnbench.drivers.dialect import load_dialect
from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import LcrMeter, Smu
from pnbench.drivers.sim.bench import SimBench

#: The demo plan's C-V and admittance points (sim_configs/plans/lh-vc510.toml).
CV_POINTS = [(v, f) for f in (1e5, 1e6) for v in np.linspace(0.0, -30.0, 31)]
ADMITTANCE_POINTS = [(v, f) for v in (0.55, 0.6, 0.63, 0.66, 0.68, 0.70, 0.72)
                     for f in (1e5, 3e5, 1e6, 2e6)]


def reverse_data(device, seed: int, stop_V: float = -30.0, points: int = 31) -> dict:
    """A reverse I-V sweep by forced voltage (as a plan's iv_reverse step takes it)."""
    device = dataclasses.replace(device, smu={**device.smu, "seed": 3000 + seed})
    bench = SimBench.start(device, time_scale=0.0)
    try:
        smu = Smu(open_session(bench.smu_resource), load_dialect())
        smu.configure(source="voltage", limit=1e-3, nplc=1.0)
        smu.output(True)
        readings = [smu.apply_and_read(v) for v in np.linspace(0.0, stop_V, points)]
        smu.output(False)  # a simulated bench: no ramp down needed (it takes seconds)
    finally:
        bench.close()
    return {"voltage_V": np.array([r.voltage_V for r in readings]),
            "current_A": np.array([r.current_A for r in readings])}


def bench_data(device, seed: int, *, lcr: dict | None = None) -> dict:
    """{"iv": columns, "cv": columns} from ``device`` (a SimDevice) with its noise seeds
    set from ``seed`` and its [lcr] table updated by ``lcr``."""
    device = dataclasses.replace(device, smu={**device.smu, "seed": 1000 + seed},
                                 lcr={**device.lcr, "seed": 2000 + seed, **(lcr or {})})
    bench = SimBench.start(device, time_scale=0.0)
    try:
        smu = Smu(open_session(bench.smu_resource), load_dialect())
        smu.configure(source="current", limit=2.0, nplc=1.0)
        smu.output(True)
        readings = [smu.apply_and_read(level)
                    for level in np.logspace(-9, math.log10(5e-2), 63)]
        smu.ramp_to_zero()
        smu.output(False)
        meter = LcrMeter(open_session(bench.lcr_resource), load_dialect())
        ys, levels = [], []
        for points, level in ((CV_POINTS, 0.02), (ADMITTANCE_POINTS, 0.005)):
            meter.configure(level)
            meter.bias(True)
            ys += [meter.apply_and_read(v, f).admittance_S for v, f in points]
            levels += [level] * len(points)
        meter.bias(False)
    finally:
        bench.close()
    points = CV_POINTS + ADMITTANCE_POINTS
    y = np.array(ys)
    f = np.array([p[1] for p in points])
    return {"iv": {"voltage_V": np.array([r.voltage_V for r in readings]),
                   "current_A": np.array([r.current_A for r in readings])},
            "cv": {"voltage_V": np.array([p[0] for p in points]), "frequency_Hz": f,
                   "capacitance_F": y.imag / (2 * np.pi * f), "conductance_S": y.real,
                   "ac_level_V": np.array(levels)}}
