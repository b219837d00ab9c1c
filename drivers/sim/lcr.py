"""The simulated LCR meter with its DC bias source: default-dialect commands over a diode.

It answers the LCR commands of `drivers/dialects/default.toml` (and the query form of
every setting), from the device's physics (`simphysics`), with noise from a seeded
generator that `*RST` does not reseed, so the same command sequence gives the same
readings.

After *RST: 1 kHz, 1 V rms, bias 0 V and off, form parallel (Cp, Gp); open and short
corrections are kept (they live in the meter's memory, not in its settings). Running a
correction measures it and turns it on; `:SENS:CORR:OPEN:STAT OFF` (SHOR likewise) keeps
the data but stops applying them. An open correction on leaves `OPEN_RESIDUAL` of the
fixture's stray capacitance in the readings, a short correction on none of its series
resistance; `:SENS:CORR:OPEN:DATA?` answers the open's G, B and `:SENS:CORR:SHOR:DATA?`
the short's R, X at the frequency set (zeros before the correction was run), what the
meter measured with the fixture in that state (the open through the fixture's series
resistance). A new bench is a meter switched on afresh: no correction. Its fixture
holds the device unless `:SIMulation:FIXTure` opens or shorts it (`fixture`). The AC level
is the rms voltage across the device. The bias source sags to hold its current limit.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.drivers import scpi
from pnbench.drivers.sim import fixture as simfixture
from pnbench.drivers.sim import physics as simphysics
from pnbench.drivers.sim.device import SimDevice
from pnbench.drivers.sim.instrument import (
    Handler,
    Setting,
    bool_argument,
    no_arguments,
    one_argument,
    remembered,
)
from pnbench.drivers.sim.withoutput import (
    OutputHook,
    SimInstrumentWithOutput,
    Thermal,
    device_temperature,
)
from pnbench.modeling import smallsignal

#: The fraction of the fixture's stray capacitance an open correction leaves: the open
#: is measured once, with the fixture's leads not quite where they are with a part in
#: it (a few tenths of a percent, common practice, no source).
OPEN_RESIDUAL = 0.003


class SimLcr(SimInstrumentWithOutput):
    """An LCR meter with its DC bias source, measuring the diode."""

    name = "lcr"
    #: the reading forms it offers (dialect words `parallel` and `series`)
    FORMS = ("PARallel", "SERies")

    def __init__(self, device: SimDevice, on_output: OutputHook | None = None,
                 thermal: Thermal | None = None) -> None:
        spec = device.lcr
        self.spec, self.timing = spec, device.timing
        self.device, self.thermal = device, thermal
        self.params = device.params
        self.temperature_K = device.temperature_K
        self.rng = np.random.default_rng(spec["seed"])
        self.SETTINGS = (
            Setting(":SOURce:FREQuency[:CW]", "frequency_Hz", "number",
                    lambda s: (spec["frequency_min_Hz"], spec["frequency_max_Hz"]),
                    settles=True),
            Setting(":SOURce:VOLTage[:LEVel]", "ac_level_V", "number",
                    lambda s: (spec["ac_level_min_V"], spec["ac_level_max_V"]), settles=True),
            Setting(":SOURce:BIAS:VOLTage[:LEVel]", "bias_V", "number",
                    lambda s: (-spec["bias_max_V"], spec["bias_max_V"]), settles=True),
            Setting(":SENSe:IMPedance:MODel", "form", "choice", choices=self.FORMS),
        )
        self.defaults = {"frequency_Hz": min(max(1e3, spec["frequency_min_Hz"]),
                                             spec["frequency_max_Hz"]),
                         "ac_level_V": min(1.0, spec["ac_level_max_V"]), "bias_V": 0.0,
                         "form": "PARallel"}
        self.measured = {"open": False, "short": False}  # the correction's data taken
        self.applied = {"open": False, "short": False}  # and turned on
        self.fixture = "DEVice"  # the fixture's state, not a setting (`sim.fixture`)
        self._admittances: dict[tuple, complex] = {}
        super().__init__(spec["identity"], device.timing["command_s"], on_output)
        self.reset()

    def commands(self) -> list[tuple[str, bool, Handler]]:
        def data(which: str) -> Handler:
            def ask(command: scpi.Command) -> str:
                no_arguments(command)
                pair = self._correction_data(which) if self.measured[which] else (0.0, 0.0)
                return ",".join(scpi.format_value(v) for v in pair)
            return ask

        def correction(which: str) -> Handler:
            def run(command: scpi.Command) -> None:
                no_arguments(command)
                self.add_busy(10 * self.timing["lcr_measurement_s"])
                self.measured[which] = self.applied[which] = True
            return run

        def state(which: str) -> Handler:
            def switch(command: scpi.Command) -> None:
                self.applied[which] = bool_argument(one_argument(command))
            return switch

        def state_query(which: str) -> Handler:
            def ask(command: scpi.Command) -> str:
                no_arguments(command)
                return "1" if self.applied[which] else "0"
            return ask

        return [
            *self._output_commands(":SOURce:BIAS:STATe"),
            (":SENSe:CORRection:OPEN[:EXECute]", False, correction("open")),
            (":SENSe:CORRection:SHORt[:EXECute]", False, correction("short")),
            (":SENSe:CORRection:OPEN:STATe", False, state("open")),
            (":SENSe:CORRection:SHORt:STATe", False, state("short")),
            (":SENSe:CORRection:OPEN:STATe", True, state_query("open")),
            (":SENSe:CORRection:SHORt:STATe", True, state_query("short")),
            (":SENSe:CORRection:OPEN:DATA", True, data("open")),
            (":SENSe:CORRection:SHORt:DATA", True, data("short")),
            *simfixture.commands(self),
            (":READ:IMPedance", True, self._read),
            (":FETCh:IMPedance", True, self._fetch),
        ]

    def admittance(self) -> complex:
        """The admittance between the meter's terminals now, before noise and gain."""
        t = device_temperature(self.thermal, self.device)
        if t != self.temperature_K:
            self.temperature_K, self.params = t, self.device.params_at(t)
        key = (self.bias_V if self.output else 0.0, self.frequency_Hz, self.ac_level_V,
               self.applied["open"], self.applied["short"], t, self.fixture)
        return remembered(self._admittances, key, lambda: self._terminal_admittance(key[0]))

    def _terminal_admittance(self, bias_V: float) -> complex:
        spec = self.spec
        if self.fixture != "DEVice":  # nothing in it: the fixture's stray, or its short
            return simfixture.empty_fixture_admittance(
                self.fixture, 2.0 * math.pi * self.frequency_Hz, spec, self.applied,
                OPEN_RESIDUAL)
        bias, _ = simphysics.bias_point(self.params, self.temperature_K, bias_V,
                                        spec["bias_current_limit_A"])
        y = simphysics.fundamental_admittance(bias, self.frequency_Hz, self.ac_level_V,
                                              self.params, self.temperature_K)
        w = 2.0 * math.pi * self.frequency_Hz
        stray = spec["fixture_capacitance_F"]
        y += 1j * w * stray * (OPEN_RESIDUAL if self.applied["open"] else 1.0)
        if not self.applied["short"] and spec["fixture_resistance_ohm"] > 0:
            y = y / (1.0 + spec["fixture_resistance_ohm"] * y)
        return y

    def _correction_data(self, which: str) -> tuple[float, float]:
        """What the correction measured at the frequency set: the open's (G, B) [S], the
        stray less `OPEN_RESIDUAL` seen through the fixture's series resistance; the
        short's (R, X) [ohm]."""
        w = 2.0 * math.pi * self.frequency_Hz
        r = self.spec["fixture_resistance_ohm"]
        if which == "short":
            return (r, 0.0)
        y = 1j * w * self.spec["fixture_capacitance_F"] * (1.0 - OPEN_RESIDUAL)
        y = y / (1.0 + r * y)
        return (y.real, y.imag)

    def _read(self, command: scpi.Command) -> str:
        no_arguments(command)
        settle = self.timing["lcr_settling_s"] if self.unsettled else 0.0
        self.add_busy(settle + self.timing["lcr_measurement_s"])
        self.unsettled = False
        spec = self.spec
        y = self.admittance() * (1.0 + spec["gain_error_percent"] / 100.0)
        w = 2.0 * math.pi * self.frequency_Hz
        sigma = spec["noise_percent_of_reading"] / 100.0 * abs(y) + w * spec["noise_floor_F"]
        if sigma > 0:
            y += sigma * complex(*self.rng.normal(0.0, 1.0, 2))
        if self.form == "PARallel":
            primary, secondary = smallsignal.parallel_from_admittance(y, self.frequency_Hz)
        else:
            primary, secondary = smallsignal.series_from_admittance(y, self.frequency_Hz)
        primary, secondary = float(primary), float(secondary)
        if self.take_overflow():
            primary = secondary = math.inf
        self.last_reading = f"{scpi.format_value(primary)},{scpi.format_value(secondary)}"
        return self.last_reading
