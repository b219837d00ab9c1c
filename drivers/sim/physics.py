"""What the simulated instruments see of the diode: pure functions over modeling's physics.

- `source_point`: where a source-measure unit settles on the diode's I-V curve, with the
  compliance clamp of a real SMU (a voltage source sags to hold its current limit, a
  current source stops at its voltage limit).
- `fundamental_admittance`: what an LCR meter reads at a DC bias and an AC level: the
  fundamental of the large-signal current, so a test signal that is large against N*Vt
  reads a larger conductance and diffusion capacitance than the small-signal model (the
  distortion of docs/physics.md §6). The junction is treated as a memoryless nonlinear
  conductance and charge, driven by a sinusoid of amplitude a; the fundamental of each is
  the describing function

      Y_eff(a) = (1/pi) * integral_0^2pi Yj(Vd0 + a*cos t) * sin(t)**2 dt

  (integration by parts of the first Fourier coefficient). With RS in series the junction
  amplitude solves a = Va/|1 + RS*Y_eff(a)|. Harmonic currents through RS and the DC shift
  from rectification are neglected. As a -> 0 it is smallsignal.device_admittance exactly.
- `measured`: a reading with gain error and Gaussian noise (percent of reading plus a
  floor), or the overflow marker when the value is beyond the range.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from pnbench.modeling import junction, smallsignal
from pnbench.modeling.params import DiodeParams

#: A fixed range reads up to this fraction above its nominal value before it overflows
#: (common practice of SMUs, no source).
OVERRANGE = 1.05


def source_point(params: DiodeParams, temperature_K: float, sourcing: str, level: float,
                 limit: float) -> tuple[float, float, bool]:
    """(voltage_V, current_A, in_compliance) of a source driving the diode.

    sourcing "voltage": level [V], limit [A]; sourcing "current": level [A], limit [V].
    """
    if sourcing == "voltage":
        i = float(junction.current(level, params, temperature_K))
        if abs(i) <= limit:
            return level, i, False
        i_c = math.copysign(limit, i)
        return float(junction.voltage(i_c, params, temperature_K)), i_c, True
    v = float(junction.voltage(level, params, temperature_K))
    if math.isfinite(v) and abs(v) <= limit:
        return v, level, False
    v_c = math.copysign(limit, level if level != 0 else v)
    return v_c, float(junction.current(v_c, params, temperature_K)), True


def choose_range(value: float, ranges: tuple[float, ...], fixed: float | None) -> float | None:
    """The range a reading of `value` falls in (autorange when fixed is None); None = over."""
    magnitude = abs(value)
    if fixed is not None:
        return fixed if magnitude <= fixed * OVERRANGE else None
    for r in ranges:
        if magnitude <= r:
            return r
    return ranges[-1] if magnitude <= ranges[-1] * OVERRANGE else None


def measured(value: float, span: float | None, percent_of_reading: float,
             percent_of_range: float, gain_error_percent: float, noise_scale: float,
             rng: np.random.Generator) -> float:
    """A reading of `value` on range `span`: gain error plus Gaussian noise (1 sigma =
    percent of reading + percent of range, times noise_scale); +/-inf when over range."""
    if span is None:
        return math.copysign(math.inf, value)
    sigma = (percent_of_reading * abs(value) + percent_of_range * span) / 100.0 * noise_scale
    noise = float(rng.normal(0.0, sigma)) if sigma > 0 else 0.0
    return value * (1.0 + gain_error_percent / 100.0) + noise


def bias_point(params: DiodeParams, temperature_K: float, bias_V: float,
               current_limit_A: float) -> tuple[float, float]:
    """(bias_V, current_A) of a bias source that sags to hold current_limit_A."""
    v, i, _ = source_point(params, temperature_K, "voltage", bias_V, current_limit_A)
    return v, i


def _effective_junction_admittance(vd0: float, amplitude_V: float, frequency_Hz: float,
                                   params: DiodeParams, temperature_K: float) -> complex:
    """Describing-function admittance of the junction (RS excluded) at amplitude a."""
    if amplitude_V == 0.0:
        return complex(smallsignal.junction_admittance(vd0, frequency_Hz, params,
                                                       temperature_K))
    x = amplitude_V / (params.N * junction.thermal_voltage(temperature_K))
    samples = int(min(4096, max(64, 8 * math.ceil(x))))
    t = 2.0 * np.pi * np.arange(samples) / samples
    yj = smallsignal.junction_admittance(vd0 + amplitude_V * np.cos(t), frequency_Hz, params,
                                         temperature_K)
    # The trapezoid rule on a periodic integrand is spectrally accurate.
    return complex(np.mean(2.0 * np.sin(t) ** 2 * yj))


def fundamental_admittance(bias_V: float, frequency_Hz: float, ac_level_rms_V: float,
                           params: DiodeParams, temperature_K: float) -> complex:
    """Admittance [S] an LCR meter reads: fundamental current over applied AC voltage."""
    i0 = float(junction.current(bias_V, params, temperature_K))
    vd0 = bias_V - i0 * params.RS
    va = math.sqrt(2.0) * ac_level_rms_V
    a_vt = params.N * junction.thermal_voltage(temperature_K)
    if va < 1e-6 * a_vt:
        return complex(smallsignal.device_admittance(bias_V, frequency_Hz, params,
                                                     temperature_K))

    def y_eff(a: float) -> complex:
        return _effective_junction_admittance(vd0, a, frequency_Hz, params, temperature_K)

    if params.RS == 0.0:
        return y_eff(va)

    def mismatch(a: float) -> float:
        return a * abs(1.0 + params.RS * y_eff(a)) - va

    if mismatch(va) <= 0.0:
        a = va
    else:
        a = brentq(mismatch, 0.0, va, xtol=1e-9 * va, rtol=1e-10)
    yj = y_eff(a)
    return yj / (1.0 + params.RS * yj)
