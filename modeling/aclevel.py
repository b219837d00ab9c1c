"""Is an LCR meter's AC test level small enough at this bias? (docs/physics.md §6)

A test voltage of peak x*N*Vt across the junction, on top of the bias, drives the
exponential current exp(x*cos(wt)) = 1 + x*cos + (x*cos)**2/2 + (x*cos)**3/6 + ...

* The second-order term, x/2 of the linear one at the peak, is the distortion
  (a DC shift and a second harmonic, each x/4 of the fundamental): docs/physics.md §6:
  "about vd/(2*N*Vt)".
* A meter reads the fundamental. Its error comes from the third-order term,
  3/4 * x**3/6 = x**3/8, i.e. a relative conductance error of x**2/8 (exactly
  2*I1(x)/x - 1 with I1 the modified Bessel function; the next term is x**4/192).

The junction sees the level divided by RS against the junction admittance. The error
applies to the exponential part of the conductance (and of the diffusion capacitance
TT*gd), not to a shunt. `fundamental_conductance` computes the large-signal fundamental
numerically, as the check of the estimate.

numpy, scipy and the junction model are imported by the functions that use them, so a
plan can be checked against `worst_case_error` without loading them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

#: The Boltzmann constant [J/K] and the elementary charge [C], exact in the SI since
#: 2019 (the values scipy.constants carries).
BOLTZMANN_J_PER_K = 1.380649e-23
ELEMENTARY_CHARGE_C = 1.602176634e-19


@dataclass(frozen=True)
class AcLevelCheck:
    """Verdict on one AC test level at one bias point."""

    level_V_rms: float
    junction_amplitude_V: float     # peak AC voltage across the junction
    n_vt_V: float                   # N*Vt at the temperature
    ratio: float                    # junction_amplitude_V / n_vt_V  (x)
    exponential_fraction: float     # share of the conductance that is exponential
    distortion: float               # second-order term against the linear one: x/2 * share
    conductance_error: float        # relative error of the reading: x**2/8 * share
    max_error: float
    recommended_level_V_rms: float  # largest level that keeps conductance_error <= max_error
    small: bool
    message: str


def thermal_voltage(temperature_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """kT/q in volts, computed as `junction.thermal_voltage` does, without scipy."""
    if not temperature_K > 0:
        raise ValueError(f"temperature must be > 0 K, got {temperature_K!r}")
    return BOLTZMANN_J_PER_K * temperature_K / ELEMENTARY_CHARGE_C


def worst_case_error(level_V_rms: float, n_vt_V: float) -> tuple[float, float]:
    """(conductance reading error, second-order distortion) of an rms test level applied
    straight to an exponential junction with N*Vt = n_vt_V (no RS divider, no shunt):
    the safe-side estimate when the device is not yet known."""
    x = math.sqrt(2.0) * level_V_rms / n_vt_V
    return x * x / 8.0, 0.5 * x


def check_ac_level(params: DiodeParams, level_V_rms: float, *,
                   bias_voltage_V: float | None = None, bias_current_A: float | None = None,
                   frequency_Hz: float | None = None,
                   temperature_K: float = DEFAULT_TEMPERATURE_K,
                   max_error: float = 0.01) -> AcLevelCheck:
    """Check an rms AC test level at a bias given by terminal voltage or current.

    Without ``frequency_Hz`` the capacitances are ignored in the RS divider, which
    overstates the junction amplitude (the safe side).
    """
    if not (math.isfinite(level_V_rms) and level_V_rms >= 0):
        raise ValueError(f"AC level must be a finite rms voltage >= 0, got {level_V_rms!r}")
    if not max_error > 0:
        raise ValueError(f"max_error must be > 0, got {max_error!r}")
    from pnbench.modeling import junction, smallsignal

    q = smallsignal.operating_point(params, voltage=bias_voltage_V, current=bias_current_A,
                                    temperature_K=temperature_K)
    a = params.N * junction.thermal_voltage(temperature_K)
    g_sh = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    w = 0.0 if frequency_Hz is None else 2.0 * math.pi * float(frequency_Hz)
    yj = q.gd_S + g_sh + 1j * w * (q.cj_F + q.cd_F)
    divider = abs(1.0 / (1.0 + params.RS * yj))
    amplitude = math.sqrt(2.0) * level_V_rms * divider
    x = amplitude / a
    share = q.gd_S / (q.gd_S + g_sh) if q.gd_S + g_sh > 0 else 0.0
    distortion = 0.5 * x * share
    error = x * x / 8.0 * share
    if share > 0:
        x_max = math.sqrt(8.0 * max_error / share)
        recommended = x_max * a / (math.sqrt(2.0) * divider)
    else:
        recommended = math.inf
    small = error <= max_error
    message = (
        f"AC level {level_V_rms * 1e3:.4g} mV rms puts {amplitude * 1e3:.4g} mV peak on "
        f"the junction, {x:.3g} x N*Vt ({a * 1e3:.4g} mV) at {q.bias_voltage_V:.4g} V: "
        f"conductance reading off by about {error * 100:.2g} % "
        f"(second-order distortion {distortion * 100:.2g} %)"
    )
    if not small:
        message += (f"; not small against N*Vt: use at most "
                    f"{recommended * 1e3:.3g} mV rms for {max_error * 100:.2g} %")
    return AcLevelCheck(
        level_V_rms=float(level_V_rms), junction_amplitude_V=amplitude, n_vt_V=a, ratio=x,
        exponential_fraction=share, distortion=distortion, conductance_error=error,
        max_error=max_error, recommended_level_V_rms=recommended, small=small,
        message=message,
    )


def fundamental_conductance(params: DiodeParams, junction_voltage_V: float,
                            amplitude_V: float,
                            temperature_K: float = DEFAULT_TEMPERATURE_K,
                            samples: int = 64) -> float:
    """Large-signal conductance [S]: fundamental of Ij(Vd + A*cos) divided by A.

    The junction current (shunt included) is sampled over one period and its first
    Fourier cosine coefficient taken; for a smooth periodic function the trapezoid rule
    converges geometrically, so 64 samples are plenty for A of a few N*Vt.
    """
    if not amplitude_V > 0:
        raise ValueError(f"amplitude must be > 0 V, got {amplitude_V!r}")
    import numpy as np

    from pnbench.modeling import junction

    theta = 2.0 * np.pi * np.arange(samples) / samples
    i = junction.junction_current(junction_voltage_V + amplitude_V * np.cos(theta),
                                  params, temperature_K)
    first = 2.0 / samples * float(np.sum(i * np.cos(theta)))
    return first / amplitude_V
