"""What the simulated SMU and LCR meter share: one output the bench watches, the fetch of
the last reading, injected overflows, and the device's temperature under a thermal stage.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Protocol

from pnbench.drivers import scpi
from pnbench.drivers.sim.device import SimDevice
from pnbench.drivers.sim.instrument import (
    CommandError,
    Handler,
    SimInstrument,
    bool_argument,
    no_arguments,
    one_argument,
)

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

