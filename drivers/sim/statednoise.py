"""What the simulated bench states about its own noise, in the fits' form.

The simulated instruments add Gaussian noise of 1 sigma = percent of reading + percent of
the range the reading falls in (SMU, at 1 NPLC, scaled by 1/sqrt(NPLC): `instruments`),
and rel*|Y| + 2 pi f * floor to each of G and B (LCR meter). `device_noise` turns a
device file's figures into `fitnoise.StatedNoise` for the fits: the SMU's current and
voltage readings with their range lists (the bench autoranges, as pnbench configures
it), the meter's relative of |Y| and floor in farads. Gain errors and the fixture are
systematic, not noise, and are left out on purpose: a fit that ignores them should
misfit.
"""

from __future__ import annotations

from pnbench.drivers.sim.device import SimDevice
from pnbench.modeling.stated import StatedNoise


def device_noise(device: SimDevice) -> dict[str, StatedNoise]:
    """{"iv": SMU current noise with its voltage noise, "cv": LCR noise} at 1 NPLC."""
    smu, lcr = device.smu, device.lcr
    voltage = StatedNoise(
        relative=float(smu["voltage_noise_percent_of_reading"]) / 100.0, floor=0.0,
        floor_of_range=float(smu["voltage_noise_percent_of_range"]) / 100.0,
        ranges=tuple(float(r) for r in smu["voltage_ranges_V"]))
    current = StatedNoise(
        relative=float(smu["current_noise_percent_of_reading"]) / 100.0, floor=0.0,
        floor_of_range=float(smu["current_noise_percent_of_range"]) / 100.0,
        ranges=tuple(float(r) for r in smu["current_ranges_A"]), voltage=voltage)
    meter = StatedNoise(relative=float(lcr["noise_percent_of_reading"]) / 100.0,
                        floor=float(lcr["noise_floor_F"]))
    return {"iv": current, "cv": meter}
