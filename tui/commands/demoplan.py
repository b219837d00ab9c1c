"""The plan `pnbench demo --simulate DEVICE` runs: the bundled plan written for that part,
or, for a device file of one's own, a plan fitted to what the file says of the part.

A fitted plan keeps inside the device and the simulated instruments: forward I-V by
forced current up to a tenth of the SMU's largest range (at most 50 mA) or the current
at which the device's series resistance drops 0.5 V, reverse I-V to 80 % of BV with a
breakdown step to 110 % of BV guarded at 10 uA (or to 30 V without a BV), C-V over the
same reverse range within the LCR meter's bias, and forward admittance at the biases
that carry 0.1 to 3 mA. It stays below the 60 V hazardous-voltage threshold, so a
rehearsal never needs the acknowledgment; a part that breaks down above it is swept to
55 V and the plan says so.
"""

from __future__ import annotations

import math

from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V

#: Reverse limit of a fitted plan: below the hazardous-voltage threshold.
REVERSE_CAP_V = HAZARDOUS_VOLTAGE_V - 5.0


def fitted_plan_text(device) -> str:
    """TOML text of a plan for a loaded SimDevice."""
    from pnbench.modeling import junction

    p, t = device.params, device.temperature_K
    part = device.part
    i_top = min(50e-3, max(device.smu["current_ranges_A"]) / 10)
    if p.RS > 0:
        i_top = min(i_top, 0.5 / p.RS)
    bv = p.BV if math.isfinite(p.BV) else math.inf
    reach = min(1.1 * bv, REVERSE_CAP_V) if math.isfinite(bv) else 30.0
    sweep = min(0.8 * bv, reach) if math.isfinite(bv) else reach
    bias_max = min(float(device.lcr["bias_max_V"]), sweep)
    biases = [float(junction.voltage(i, p, t)) for i in (1e-4, 3e-4, 1e-3, 3e-3)]
    biases = [v for v in biases if math.isfinite(v) and v < float(device.lcr["bias_max_V"])]
    v_top = float(junction.voltage(i_top, p, t)) if math.isfinite(p.IS) else 1.0
    lines = [
        "# Fitted by `pnbench demo` to the device file " + device.source,
        "[plan]", "format = 1",
        f'title = "{part}: I-V, C-V and admittance fitted to its device file"',
        "", "[device]", f'name = "{part}"', f'material = "{device.device["material"]}"',
        f'temperature = "{t:g} K"', "", "[limits]",
        f'max_voltage = "{max(2.0, math.ceil(v_top + 0.5)):g} V"',
        f'max_reverse_voltage = "{math.ceil(reach):g} V"',
        f'max_current = "{2 * i_top:.3g} A"',
        f'max_power = "{max(0.15, 1.2 * reach * 1e-5, 1.5 * v_top * i_top):.3g} W"',
        "", "[[steps]]", 'name = "forward"', 'kind = "iv_forward"', 'source = "current"',
        'start = "1 nA"', f'stop = "{i_top:.3g} A"', "points_per_decade = 8",
        f'compliance = "{max(2.0, math.ceil(v_top + 0.5)):g} V"',
        "", "[[steps]]", 'name = "reverse"', 'kind = "iv_reverse"', 'start = "0 V"',
        f'stop = "{-sweep:.4g} V"', f"points = {max(11, int(sweep) + 1)}",
        'compliance = "1 mA"', 'breakdown_guard = "10 uA"',
    ]
    if reach > sweep:
        lines += ["", "[[steps]]", 'name = "breakdown"', 'kind = "iv_reverse"',
                  f'start = "{-sweep:.4g} V"', f'stop = "{-reach:.4g} V"',
                  f"points = {max(21, int(40 * (reach - sweep)))}", 'compliance = "1 mA"',
                  'breakdown_guard = "10 uA"']
    lines += ["", "[[steps]]", 'name = "cv"', 'kind = "cv"', 'bias_start = "0 V"',
              f'bias_stop = "{-bias_max:.4g} V"', "bias_points = 31",
              'frequencies = ["100 kHz", "1 MHz"]', 'ac_level = "20 mV"']
    if len(biases) >= 2 and p.TT > 0:
        listed = ", ".join(f'"{v:.3f} V"' for v in biases)
        lines += ["", "[[steps]]", 'name = "admittance"', 'kind = "admittance"',
                  f"bias = [{listed}]", 'frequencies = ["100 kHz", "300 kHz", "1 MHz", '
                  '"2 MHz"]', 'ac_level = "5 mV"']
    return "\n".join(lines) + "\n"
