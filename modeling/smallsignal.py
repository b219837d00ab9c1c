"""Small-signal equivalent of a diode at a quiescent point, and LCR-meter conversions.

Equivalent circuit (docs/physics.md §4): RS in series with the parallel combination of the
junction conductance gd (plus the shunt 1/RSH), the depletion capacitance Cj and the
diffusion capacitance Cd = TT*gd. Admittance at angular frequency w:

    Yj = gd + 1/RSH + j*w*(Cj + Cd),   Z = RS + 1/Yj,   Y = 1/Z

Meter readings (docs/physics.md §5): parallel Y = Gp + j*w*Cp; series Z = Rser + 1/(j*w*Cs);
D = Gp/(w*Cp) = w*Cs*Rser.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pnbench.modeling import junction
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams


def depletion_capacitance(vd, params: DiodeParams):
    """Cj [F] at junction voltage vd [V], with the simulator linearization above FC*VJ."""
    vd = np.asarray(vd, dtype=float)
    p = params
    knee = p.FC * p.VJ
    below = np.minimum(vd, knee)
    cj_low = p.CJO * (1.0 - below / p.VJ) ** (-p.M)
    f1 = p.CJO / (1.0 - p.FC) ** (1.0 + p.M)
    cj_high = f1 * (1.0 - p.FC * (1.0 + p.M) + p.M * vd / p.VJ)
    out = np.where(vd < knee, cj_low, cj_high)
    return out if out.ndim else float(out)


def junction_admittance(vd, frequency_Hz, params: DiodeParams,
                        temperature_K: float = DEFAULT_TEMPERATURE_K):
    """Yj [S] of the intrinsic junction with shunt (RS excluded); broadcasts vd and f."""
    gd = junction.junction_conductance(vd, params, temperature_K)
    g_sh = 0.0 if math.isinf(params.RSH) else 1.0 / params.RSH
    c = depletion_capacitance(vd, params) + params.TT * gd
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    return gd + g_sh + 1j * w * c


def device_admittance(v, frequency_Hz, params: DiodeParams,
                      temperature_K: float = DEFAULT_TEMPERATURE_K, *, fixture_F: float = 0.0,
                      fixture_ohm: float = 0.0):
    """Y [S] of the whole two-terminal device at terminal bias v [V], RS included.

    v and frequency_Hz broadcast against each other (for a grid pass v[:, None]).
    `fixture_F` adds a stray capacitance across the terminals (the fixture's, which the
    meter sees beside the device: docs/physics.md, the network the meter measures) and
    `fixture_ohm` the fixture's series resistance outside it; the defaults 0 give the
    device alone.
    """
    v = np.asarray(v, dtype=float)
    i = junction.current(v, params, temperature_K)
    vd = v - np.asarray(i) * params.RS
    yj = junction_admittance(vd, frequency_Hz, params, temperature_K)
    y = yj if params.RS == 0.0 else yj / (1.0 + params.RS * yj)
    if fixture_F:
        y = y + 2j * np.pi * np.asarray(frequency_Hz, dtype=float) * fixture_F
    if fixture_ohm:
        y = y / (1.0 + fixture_ohm * y)
    return y


@dataclass(frozen=True)
class QPoint:
    """The small-signal equivalent at one bias point (SI units)."""

    bias_voltage_V: float
    bias_current_A: float
    junction_voltage_V: float
    gd_S: float
    rd_ohm: float
    cj_F: float
    cd_F: float
    rs_ohm: float
    rsh_ohm: float
    temperature_K: float
    params: DiodeParams

    def admittance(self, frequency_Hz):
        """Device admittance [S] (RS included) at these frequencies."""
        g_sh = 0.0 if math.isinf(self.rsh_ohm) else 1.0 / self.rsh_ohm
        w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
        yj = self.gd_S + g_sh + 1j * w * (self.cj_F + self.cd_F)
        return yj if self.rs_ohm == 0.0 else yj / (1.0 + self.rs_ohm * yj)

    def impedance(self, frequency_Hz):
        return 1.0 / self.admittance(frequency_Hz)


def operating_point(params: DiodeParams, *, voltage: float | None = None,
                    current: float | None = None,
                    temperature_K: float = DEFAULT_TEMPERATURE_K) -> QPoint:
    """The small-signal equivalent at a terminal bias voltage or a bias current."""
    if (voltage is None) == (current is None):
        raise ValueError("give exactly one of voltage or current")
    if voltage is not None:
        v = float(voltage)
        i = float(junction.current(v, params, temperature_K))
    else:
        i = float(current)
        v = float(junction.voltage(i, params, temperature_K))
    vd = v - i * params.RS
    gd = float(junction.junction_conductance(vd, params, temperature_K))
    return QPoint(
        bias_voltage_V=v,
        bias_current_A=i,
        junction_voltage_V=vd,
        gd_S=gd,
        rd_ohm=math.inf if gd == 0 else 1.0 / gd,
        cj_F=float(depletion_capacitance(vd, params)),
        cd_F=params.TT * gd,
        rs_ohm=params.RS,
        rsh_ohm=params.RSH,
        temperature_K=temperature_K,
        params=params,
    )


#: A junction is "off" for the small-signal equivalent when its voltage lies this many
#: N*Vt below zero: exp(vd / N*Vt) < 0.7 %, so its diffusion conductance and diffusion
#: capacitance are negligible and the figures of the exact model (1e-90 S and the like)
#: say nothing a bench could see: leakage sets the conductance there.
OFF_JUNCTION_NVT = 5.0


def junction_off(q: QPoint) -> bool:
    """Whether the junction is reverse biased beyond OFF_JUNCTION_NVT * N*Vt."""
    nvt = q.params.N * junction.thermal_voltage(q.temperature_K)
    return q.junction_voltage_V < -OFF_JUNCTION_NVT * nvt


def off_rd_bound_ohm(q: QPoint) -> float:
    """A lower bound on the junction's small-signal resistance when it is off: its
    diffusion conductance IS/(N*Vt)*exp(vd/(N*Vt)) stays below IS/(N*Vt) for vd < 0,
    so rd > N*Vt/IS (Shockley diode law; from memory)."""
    nvt = q.params.N * junction.thermal_voltage(q.temperature_K)
    return nvt / q.params.IS if q.params.IS > 0 else math.inf


# --- what LCR meters report ------------------------------------------------------------

def parallel_from_admittance(y, frequency_Hz):
    """(Cp [F], Gp [S]) of the parallel model from admittance y."""
    y = np.asarray(y, dtype=complex)
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    return y.imag / w, y.real


def admittance_from_parallel(cp, gp, frequency_Hz):
    """Admittance [S] from a parallel Cp–Gp reading."""
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    return np.asarray(gp, dtype=float) + 1j * w * np.asarray(cp, dtype=float)


def series_from_admittance(y, frequency_Hz):
    """(Cs [F], Rser [ohm]) of the series model Z = Rser + 1/(j*w*Cs)."""
    z = 1.0 / np.asarray(y, dtype=complex)
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    with np.errstate(divide="ignore"):
        cs = -1.0 / (w * z.imag)
    return cs, z.real


def admittance_from_series(cs, rser, frequency_Hz):
    """Admittance [S] from a series Cs–Rs reading."""
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    z = np.asarray(rser, dtype=float) + 1.0 / (1j * w * np.asarray(cs, dtype=float))
    return 1.0 / z


def dissipation(y, frequency_Hz):
    """Dissipation factor D = Gp/(w*Cp) of admittance y."""
    cp, gp = parallel_from_admittance(y, frequency_Hz)
    w = 2.0 * np.pi * np.asarray(frequency_Hz, dtype=float)
    return gp / (w * cp)
