"""The simulated source-measure unit and LCR meter: default-dialect commands over a diode.

Both answer the commands of `drivers/dialects/default.toml` (and the query form of every
setting), from the device's physics (`simphysics`), with noise from a seeded generator
that `*RST` does not reseed, so the same command sequence gives the same readings.

SMU after *RST: sourcing voltage, levels 0, current limit 100 uA, voltage limit 20 V,
both ranges on auto, 1 NPLC, 2-wire sensing, output off. A reading with the output off
answers the not-a-number marker in both fields and queues -221. Noise is specified at
1 NPLC and scales with 1/sqrt(NPLC). Setting a range rounds up to the next range of the
device file and turns autorange off; a reading beyond a fixed range (by more than 5 %)
answers the overflow marker.

LCR meter after *RST: 1 kHz, 1 V rms, bias 0 V and off, form parallel (Cp, Gp); open and short
corrections are kept (they live in the meter's memory, not in its settings). Running a
correction measures it and turns it on; `:SENS:CORR:OPEN:STAT OFF` (SHOR likewise) keeps
the data but stops applying them. An open correction on leaves `OPEN_RESIDUAL` of the
fixture's stray capacitance in the readings, a short correction on none of its series
resistance; `:SENS:CORR:OPEN:DATA?` answers the open's G, B and `:SENS:CORR:SHOR:DATA?`
the short's R, X at the frequency set (zeros before the correction was run), what the
meter measured with the fixture in that state (the open through the fixture's series
resistance). A new bench is a meter switched on afresh: no correction. The AC level
is the rms voltage across the device. The bias source sags to hold its current limit.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Protocol

import numpy as np

from pnbench.drivers import scpi
from pnbench.drivers.sim import physics as simphysics
from pnbench.drivers.sim.device import SimDevice
from pnbench.drivers.sim.instrument import (
    CommandError,
    Handler,
    Setting,
    SimInstrument,
    bool_argument,
    no_arguments,
    number_argument,
    one_argument,
    remembered,
)
from pnbench.modeling import smallsignal

#: Called as on_output(instrument, state, cause) whenever an output changes;
#: cause is "command", "reset", "disconnect" or "close".
OutputHook = Callable[[str, bool, str], None]
NOT_A_NUMBER = scpi.format_value(math.nan)


class Thermal(Protocol):
    """Where the device's temperature comes from when a thermal stage holds it."""

    def temperature_K(self) -> float: ...


def device_temperature(thermal: Thermal | None, device: SimDevice) -> float:
    """The device temperature now [K]: the stage's (to 0.1 mK, so readings at a held
    temperature share their physics), else the device file's."""
    if thermal is None:
        return device.temperature_K
    return round(thermal.temperature_K(), 4)


def _max_v(smu: SimSmu) -> tuple[float, float]:
    top = smu.voltage_ranges[-1]
    return -top, top


def _max_i(smu: SimSmu) -> tuple[float, float]:
    top = smu.current_ranges[-1]
    return -top, top


class SimInstrumentWithOutput(SimInstrument):
    """An instrument with one output that the bench watches."""

    name = "instrument"

    def __init__(self, identity: str, command_s: float, on_output: OutputHook | None) -> None:
        self._output = False
        self.on_output = on_output
        self.overflow_pending = 0
        self.last_reading: str | None = None  # what a fetch returns again
        super().__init__(identity, command_s)

    @property
    def output(self) -> bool:
        return self._output

    def set_output(self, state: bool, cause: str = "command") -> None:
        if state != self._output:
            self.unsettled = True
            self._output = state
            if self.on_output:
                self.on_output(self.name, state, cause)

    def _output_commands(self, pattern: str) -> list[tuple[str, bool, Handler]]:
        def write(command: scpi.Command) -> None:
            self.set_output(bool_argument(one_argument(command)))

        def read(command: scpi.Command) -> str:
            no_arguments(command)
            return "1" if self.output else "0"

        return [(pattern, False, write), (pattern, True, read)]

    def _fetch(self, command: scpi.Command) -> str:
        no_arguments(command)
        if self.last_reading is None:
            raise CommandError(-230, "no reading taken yet")
        return self.last_reading

    def take_overflow(self) -> bool:
        """Whether an injected overflow fault claims this reading."""
        if self.overflow_pending:
            self.overflow_pending -= 1
            return True
        return False

    def reset(self) -> None:
        super().reset()
        self.set_output(False, "reset")


class SimSmu(SimInstrumentWithOutput):
    """A source-measure unit with the diode on its terminals."""

    name = "smu"
    SETTINGS = (
        Setting(":SOURce:FUNCtion[:MODE]", "mode", "choice", choices=("VOLTage", "CURRent"),
                settles=True),
        Setting(":SOURce:VOLTage[:LEVel][:IMMediate][:AMPLitude]", "voltage_level_V",
                "number", _max_v, settles=True),
        Setting(":SOURce:CURRent[:LEVel][:IMMediate][:AMPLitude]", "current_level_A",
                "number", _max_i, settles=True),
        Setting(":SOURce:CURRent:PROTection[:LEVel]", "current_limit_A", "number",
                lambda s: (s.current_ranges[0] / 100, s.current_ranges[-1]), settles=True),
        Setting(":SOURce:VOLTage:PROTection[:LEVel]", "voltage_limit_V", "number",
                lambda s: (s.voltage_ranges[0] / 100, s.voltage_ranges[-1]), settles=True),
        Setting(":SENSe:CURRent[:DC]:RANGe:AUTO", "current_autorange", "bool"),
        Setting(":SENSe:VOLTage[:DC]:RANGe:AUTO", "voltage_autorange", "bool"),
        Setting(":SENSe:CURRent[:DC]:NPLCycles", "nplc", "number", lambda s: (0.01, 10.0)),
        Setting(":SENSe:VOLTage[:DC]:NPLCycles", "nplc", "number", lambda s: (0.01, 10.0)),
        Setting(":SENSe:REMote", "remote_sense", "bool", settles=True),
    )

    def __init__(self, device: SimDevice, on_output: OutputHook | None = None,
                 thermal: Thermal | None = None) -> None:
        spec = device.smu
        self.spec, self.timing = spec, device.timing
        self.voltage_ranges = tuple(spec["voltage_ranges_V"])
        self.current_ranges = tuple(spec["current_ranges_A"])
        self.device, self.thermal = device, thermal
        self.temperature_K = device.temperature_K
        self._params: dict[tuple, object] = {}
        self.rng = np.random.default_rng(spec["seed"])
        self.defaults = {
            "mode": "VOLTage", "voltage_level_V": 0.0, "current_level_A": 0.0,
            "current_limit_A": min(1e-4, self.current_ranges[-1]),
            "voltage_limit_V": min(20.0, self.voltage_ranges[-1]),
            "current_autorange": True, "voltage_autorange": True, "nplc": 1.0,
            "remote_sense": False,
        }
        self.current_range_A = self.current_ranges[-1]
        self.voltage_range_V = self.voltage_ranges[-1]
        self.tripped = False
        self._points: dict[tuple, tuple[float, float, bool]] = {}
        super().__init__(spec["identity"], device.timing["command_s"], on_output)
        self.reset()

    def commands(self) -> list[tuple[str, bool, Handler]]:
        return [
            *self._output_commands(":OUTPut[:STATe]"),
            *self._range_commands(":SENSe:CURRent[:DC]:RANGe[:UPPer]", "current"),
            *self._range_commands(":SENSe:VOLTage[:DC]:RANGe[:UPPer]", "voltage"),
            (":READ", True, self._read),
            (":FETCh", True, self._fetch),
            (":SOURce:CURRent:PROTection:TRIPped", True,
             lambda c: "1" if self.mode == "VOLTage" and self._now()[2] else "0"),
            (":SOURce:VOLTage:PROTection:TRIPped", True,
             lambda c: "1" if self.mode == "CURRent" and self._now()[2] else "0"),
        ]

    def reset(self) -> None:
        super().reset()
        self.current_range_A = self.current_ranges[-1]
        self.voltage_range_V = self.voltage_ranges[-1]
        self.tripped = False

    def _range_commands(self, pattern: str, quantity: str) -> list[tuple[str, bool, Handler]]:
        ranges = self.current_ranges if quantity == "current" else self.voltage_ranges
        attr = f"{quantity}_range_{'A' if quantity == 'current' else 'V'}"

        def write(command: scpi.Command) -> None:
            wanted = abs(number_argument(one_argument(command), -ranges[-1], ranges[-1],
                                         ranges[-1]))
            setattr(self, attr, next(r for r in ranges if r >= wanted * (1 - 1e-9)))
            setattr(self, f"{quantity}_autorange", False)

        def read(command: scpi.Command) -> float:
            no_arguments(command)
            return float(getattr(self, attr))

        return [(pattern, False, write), (pattern, True, read)]

    def _now(self) -> tuple[float, float, bool]:
        """(voltage, current, in compliance) on the device now; zeros with output off."""
        if not self.output:
            return 0.0, 0.0, False
        self.temperature_K = device_temperature(self.thermal, self.device)
        key = (self.mode, self.voltage_level_V, self.current_level_A, self.current_limit_A,
               self.voltage_limit_V, self.remote_sense, self.temperature_K)
        return remembered(self._points, key, self._source_point)

    def _params_now(self):
        """The diode at the device temperature now, with the leads in 2-wire mode."""
        p = self.device.params_at(self.temperature_K)
        leads = 0.0 if self.remote_sense else self.spec["lead_resistance_ohm"]
        return p.with_values(RS=p.RS + leads)

    def _source_point(self) -> tuple[float, float, bool]:
        t = self.temperature_K
        params = remembered(self._params, (t, self.remote_sense), self._params_now)
        if self.mode == "VOLTage":
            return simphysics.source_point(params, t, "voltage",
                                           self.voltage_level_V, self.current_limit_A)
        return simphysics.source_point(params, t, "current",
                                       self.current_level_A, self.voltage_limit_V)

    def _read(self, command: scpi.Command) -> str:
        no_arguments(command)
        settle = self.timing["smu_settling_s"] if self.unsettled else 0.0
        self.add_busy(settle + self.nplc / self.timing["line_frequency_Hz"])
        self.unsettled = False
        if not self.output:
            self.tripped = False
            self.push_error(-221, "output is off; no reading")
            self.last_reading = f"{NOT_A_NUMBER},{NOT_A_NUMBER}"
            return self.last_reading
        v, i, self.tripped = self._now()
        spec, scale = self.spec, 1.0 / math.sqrt(self.nplc)
        v_range = simphysics.choose_range(
            v, self.voltage_ranges, None if self.voltage_autorange else self.voltage_range_V)
        i_range = simphysics.choose_range(
            i, self.current_ranges, None if self.current_autorange else self.current_range_A)
        if v_range:
            self.voltage_range_V = v_range
        if i_range:
            self.current_range_A = i_range
        mv = simphysics.measured(v, v_range, spec["voltage_noise_percent_of_reading"],
                                 spec["voltage_noise_percent_of_range"],
                                 spec["voltage_gain_error_percent"], scale, self.rng)
        mi = simphysics.measured(i, i_range, spec["current_noise_percent_of_reading"],
                                 spec["current_noise_percent_of_range"],
                                 spec["current_gain_error_percent"], scale, self.rng)
        if self.take_overflow():
            if self.mode == "VOLTage":
                mi = math.copysign(math.inf, i or 1.0)
            else:
                mv = math.copysign(math.inf, v or 1.0)
        self.last_reading = f"{scpi.format_value(mv)},{scpi.format_value(mi)}"
        return self.last_reading


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
            (":READ:IMPedance", True, self._read),
            (":FETCh:IMPedance", True, self._fetch),
        ]

    def admittance(self) -> complex:
        """The admittance between the meter's terminals now, before noise and gain."""
        t = device_temperature(self.thermal, self.device)
        if t != self.temperature_K:
            self.temperature_K, self.params = t, self.device.params_at(t)
        key = (self.bias_V if self.output else 0.0, self.frequency_Hz, self.ac_level_V,
               self.applied["open"], self.applied["short"], t)
        return remembered(self._admittances, key, lambda: self._terminal_admittance(key[0]))

    def _terminal_admittance(self, bias_V: float) -> complex:
        spec = self.spec
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
