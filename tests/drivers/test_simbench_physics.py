"""What the simulated instruments make of the diode: compliance, AC-level distortion,
instrument time. Pure functions and state machines, no sockets."""

from __future__ import annotations

import math
import subprocess

import numpy as np
import pytest
from scipy.special import i1
from spicehelp import parse_ascii_raw

from pnbench.drivers.sim import physics as simphysics
from pnbench.drivers.sim.device import parse_device
from pnbench.drivers.sim.lcr import SimLcr
from pnbench.drivers.sim.smu import SimSmu
from pnbench.modeling import aclevel, junction, smallsignal
from pnbench.modeling.modelset import ModelSet
from pnbench.modeling.params import DEFAULT_TEMPERATURE_K, DiodeParams

T = DEFAULT_TEMPERATURE_K
DIODE = DiodeParams(IS=1e-14, N=1.0, RS=2.0, CJO=20e-12, TT=5e-9)


def test_voltage_source_sags_to_hold_the_current_limit():
    free = simphysics.source_point(DIODE, T, "voltage", 0.55, 1e-3)
    assert free == (0.55, pytest.approx(junction.current(0.55, DIODE, T), rel=1e-12), False)
    v, i, tripped = simphysics.source_point(DIODE, T, "voltage", 0.9, 1e-3)
    assert tripped and i == 1e-3
    assert v < 0.9
    assert v == pytest.approx(junction.voltage(1e-3, DIODE, T), rel=1e-12)


def test_current_source_stops_at_the_voltage_limit():
    v, i, tripped = simphysics.source_point(DIODE, T, "current", -1e-3, 10.0)
    assert tripped and v == -10.0
    assert i == pytest.approx(junction.current(-10.0, DIODE, T), rel=1e-12)
    zener = DiodeParams(IS=1e-14, BV=5.6, IBV=1e-3)
    v, i, tripped = simphysics.source_point(zener, T, "current", -2e-3, 10.0)
    assert not tripped and i == -2e-3
    assert -6.0 < v < -5.6


def test_small_ac_level_reads_the_small_signal_admittance():
    for bias, f in ((-3.0, 1e6), (0.0, 1e5), (0.6, 1e4)):
        y = simphysics.fundamental_admittance(bias, f, 1e-9, DIODE, T)
        expected = complex(smallsignal.device_admittance(bias, f, DIODE, T))
        assert y == pytest.approx(expected, rel=1e-9)


def test_large_ac_level_follows_the_bessel_series_without_rs():
    """exp(x*cos t) = I0(x) + 2*sum Ik(x)*cos(k*t) (Abramowitz & Stegun 9.6.34), so the
    fundamental conductance of the exponential is gd*2*I1(x)/x; the diffusion
    capacitance TT*gd scales the same way (equation number from memory). scipy.special.i1 is
    the reference."""
    p = DiodeParams(IS=1e-14, N=1.0, TT=5e-9)
    n_vt = junction.thermal_voltage(T)
    for x in (0.5, 1.0, 2.0, 4.0):
        y = simphysics.fundamental_admittance(0.6, 1e5, x * n_vt / math.sqrt(2), p, T)
        gd = junction.junction_conductance(0.6, p, T)
        factor = 2.0 * i1(x) / x
        assert y.real == pytest.approx(gd * factor, rel=1e-9)
        assert y.imag == pytest.approx(2 * math.pi * 1e5 * p.TT * gd * factor, rel=1e-9)


def test_large_ac_level_agrees_with_the_modeling_estimate():
    """modeling.aclevel samples the junction current itself (an independent route)."""
    p = DiodeParams(IS=1e-14, N=1.3, RSH=1e5)
    for amplitude in (0.01, 0.05):
        y = simphysics.fundamental_admittance(0.55, 1e3, amplitude / math.sqrt(2), p, T)
        g = aclevel.fundamental_conductance(p, 0.55, amplitude, T, samples=256)
        assert y.real == pytest.approx(g, rel=1e-9)


def _ngspice_fundamental(ngspice: str, p: DiodeParams, bias: float, f: float, va: float,
                         folder) -> complex:
    card = ModelSet.from_params(p, temperature_K=T).card_text("DREF")
    period = 1.0 / f
    netlist = "\n".join([
        "* fundamental of a diode driven by bias plus a sinusoid", card.rstrip(),
        f"V1 a 0 DC {bias!r} SIN({bias!r} {va!r} {f!r})", "D1 a 0 DREF",
        ".options reltol=1e-7 abstol=1e-15 vntol=1e-9 chgtol=1e-20 tnom=27", ".temp 27",
        ".control", "set filetype=ascii",
        f"tran {period / 2000!r} {12 * period!r} {4 * period!r} {period / 2000!r}",
        "linearize i(v1)", "write tran.raw i(v1)", "quit", ".endc", ".end", ""])
    (folder / "tran.cir").write_text(netlist)
    subprocess.run([ngspice, "-b", "tran.cir"], cwd=folder, capture_output=True, timeout=60,
                   check=True)
    vectors = parse_ascii_raw((folder / "tran.raw").read_text())
    t, i = vectors["time"], -vectors["i(v1)"]
    last = t >= t[-1] - 8 * period - 1e-15
    t, i = t[last][:-1], i[last][:-1]
    first = 2.0 * np.mean(i * np.exp(-2j * np.pi * f * t))
    return complex(first / (-1j * va))  # SIN is va*sin(wt): phasor -j*va


@pytest.mark.ngspice
def test_distortion_matches_an_ngspice_transient(ngspice, tmp_path):
    """ngspice transient (batch mode) of the full large-signal diode with RS, CJO and TT;
    the fundamental taken over 8 periods. The describing function neglects harmonic
    currents through RS and the rectified DC shift: within 1 % at 20 mV peak, where the
    small-signal model is 6 % off; exact (1e-5) without RS."""
    y_spice = _ngspice_fundamental(ngspice, DIODE, 0.62, 1e5, 0.02, tmp_path)
    y = simphysics.fundamental_admittance(0.62, 1e5, 0.02 / math.sqrt(2), DIODE, T)
    small = complex(smallsignal.device_admittance(0.62, 1e5, DIODE, T))
    assert abs(small.real / y_spice.real - 1) > 0.05
    assert y.real == pytest.approx(y_spice.real, rel=0.01)
    assert y.imag == pytest.approx(y_spice.imag, rel=0.01)
    no_rs = DIODE.with_values(RS=0.0)
    y_spice = _ngspice_fundamental(ngspice, no_rs, 0.6, 1e5, 0.03, tmp_path)
    y = simphysics.fundamental_admittance(0.6, 1e5, 0.03 / math.sqrt(2), no_rs, T)
    assert y.real == pytest.approx(y_spice.real, rel=1e-4)
    assert y.imag == pytest.approx(y_spice.imag, rel=1e-4)


def test_measured_adds_gain_and_noise_and_overflows_beyond_range():
    rng = np.random.default_rng(3)
    values = [simphysics.measured(1e-3, 1e-2, 0.1, 0.01, 1.0, 1.0, rng) for _ in range(4000)]
    sigma = (0.1 * 1e-3 + 0.01 * 1e-2) / 100
    assert np.mean(values) == pytest.approx(1.01e-3, abs=4 * sigma / math.sqrt(4000))
    assert np.std(values) == pytest.approx(sigma, rel=0.05)
    assert simphysics.measured(-1.0, None, 0, 0, 0, 1, rng) == -math.inf
    assert simphysics.choose_range(2e-3, (1e-3, 1e-2), None) == 1e-2
    assert simphysics.choose_range(1.04e-3, (1e-3, 1e-2), 1e-3) == 1e-3
    assert simphysics.choose_range(1.06e-3, (1e-3, 1e-2), 1e-3) is None
    assert simphysics.choose_range(2.0, (1e-3, 1.0), None) is None


def _run(instrument, message: str):
    instrument.begin_message()
    results = [instrument.execute(unit) for unit in message.split(";")]
    replies = [r.response for r in results if r.response is not None]
    return replies, sum(r.busy_s for r in results)


def test_instrument_time_comes_from_nplc_settling_and_command_time():
    device = parse_device("[timing]\nline_frequency_Hz = 60\nsmu_settling_s = 0.002\n"
                          "command_s = 0.001\nlcr_measurement_s = 0.03\nlcr_settling_s = 0.01\n")
    smu = SimSmu(device)
    _, busy = _run(smu, ":OUTP ON;:SENS:CURR:NPLC 6;:SOUR:VOLT 0.5;:READ?")
    assert busy == pytest.approx(4 * 0.001 + 0.002 + 6 / 60)
    _, busy = _run(smu, ":READ?")  # nothing changed: no settling
    assert busy == pytest.approx(0.001 + 6 / 60)
    lcr = SimLcr(device)
    _, busy = _run(lcr, ":SOUR:BIAS:VOLT -1;:READ:IMP?;:READ:IMP?")
    assert busy == pytest.approx(3 * 0.001 + 0.01 + 2 * 0.03)


def test_noise_shrinks_with_longer_integration():
    device = parse_device("[diode]\nIS = 1e-14\n[smu]\ncurrent_noise_percent_of_reading = 1.0"
                          "\ncurrent_noise_percent_of_range = 0.0\n")
    spreads = []
    for nplc in (0.1, 10):
        smu = SimSmu(device)
        _run(smu, f":OUTP ON;:SOUR:VOLT 0.6;:SOUR:CURR:PROT 0.1;:SENS:CURR:NPLC {nplc}")
        currents = [float(_run(smu, ":READ?")[0][0].split(",")[1]) for _ in range(400)]
        spreads.append(np.std(currents) / np.mean(currents))
    assert spreads[0] == pytest.approx(0.01 * math.sqrt(10), rel=0.15)
    assert spreads[1] == pytest.approx(0.01 / math.sqrt(10), rel=0.15)
