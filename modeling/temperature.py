"""The diode's temperature equations, as the reference circuit simulator applies them.

A model card holds its values at TNOM; a simulator run at another temperature T moves
them with the equations below. They are those of ngspice's junction diode at its default
temperature levels (TLEV = 0, TLEVC = 0): the ngspice User's Manual, chapter "Diodes",
section "Diode model (D)", temperature effects, and its source
``src/spicelib/devices/dio/diotemp.c`` (ngspice-39), which descend from SPICE2 (Nagel,
UCB/ERL M520, 1975) and SPICE3. With dt = T - TNOM, Vt = kT/q and REFTEMP = 300.15 K:

* saturation current (EG [eV], XTI)::

      IS(T) = IS * exp((T/TNOM - 1) * EG/(N*Vt(T))) * (T/TNOM)**(XTI/N)

* band gap of silicon, a Varshni-form fit (Varshni, Physica 34, 149, 1967)::

      EG_si(T) = 1.16 - 7.02e-4 * T**2 / (T + 1108)    [eV]

* junction potential through the band gap's temperature dependence::

      pbfact(T) = -3*Vt(T)*ln(T/REFTEMP) + EG_si(T) - 1.1150877*T/REFTEMP
      VJ(T)     = pbfact(T) + (T/TNOM) * (VJ - pbfact(TNOM))

  limited to 1/FC when FC*VJ(T) would exceed 1;
* zero-bias capacitance, with pbo = (VJ - pbfact(TNOM)) / (TNOM/REFTEMP)::

      CJO(T) = CJO * (1 + M*(4e-4*(T - REFTEMP) - (VJ(T) - pbo)/pbo))
                   / (1 + M*(4e-4*(TNOM - REFTEMP) - (VJ - pbo)/pbo))

* series resistance (TRS = TRS1 [1/K], TRS2 [1/K^2]), applied only when RS > 0::

      RS(T) = RS * (1 + TRS*dt + TRS2*dt**2)

* breakdown voltage (TCV [V/K], the TLEV = 0 form)::

      BV(T) = BV - TCV*dt

M is capped at 0.9 in ngspice (its DIOgradingCoeffMax); N, TT, FC, IBV and RSH (not a
card parameter) do not move. ngspice's breakdown branch also re-solves the knee voltage
that carries IBV at IS(T); this project's breakdown term states BV at IBV directly, so
only BV(T) is taken over.

Everything here is pure: numbers in, numbers out.
"""

from __future__ import annotations

import math

from scipy import constants

from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

#: The simulator's reference temperature of its band-gap and capacitance laws [K].
REFTEMP_K = 300.15
#: Constants of the simulator's silicon band-gap fit EG_si(T) = A - B*T**2/(T + C).
EG_FIT_A_eV, EG_FIT_B_eV_per_K, EG_FIT_C_K = 1.16, 7.02e-4, 1108.0
#: The band-gap constant of the junction-potential law [eV].
PB_EG_REF_eV = 1.1150877
#: Slope of the capacitance law [1/K].
CJ_SLOPE_PER_K = 4e-4
#: The simulator's largest grading coefficient.
M_MAX = 0.9


def _vt(t: float) -> float:
    return constants.k * t / constants.e


def _check(t: float, name: str = "temperature") -> float:
    t = float(t)
    if not (math.isfinite(t) and t > 0):
        raise ValueError(f"{name} must be a finite number of kelvin above 0, got {t!r}")
    return t


def silicon_band_gap_eV(temperature_K: float) -> float:
    """EG_si(T) [eV], the simulator's band-gap fit (1.16 - 7.02e-4*T^2/(T + 1108))."""
    t = _check(temperature_K)
    return EG_FIT_A_eV - EG_FIT_B_eV_per_K * t * t / (t + EG_FIT_C_K)


def _pbfact(t: float) -> float:
    """The band-gap part of VJ(T) [V] (diotemp.c's pbfact)."""
    return -3.0 * _vt(t) * math.log(t / REFTEMP_K) + silicon_band_gap_eV(t) \
        - PB_EG_REF_eV * t / REFTEMP_K


def saturation_current(IS: float, N: float, EG: float, XTI: float,
                       temperature_K: float, tnom_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """IS(T) [A] of a card whose IS [A] holds at tnom_K (EG in eV)."""
    t, tn = _check(temperature_K), _check(tnom_K, "TNOM")
    ratio = t / tn
    return IS * math.exp((ratio - 1.0) * EG / (N * _vt(t)) + XTI / N * math.log(ratio))


def log_saturation_ratio(N: float, EG: float, XTI: float, temperature_K: float,
                         tnom_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """ln(IS(T)/IS(TNOM)): finite even where IS(T) itself underflows (77 K)."""
    t, tn = _check(temperature_K), _check(tnom_K, "TNOM")
    ratio = t / tn
    return (ratio - 1.0) * EG / (N * _vt(t)) + XTI / N * math.log(ratio)


def junction_potential(VJ: float, temperature_K: float,
                       tnom_K: float = DEFAULT_TEMPERATURE_K, FC: float = 0.5) -> float:
    """VJ(T) [V] of a card whose VJ holds at tnom_K; at most 1/FC, as the simulator limits."""
    t, tn = _check(temperature_K), _check(tnom_K, "TNOM")
    vj = _pbfact(t) + (t / tn) * (VJ - _pbfact(tn))
    if FC > 0 and FC * vj > 1.0:
        vj = 1.0 / FC
    return vj


def junction_capacitance(CJO: float, VJ: float, M: float, temperature_K: float,
                         tnom_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """CJO(T) [F] of a card whose CJO and VJ hold at tnom_K (M capped at 0.9)."""
    t, tn = _check(temperature_K), _check(tnom_K, "TNOM")
    m = min(M, M_MAX)
    pbo = (VJ - _pbfact(tn)) / (tn / REFTEMP_K)
    vj_t = _pbfact(t) + (t / REFTEMP_K) * pbo
    old = 1.0 + m * (CJ_SLOPE_PER_K * (tn - REFTEMP_K) - (VJ - pbo) / pbo)
    new = 1.0 + m * (CJ_SLOPE_PER_K * (t - REFTEMP_K) - (vj_t - pbo) / pbo)
    return CJO * new / old


def series_resistance(RS: float, TRS: float, TRS2: float, temperature_K: float,
                      tnom_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """RS(T) [ohm] = RS*(1 + TRS*dt + TRS2*dt^2)."""
    dt = _check(temperature_K) - _check(tnom_K, "TNOM")
    return RS * (1.0 + TRS * dt + TRS2 * dt * dt)


def breakdown_voltage(BV: float, TCV: float, temperature_K: float,
                      tnom_K: float = DEFAULT_TEMPERATURE_K) -> float:
    """BV(T) [V] = BV - TCV*dt (inf stays inf)."""
    dt = _check(temperature_K) - _check(tnom_K, "TNOM")
    return BV if math.isinf(BV) else BV - TCV * dt


def params_at(params: DiodeParams, temperature_K: float,
              tnom_K: float = DEFAULT_TEMPERATURE_K) -> DiodeParams:
    """The whole card moved from tnom_K to temperature_K (the equations of this module).

    Raises ValueError where the card cannot hold at that temperature (RS(T) or BV(T)
    not above 0 with the given coefficients; IS(T) beyond a double).
    """
    t, tn = _check(temperature_K), _check(tnom_K, "TNOM")
    if t == tn:
        return params
    p = params
    log_is = math.log(p.IS) + log_saturation_ratio(p.N, p.EG, p.XTI, t, tn)
    if log_is < math.log(1e-300) or log_is > math.log(1e300):
        raise ValueError(f"IS at {t:g} K would be exp({log_is:.4g}) A, beyond what a "
                         f"double holds; this model cannot be evaluated there")
    rs = series_resistance(p.RS, p.TRS, p.TRS2, t, tn) if p.RS > 0 else p.RS
    if rs < 0:
        raise ValueError(f"RS at {t:g} K would be {rs:.4g} ohm with TRS = {p.TRS:g}, "
                         f"TRS2 = {p.TRS2:g}: below 0")
    bv = breakdown_voltage(p.BV, p.TCV, t, tn)
    if not bv > 0:
        raise ValueError(f"BV at {t:g} K would be {bv:.4g} V with TCV = {p.TCV:g}: "
                         f"not above 0")
    values = {"IS": math.exp(log_is), "RS": rs, "BV": bv}
    if p.CJO > 0:
        values["CJO"] = junction_capacitance(p.CJO, p.VJ, p.M, t, tn)
    values["VJ"] = junction_potential(p.VJ, t, tn, p.FC)
    if not values["VJ"] > 0:
        raise ValueError(f"VJ at {t:g} K would be {values['VJ']:.4g} V: not above 0 "
                         f"(VJ = {p.VJ:g} V at {tn:g} K)")
    if values.get("CJO", 0.0) < 0:
        raise ValueError(f"CJO at {t:g} K would be below 0")
    return p.with_values(**values)


def params_at_tnom(params: DiodeParams, measured_K: float,
                   tnom_K: float = DEFAULT_TEMPERATURE_K) -> DiodeParams:
    """The inverse of params_at for the capacitance values: VJ and CJO measured at
    measured_K, given back as they hold at tnom_K (IS, RS and BV are left as they are;
    the global fit over temperature refers those itself)."""
    t, tn = _check(measured_K), _check(tnom_K, "TNOM")
    if t == tn:
        return params
    p = params
    vj_n = _pbfact(tn) + (tn / t) * (p.VJ - _pbfact(t))
    if not vj_n > 0:
        raise ValueError(f"VJ = {p.VJ:g} V at {t:g} K gives VJ = {vj_n:.4g} V at "
                         f"{tn:g} K: not above 0")
    cjo_n = p.CJO
    if p.CJO > 0:
        cjo_n = p.CJO / (junction_capacitance(1.0, vj_n, p.M, t, tn))
    return p.with_values(VJ=vj_n, CJO=cjo_n)
