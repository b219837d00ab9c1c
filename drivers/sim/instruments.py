"""The simulated source-measure unit and LCR meter: default-dialect commands over a diode.

Both answer the commands of `drivers/dialects/default.toml` (and the query form of every
setting), from the device's physics (`simphysics`), with noise from a seeded generator
that `*RST` does not reseed, so the same command sequence gives the same readings.

This module is where the bench and the tests import them from. What they share (the
watched output, the device's temperature) lives in `withoutput`, the SMU in `smu`
(its state after *RST, ranges, compliance) and the LCR meter in `lcr` (its state after
*RST, the open and short corrections, what `OPEN_RESIDUAL` leaves).
"""

from pnbench.drivers.sim.lcr import OPEN_RESIDUAL, SimLcr
from pnbench.drivers.sim.smu import SimSmu
from pnbench.drivers.sim.withoutput import (
    NOT_A_NUMBER,
    OutputHook,
    SimInstrumentWithOutput,
    Thermal,
    device_temperature,
)

__all__ = ["NOT_A_NUMBER", "OPEN_RESIDUAL", "OutputHook", "SimInstrumentWithOutput", "SimLcr",
           "SimSmu", "Thermal", "device_temperature"]
