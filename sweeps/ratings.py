"""A plan against an instrument's ratings that come from outside the plan file.

The plan's own [instruments] ratings are checked while it is read (`plan.py`). With
--simulate the instruments are the simulated bench's, whose ranges are in the device
file: `check_simulated(plan, device)` refuses, with PlanError (exit 2), a plan whose
limits or levels the simulated SMU and LCR meter could not deliver, as a real
instrument would refuse them.
"""

from __future__ import annotations

from pnbench.errors import PlanError
from pnbench.sweeps.plan import Plan


def simulated_ratings(device) -> dict:
    """Role -> rating key -> value, from a loaded simulated device (drivers.simdevice)."""
    return {
        "smu": {"max_voltage": max(device.smu["voltage_ranges_V"]),
                "max_current": max(device.smu["current_ranges_A"])},
        "lcr": {"max_bias": device.lcr["bias_max_V"],
                "max_ac_level": device.lcr["ac_level_max_V"],
                "min_ac_level": device.lcr["ac_level_min_V"],
                "min_frequency": device.lcr["frequency_min_Hz"],
                "max_frequency": device.lcr["frequency_max_Hz"]},
    }


def problems(plan: Plan, ratings: dict) -> list[str]:
    out = []
    smu, lcr = ratings.get("smu", {}), ratings.get("lcr", {})
    lim = plan.limits
    if "max_voltage" in smu and lim.highest_voltage_V() > smu["max_voltage"]:
        out.append(f"limits: {lim.highest_voltage_V():g} V is beyond the SMU's "
                   f"{smu['max_voltage']:g} V")
    if "max_current" in smu and lim.max_current_A > smu["max_current"]:
        out.append(f"limits.max_current: {lim.max_current_A:g} A is beyond the SMU's "
                   f"{smu['max_current']:g} A")
    for step in plan.steps:
        if step.instrument != "lcr":
            continue
        top = max(abs(b) for b in step.biases)
        if "max_bias" in lcr and top > lcr["max_bias"]:
            out.append(f"step {step.name}: bias {top:g} V is beyond the LCR meter's "
                       f"{lcr['max_bias']:g} V")
        freqs = step.frequencies_Hz
        low, high = lcr.get("min_frequency", 0.0), lcr.get("max_frequency", float("inf"))
        if min(freqs) < low or max(freqs) > high:
            out.append(f"step {step.name}: frequencies {min(freqs):g} to {max(freqs):g} Hz "
                       f"are outside the LCR meter's {low:g} to {high:g} Hz")
        ac_low = lcr.get("min_ac_level", 0.0)
        ac_high = lcr.get("max_ac_level", float("inf"))
        if not ac_low <= step.ac_level_V <= ac_high:
            out.append(f"step {step.name}: ac_level {step.ac_level_V:g} V is outside the "
                       f"LCR meter's {ac_low:g} to {ac_high:g} V")
    return out


def check_simulated(plan: Plan, device) -> None:
    found = problems(plan, simulated_ratings(device))
    if found:
        raise PlanError(f"plan {plan.path} asks more than the simulated bench of "
                        f"{device.source} offers:\n  " + "\n  ".join(found))
