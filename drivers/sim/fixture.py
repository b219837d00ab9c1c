"""The simulated LCR meter's fixture: holding the device, open, or shorted.

A real fixture is opened and shorted by the operator's hands (or a switched fixture);
the simulated one by the command ``:SIMulation:FIXTure DEVice|OPEN|SHORt`` (query form
``:SIMulation:FIXTure?``), which only the simulated meter knows. pnbench sends it on the
simulated bench when the operator has confirmed a fixture state (or the plan says the
states are prepared in advance: `drivers.lcrcorrection.LcrCorrections.fixture_is`), so
an open or short measured by pnbench itself sees what a real one would. The state is the
fixture's, not the meter's: ``*RST`` leaves it as it is; a new bench holds the device.

What the meter reads (before its gain error and noise), with C the fixture's stray
capacitance and R its series resistance (the device file's ``fixture_capacitance_F`` and
``fixture_resistance_ohm``):

* open: the stray seen through R, Y = jwC / (1 + jwRC) (the meter's own open correction,
  when applied, leaves `OPEN_RESIDUAL` of C);
* shorted: Z = R + `SHORT_BAR_OHM` (the shorting bar's own resistance; the meter's own
  short correction, when applied, removes R).
"""

from __future__ import annotations

from pnbench.drivers import scpi
from pnbench.drivers.sim.instrument import (
    Handler,
    choice_argument,
    no_arguments,
    one_argument,
    scpi_short,
)

#: The fixture states, in the command's mnemonics.
STATES = ("DEVice", "OPEN", "SHORt")
PATTERN = ":SIMulation:FIXTure"
#: The resistance of the shorting bar (or of the probes pressed together): a few
#: milliohms (common practice, no source). Keeps a shorted reading finite when the
#: device file's fixture has no series resistance.
SHORT_BAR_OHM = 2e-3


def state_word(state: str) -> str:
    """The command's mnemonic of a fixture state ("device", "open", "short")."""
    return {"device": "DEVice", "open": "OPEN", "short": "SHORt"}[state]


def commands(meter) -> list[tuple[str, bool, Handler]]:
    """The set and query entries of the fixture command for ``meter`` (a `SimLcr`: its
    ``fixture`` attribute holds the state's mnemonic)."""
    def write(command: scpi.Command) -> None:
        meter.fixture = choice_argument(one_argument(command), STATES)

    def read(command: scpi.Command) -> str:
        no_arguments(command)
        return scpi_short(meter.fixture)

    return [(PATTERN, False, write), (PATTERN, True, read)]


def empty_fixture_admittance(state: str, w: float, spec: dict, applied: dict,
                             open_residual: float) -> complex:
    """What the meter sees across an open or shorted fixture (``state`` "OPEN" or
    "SHORt") at angular frequency ``w``, its own corrections ``applied`` as they are."""
    r = float(spec["fixture_resistance_ohm"])
    if state == "SHORt":
        return 1.0 / ((0.0 if applied["short"] else r) + SHORT_BAR_OHM)
    y = 1j * w * float(spec["fixture_capacitance_F"]) * (
        open_residual if applied["open"] else 1.0)
    if not applied["short"] and r > 0:
        y = y / (1.0 + r * y)
    return y
