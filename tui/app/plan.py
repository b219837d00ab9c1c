"""Plan text for the plan screen: a summary of a checked plan and the bundled examples."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from pnbench.sweeps.quantities import format_quantity
from pnbench.tui.app.state import format_duration


def example_plan_path(simulate: str | None = None) -> Path | None:
    """The bundled plan to start from: the one written for the simulated device in use
    (the plan `pnbench demo` runs for it), else the first of sim_configs/plans."""
    try:
        from pnbench.tui.commands.demo import demo_plan

        return Path(demo_plan(simulate or ""))
    except (ImportError, KeyError, FileNotFoundError, AttributeError):
        pass
    try:
        folder = resources.files("pnbench.sim_configs") / "plans"
        names = sorted(p.name for p in folder.iterdir() if p.name.endswith(".toml"))
    except (FileNotFoundError, ModuleNotFoundError, NotADirectoryError):
        return None
    preferred = [n for n in names if n.startswith("example")] or names
    return Path(str(folder / preferred[0])) if preferred else None


def plan_summary(plan) -> str:
    """What a checked plan will do, for the plan screen's report pane: the device, the
    limits, the instruments, each step with its points and the engine's estimate of
    its duration and worst-case power."""
    from pnbench.sweeps.check import estimate

    lines = [plan.title] if plan.title else []
    d = plan.device
    area = f", area {d.area_m2:.3g} m^2" if d.area_m2 else ""
    material = f", {d.material}" if d.material else ""
    lines.append(f"device {d.name}{material}{area}, {d.temperature_K:.2f} K")
    lim = plan.limits
    lines.append(
        f"limits: {format_quantity(lim.max_voltage_V, 'V', 3)} forward, "
        f"{format_quantity(lim.max_reverse_voltage_V, 'V', 3)} reverse, "
        f"{format_quantity(lim.max_current_A, 'A', 3)}, "
        f"{format_quantity(lim.max_power_W, 'W', 3)}")
    for role, inst in sorted(plan.instruments.items()):
        dialect = Path(inst.dialect).name if inst.dialect else "default"
        lines.append(f"{role}: {inst.resource} ({inst.backend}, dialect {dialect})")
    cost = estimate(plan)
    lines.append("")
    lines.append(f"{len(plan.steps)} steps, {plan.total_points} points, estimated "
                 f"{format_duration(cost.total_s)} on real instruments")
    for n, step in enumerate(plan.steps):
        power = cost.step_power_W[n]
        worst = f", worst {format_quantity(power, 'W', 3)}" if power else ""
        guard = " (the power guard ends it first)" if step.name in cost.guarded_steps else ""
        lines.append(f"  {n + 1}. {step.name} ({step.kind}): {step.planned} points, "
                     f"~{format_duration(cost.step_s[n])}{worst}{guard}")
    if plan.warnings:
        lines.append("")
        lines.append("warnings:")
        lines.extend(f"  {w}" for w in plan.warnings)
    return "\n".join(lines)
