"""`pnbench check PLAN`: validate a plan and say what it will do, without any instrument."""

from __future__ import annotations

import argparse
import json

from pnbench.tui.commands.options import add_visa_library

HELP = "validate a plan: steps, points, estimated duration and worst-case power"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("plan", help="plan file (TOML)")
    add_visa_library(parser)
    parser.add_argument("--json", action="store_true",
                        help="print the summary as one JSON object")
    parser.add_argument("--simulate", metavar="DUT.toml",
                        help="also check the plan against the simulated bench with this "
                        "device file (or bundled name): its SMU and LCR ranges")


def _range(step) -> str:
    from pnbench.sweeps.quantities import format_quantity as q

    if step.instrument == "smu":
        unit = step.source_unit
        other = "A" if unit == "V" else "V"
        text = (f"{q(step.levels[0], unit, 3)} to {q(step.levels[-1], unit, 3)}, "
                f"compliance {q(step.compliance, other, 3)}")
        if step.breakdown_guard_A:
            text += f", guard {q(step.breakdown_guard_A, 'A', 3)}"
        return text
    biases = list(dict.fromkeys(step.biases))
    freqs = sorted(set(step.frequencies_Hz))
    return (f"bias {q(biases[0], 'V', 3)} to {q(biases[-1], 'V', 3)} ({len(biases)}), "
            f"{len(freqs)} frequencies {q(freqs[0], 'Hz', 3)} to {q(freqs[-1], 'Hz', 3)}, "
            f"AC {q(step.ac_level_V, 'V', 3)}")


def summary(plan) -> dict:
    from pnbench.sweeps.check import estimate
    from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V

    est = estimate(plan)
    return {
        "plan": plan.path, "title": plan.title, "device": plan.device.to_json_dict(),
        "limits": plan.limits.to_json_dict(),
        "hazardous_voltage": plan.limits.highest_voltage_V() > HAZARDOUS_VOLTAGE_V,
        "instruments": {r: i.to_json_dict() for r, i in plan.instruments.items()},
        "steps": [{**s.to_json_dict(), "range": _range(s), "estimate_s": t,
                   "worst_case_power_W": p}
                  for s, t, p in zip(plan.steps, est.step_s, est.step_power_W, strict=True)],
        "total_points": plan.total_points, "estimate": est.to_json_dict(),
        "warnings": list(plan.warnings),
        "temperature": plan.temperature.to_json_dict() if plan.temperature else None,
        "lcr_correction": plan.correction.to_json_dict() if plan.correction else None,
        "lcr_correction_on_resume": resume_note(plan),
    }


def resume_note(plan) -> str | None:
    """What a resumed run will do about the correction when the meter cannot say whether
    it still applies it (sweeps.correction.resume_note)."""
    from pnbench.sweeps.correction import resume_note as note

    return note(plan)


def correction_text(correction) -> str:
    """One line on the LCR meter's fixture correction a plan asks for."""
    which = " then ".join(correction.which)
    when = ("before the first LCR step at each stage set point"
            if correction.every_set_point else "before the first LCR step")
    how = ("; pnbench reads the open and the short itself and compensates in software "
           "(points.csv keeps the raw readings)"
           if correction.apply == "software" else "")
    if correction.confirmed:
        return (f"LCR correction: {which}, {when}, unattended "
                f"(confirmed = true: the fixture states must be prepared in advance){how}")
    return (f"LCR correction: {which}, {when}; the operator is asked "
            f"to set and confirm each fixture state{how}")


def noise_lines(plan) -> list[str]:
    """What the run's fits will be judged against, per instrument (the dialects are
    read here, so a bad noise table stops `check` as it would stop the run)."""
    from pnbench.sweeps.quantities import format_quantity as q
    from pnbench.sweeps.statednoise import run_noise

    if plan.simulated is not None:
        return ["stated noise: the simulated bench's own (from its device file)"]
    out = []
    for fit, doc in run_noise(plan).items():
        unit = "A" if fit == "iv" else "F"
        text = f"{doc['relative'] * 100:.3g} % + {q(doc['floor'], unit, 3)}"
        if doc.get("floor_by_range"):
            text += ", floor per range: " + ", ".join(
                f"{q(f, unit, 3)} up to {q(r, unit, 3)}" for r, f in doc["floor_by_range"])
        volt = doc.get("voltage")
        if volt:
            text += f", voltage {volt['relative'] * 100:.3g} % + {q(volt['floor'], 'V', 3)}"
        out.append(f"stated noise of the {'SMU' if fit == 'iv' else 'LCR meter'}: {text} "
                   f"(1 sigma at 1 NPLC; from the {doc['source']})")
    return out or ["stated noise: none (the fits estimate it from their residuals)"]


def run(args) -> int:
    from pnbench.drivers.backends import describe
    from pnbench.sweeps.check import estimate
    from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V
    from pnbench.sweeps.plan import load_plan
    from pnbench.sweeps.quantities import format_duration
    from pnbench.sweeps.quantities import format_quantity as q

    plan = load_plan(args.plan)
    if args.simulate is not None:
        from pnbench.drivers.sim.device import resolve_device
        from pnbench.sweeps.ratings import check_simulated

        check_simulated(plan, resolve_device(args.simulate))  # PlanError names the limit
    if args.json:
        print(json.dumps(summary(plan), indent=2))
        return 0
    est = estimate(plan)
    lim, d = plan.limits, plan.device
    print(f"plan {plan.path}: valid" + (f" - {plan.title}" if plan.title else "")
          + (f"; fits the simulated bench with {args.simulate}" if args.simulate else ""))
    print(f"device {d.name}" + (f", {d.material}" if d.material else "")
          + (f", area {d.area_m2:.4g} m^2" if d.area_m2 else "")
          + (f", {d.temperature_K:.2f} K" if plan.temperature is None else ""))
    if plan.temperature is not None:
        from pnbench.sweeps.thermalplan import describe as describe_temperature

        print(describe_temperature(plan.temperature))
    print(f"limits: {q(lim.max_voltage_V, 'V', 3)} forward, "
          f"{q(lim.max_reverse_voltage_V, 'V', 3)} reverse, {q(lim.max_current_A, 'A', 3)}, "
          f"{q(lim.max_power_W, 'W', 3)}")
    if lim.highest_voltage_V() > HAZARDOUS_VOLTAGE_V:
        print(f"HAZARDOUS VOLTAGE: up to {lim.highest_voltage_V():g} V (acknowledged up to "
              f"{lim.hazardous_ack_V:g} V); enclose and interlock the fixture")
    if plan.instruments:
        for role, inst in sorted(plan.instruments.items()):
            print(f"{role}: connects to {inst.resource} through {inst.backend} "
                  f"({describe(inst.backend)}), dialect {inst.dialect or 'default'}")
        for line in noise_lines(plan):
            print(line)
    else:
        print("instruments: none in the plan (run it with --simulate DEVICE)")
    if plan.correction is not None:
        print(correction_text(plan.correction))
        note = resume_note(plan)
        if note:
            print(note)
    width = max(len(s.name) for s in plan.steps)
    print(f"\n{'#':>2} {'step':<{width}} {'kind':<11} {'points':>6} {'time':>8} "
          f"{'worst P':>9}  range")
    for n, (s, t, p) in enumerate(zip(plan.steps, est.step_s, est.step_power_W,
                                      strict=True), start=1):
        power = q(p, "W", 3) if p is not None else "-"
        print(f"{n:>2} {s.name:<{width}} {s.kind:<11} {s.planned:>6} {format_duration(t):>8} "
              f"{power:>9}  {_range(s)}")
    print(f"\n{plan.total_points} points, estimated {format_duration(est.total_s)} "
          "(points x (settle + integration + overhead)"
          + (f"; the stage's ramps, stability and soaks {format_duration(est.thermal_s)}"
             if est.thermal_s else "")
          + (f"; the fixture's open and short readings {format_duration(est.correction_s)}"
             if est.correction_s else "") + ")")
    print(f"worst-case power without the power guard: {q(est.worst_power_W, 'W', 3)}"
          + (f"; above max_power in {', '.join(est.guarded_steps)}: the runner predicts "
             "each level's power and ends the step before it" if est.guarded_steps else ""))
    for w in plan.warnings:
        print(f"warning: {w}")
    return 0
