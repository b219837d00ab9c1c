"""The simulated thermal stage: a clock of simulated time, the stage's thermal lag, and
the instrument that answers the default dialect's ``[stage]`` commands.

Thermal model: the stage's own target moves from where it is to the set point at the
ramp rate (a step when none is set), and the device temperature follows that target
through a first-order lag with the time constant of the device file's ``[stage]`` table,
clamped to what the stage can reach (``reach_low_K`` .. ``reach_high_K``: a weak chuck
settles short of a set point beyond them). With regulation off the target is the
ambient (the device file's ``temperature_K``). The stage reads the device temperature
with Gaussian noise of ``reading_noise_K``; the simulated SMU and LCR meter see it
without noise.

Time: `SimClock` counts simulated seconds. At a time scale above 0 they are wall-clock
seconds divided by the time scale. At time scale 0 a clock that a caller drives (the
in-process runner sleeps through it) moves only when slept on, instantly; an undriven
clock at time scale 0 (a bench served on its own) reads as infinitely late, so the stage
is always settled.
"""

from __future__ import annotations

import math
import threading
import time

import numpy as np

from pnbench.drivers import scpi
from pnbench.drivers.sim.device import SimDevice
from pnbench.drivers.sim.instrument import (
    CommandError,
    Handler,
    bool_argument,
    no_arguments,
    number_argument,
    one_argument,
)
from pnbench.drivers.sim.withoutput import OutputHook, SimInstrumentWithOutput

ZERO_C_K = 273.15


class SimClock:
    """Simulated seconds since the clock started (see the module notes)."""

    def __init__(self, time_scale: float = 0.0, driven: bool = False) -> None:
        self.time_scale = float(time_scale)
        self.driven = driven
        self._start = time.monotonic()
        self._virtual = 0.0
        self._lock = threading.Lock()

    def now(self) -> float:
        if self.time_scale > 0:
            return (time.monotonic() - self._start) / self.time_scale
        if not self.driven:
            return math.inf
        with self._lock:
            return self._virtual

    def sleep(self, seconds: float) -> None:
        """Let ``seconds`` of simulated time pass (wall time: seconds * time scale)."""
        seconds = max(0.0, float(seconds))
        if self.time_scale > 0:
            time.sleep(seconds * self.time_scale)
        else:
            with self._lock:
                self._virtual += seconds


class ThermalModel:
    """The device temperature behind a stage with a ramp and a first-order lag."""

    def __init__(self, clock: SimClock, start_K: float, tau_s: float, reach: tuple[float,
                 float]) -> None:
        self.clock = clock
        self.tau_s = tau_s
        self.reach = reach
        self.ambient_K = start_K
        self.set_point_K = start_K
        self.rate_K_per_s = math.inf
        self.regulating = True
        self._target = start_K  # where the stage's ramp is now
        self._t = start_K
        self._last = clock.now()
        self._lock = threading.Lock()

    def _goal(self) -> float:
        goal = self.set_point_K if self.regulating else self.ambient_K
        return min(max(goal, self.reach[0]), self.reach[1])

    def _advance(self) -> None:
        now = self.clock.now()
        dt = now - self._last if math.isfinite(now) or math.isfinite(self._last) else math.inf
        self._last = now
        if not dt > 0:
            return
        goal = self._goal()
        if math.isinf(dt):
            self._target = self._t = goal
            return
        while dt > 0:
            gap = goal - self._target
            if gap == 0:
                self._t = goal + (self._t - goal) * math.exp(-dt / self.tau_s)
                return
            ramp_s = abs(gap) / self.rate_K_per_s if self.rate_K_per_s > 0 else math.inf
            h = min(dt, ramp_s, self.tau_s / 20.0)
            start = self._target
            self._target = goal if h >= ramp_s else start + math.copysign(
                self.rate_K_per_s * h, gap)
            middle = 0.5 * (start + self._target)
            self._t = middle + (self._t - middle) * math.exp(-h / self.tau_s)
            dt -= h

    def temperature_K(self) -> float:
        with self._lock:
            self._advance()
            return self._t

    def change(self, **values: float | bool) -> None:
        """Set set_point_K, rate_K_per_s or regulating, from now on."""
        with self._lock:
            self._advance()
            for name, value in values.items():
                setattr(self, name, value)


class SimStage(SimInstrumentWithOutput):
    """A thermal stage under the default dialect (degrees Celsius, ramp per minute).

    Its "output" is regulation; a client that leaves does not turn it off (a stage keeps
    its set point when the computer goes), only *RST and commands do.
    """

    name = "stage"

    def __init__(self, device: SimDevice, thermal: ThermalModel,
                 on_output: OutputHook | None = None) -> None:
        self.spec = device.stage
        self.thermal = thermal
        self.rng = np.random.default_rng(self.spec["seed"])
        super().__init__(self.spec["identity"], device.timing["command_s"], on_output)
        self.reset()

    def set_output(self, state: bool, cause: str = "command") -> None:
        if cause in ("command", "reset"):
            super().set_output(state, cause)
            self.thermal.change(regulating=state)

    def reset(self) -> None:
        super().reset()
        self.thermal.change(set_point_K=self.thermal.ambient_K, rate_K_per_s=math.inf)
        self.set_output(True, "reset")

    def commands(self) -> list[tuple[str, bool, Handler]]:
        spec = self.spec
        low_c, high_c = spec["lowest_K"] - ZERO_C_K, spec["highest_K"] - ZERO_C_K

        def set_point(command: scpi.Command) -> None:
            value = number_argument(one_argument(command), low_c, high_c,
                                    self.thermal.ambient_K - ZERO_C_K)
            self.thermal.change(set_point_K=value + ZERO_C_K)

        def set_point_query(command: scpi.Command) -> float:
            no_arguments(command)
            return self.thermal.set_point_K - ZERO_C_K

        def rate(command: scpi.Command) -> None:
            value = number_argument(one_argument(command), 1e-3, spec["max_ramp_K_per_min"],
                                    spec["max_ramp_K_per_min"])
            self.thermal.change(rate_K_per_s=value / 60.0)

        def rate_query(command: scpi.Command) -> float:
            no_arguments(command)
            r = self.thermal.rate_K_per_s
            return r * 60.0 if math.isfinite(r) else spec["max_ramp_K_per_min"]

        def measure(command: scpi.Command) -> float:
            no_arguments(command)
            if self.take_overflow():
                return math.inf
            noise = spec["reading_noise_K"] * float(self.rng.standard_normal())
            return self.thermal.temperature_K() + noise - ZERO_C_K

        def control(command: scpi.Command) -> None:
            self.set_output(bool_argument(one_argument(command)))

        def control_query(command: scpi.Command) -> str:
            no_arguments(command)
            return "1" if self.output else "0"

        def refuse(command: scpi.Command) -> None:
            raise CommandError(-113, command.header)

        return [
            (":SOURce:TEMPerature:SPOint", False, set_point),
            (":SOURce:TEMPerature:SPOint", True, set_point_query),
            (":SOURce:TEMPerature:RATE", False, rate),
            (":SOURce:TEMPerature:RATE", True, rate_query),
            (":SOURce:TEMPerature:CONTrol", False, control),
            (":SOURce:TEMPerature:CONTrol", True, control_query),
            (":MEASure:TEMPerature", True, measure),
            (":MEASure:TEMPerature", False, refuse),
        ]
