"""The simulated source-measure unit: default-dialect commands over a diode.

It answers the SMU commands of `drivers/dialects/default.toml` (and the query form of
every setting), from the device's physics (`simphysics`), with noise from a seeded
generator that `*RST` does not reseed, so the same command sequence gives the same
readings.

After *RST: sourcing voltage, levels 0, current limit 100 uA, voltage limit 20 V,
both ranges on auto, 1 NPLC, 2-wire sensing, output off. A reading with the output off
answers the not-a-number marker in both fields and queues -221. Noise is specified at
1 NPLC and scales with 1/sqrt(NPLC). Setting a range rounds up to the next range of the
device file and turns autorange off; a reading beyond a fixed range (by more than 5 %)
answers the overflow marker.
"""

from __future__ import annotations

import math

import numpy as np

from pnbench.drivers import scpi
from pnbench.drivers.sim import physics as simphysics
from pnbench.drivers.sim.device import SimDevice
from pnbench.drivers.sim.instrument import (
    Handler,
    Setting,
    no_arguments,
    number_argument,
    one_argument,
    remembered,
)
from pnbench.drivers.sim.withoutput import (
    NOT_A_NUMBER,
    OutputHook,
    SimInstrumentWithOutput,
    Thermal,
    device_temperature,
)


def _max_v(smu: SimSmu) -> tuple[float, float]:
    top = smu.voltage_ranges[-1]
    return -top, top


def _max_i(smu: SimSmu) -> tuple[float, float]:
    top = smu.current_ranges[-1]
    return -top, top


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
