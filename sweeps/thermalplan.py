"""A plan's ``[temperature]`` table: the stage temperatures a run steps through.

    [temperature]
    set_points = ["-25 degC", "25 degC", 348.15, "125 degC"]  # the outer loop, in order
    ramp_rate = "10 K/min"        # the stage ramps no faster (default: the stage's own)
    soak = "120 s"                # held at the set point after it is stable
    stable_within = "0.1 K"       # stable: every reading within this of the set point ...
    stable_for = "60 s"           # ... for this long
    timeout = "1800 s"            # reach and hold within this, else the run stops (exit 3)
    poll = "1 s"                  # how often the stage is read while waiting
    standby = "25 degC"           # where the stage goes on every way out (default 25 degC)
    lowest = "-40 degC"           # the plan's own limits for every stage temperature
    highest = "150 degC"
    device_rated_min = "-55 degC" # the device's rated range (optional)
    device_rated_max = "150 degC"
    [temperature.only]            # steps that run at some set points only (default: all)
    cv_1MHz = ["25 degC"]

Temperatures are kelvin (a number or "300 K") or "25 degC". Every set point and the
standby must lie within [lowest, highest], within the stage's ratings
(``[instruments.stage]`` min_temperature, max_temperature, max_ramp_rate) and within the
device's rated range when one is given; set points below STANDBY_DEW_WARNING_K get a
warning about condensation. Every problem is recorded with its key and line, like the
rest of the plan (`planread.TableReader`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from pnbench.errors import BadInput
from pnbench.sweeps.planread import TableReader
from pnbench.sweeps.quantities import parse_quantity

ZERO_C_K = 273.15
DEFAULT_STANDBY_K = 298.15
#: Below this a set point gets the condensation warning (10 °C: common lab air).
STANDBY_DEW_WARNING_K = 283.15
#: Ratings an [instruments.stage] table may carry.
STAGE_RATINGS = {"min_temperature": "K", "max_temperature": "K", "max_ramp_rate": "K/min"}


@dataclass(frozen=True)
class TemperaturePlan:
    """The outer loop of a run over temperature (kelvin, seconds, K/min)."""

    set_points_K: tuple[float, ...]
    ramp_K_per_min: float | None = None
    soak_s: float = 60.0
    stable_within_K: float = 0.1
    stable_for_s: float = 60.0
    timeout_s: float = 1800.0
    poll_s: float = 1.0
    standby_K: float = DEFAULT_STANDBY_K
    lowest_K: float = 3.0
    highest_K: float = 1000.0
    device_rated_K: tuple[float, float] | None = None
    only: dict[str, tuple[float, ...]] = field(default_factory=dict)

    def runs_at(self, step: str, set_point_K: float) -> bool:
        """Whether the step of that name runs at this set point."""
        chosen = self.only.get(step)
        return chosen is None or any(abs(set_point_K - t) < 1e-6 for t in chosen)

    def to_json_dict(self) -> dict:
        return {"set_points_K": list(self.set_points_K),
                "ramp_K_per_min": self.ramp_K_per_min, "soak_s": self.soak_s,
                "stable_within_K": self.stable_within_K, "stable_for_s": self.stable_for_s,
                "timeout_s": self.timeout_s, "poll_s": self.poll_s,
                "standby_K": self.standby_K, "lowest_K": self.lowest_K,
                "highest_K": self.highest_K,
                "device_rated_K": list(self.device_rated_K) if self.device_rated_K else None,
                "only": {k: list(v) for k, v in self.only.items()}}


def kelvin(value: object) -> float:
    """Kelvin from a number, "300 K" or "25 degC" ("°C" too); BadInput otherwise."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise BadInput(f"expected a temperature such as 300, \"300 K\" or \"25 degC\", "
                       f"found {value!r}")
    if isinstance(value, str) and value.strip().endswith(("degC", "°C")):
        body = value.strip().removesuffix("degC").removesuffix("°C")
        k = parse_quantity(body, "", what="value") + ZERO_C_K
    else:
        k = parse_quantity(value, "K", what="value")
    if not 1.0 <= k <= 1000.0:
        raise BadInput(f"{value!r} is not a bench temperature; accepted: 1 K to 1000 K "
                       "(or \"25 degC\")")
    return k


def ramp_rate(value: object) -> float:
    """K/min from a number or "10 K/min" ("degC/min" too); BadInput otherwise."""
    text = value.strip() if isinstance(value, str) else value
    if isinstance(text, str):
        for suffix in ("K/min", "degC/min", "°C/min"):
            if text.endswith(suffix):
                text = text.removesuffix(suffix)
                break
    rate = parse_quantity(text, "", what="value") if not isinstance(text, bool) else -1.0
    if not (math.isfinite(rate) and rate > 0):
        raise BadInput(f"expected a ramp rate above 0 such as \"10 K/min\", found {value!r}")
    return rate


def _one(t: TableReader, key: str, convert, default):
    value = t.raw(key)
    if value is None:
        return default
    try:
        return convert(value)
    except BadInput as exc:
        t.problem(key, str(exc))
        return default


def read_stage_ratings(t: TableReader) -> dict:
    """The rating keys of an [instruments.stage] table (kelvin and K/min)."""
    ratings = {}
    for key in ("min_temperature", "max_temperature"):
        value = _one(t, key, kelvin, None)
        if value is not None:
            ratings[key] = value
    rate = _one(t, "max_ramp_rate", ramp_rate, None)
    if rate is not None:
        ratings["max_ramp_rate"] = rate
    return ratings


def read_temperature(t: TableReader, step_names: set[str], stage_ratings: dict | None,
                     warnings: list[str]) -> TemperaturePlan | None:
    """The [temperature] table, checked; None (with problems recorded) when unusable."""
    raw = t.raw("set_points", True, "a list of stage temperatures")
    points: list[float] = []
    if raw is not None:
        items = raw if isinstance(raw, list) else [raw]
        if not items:
            t.problem("set_points", "the list is empty; give at least one temperature")
        for k, item in enumerate(items):
            try:
                points.append(kelvin(item))
            except BadInput as exc:
                t.problem("set_points", f"item {k + 1}: {exc}")
    ramp = _one(t, "ramp_rate", ramp_rate, None)
    soak = t.quantity("soak", "s", 60.0, nonnegative=True)
    within = t.quantity("stable_within", "K", 0.1, positive=True)
    stable_for = t.quantity("stable_for", "s", 60.0, nonnegative=True)
    timeout = t.quantity("timeout", "s", 1800.0, positive=True)
    poll = t.quantity("poll", "s", 1.0, positive=True)
    standby = _one(t, "standby", kelvin, DEFAULT_STANDBY_K)
    lowest = _one(t, "lowest", kelvin, None)
    highest = _one(t, "highest", kelvin, None)
    rated_min = _one(t, "device_rated_min", kelvin, None)
    rated_max = _one(t, "device_rated_max", kelvin, None)
    only = _read_only(t, step_names, points)
    t.finish()
    ratings = stage_ratings or {}
    for key, name in (("lowest", lowest), ("highest", highest)):
        if name is None:
            t.problem(None, f"missing key {key!r}: a run over temperature states the "
                      "lowest and highest stage temperature it may set")
    if None in (lowest, highest) or not points:
        return None
    if lowest >= highest:
        t.problem("lowest", f"{lowest:g} K is not below highest {highest:g} K")
        return None
    low, high = ratings.get("min_temperature"), ratings.get("max_temperature")
    if low is not None and lowest < low:
        t.problem("lowest", f"{lowest:g} K is below the stage's rating of {low:g} K "
                  "(instruments.stage min_temperature)")
    if high is not None and highest > high:
        t.problem("highest", f"{highest:g} K is above the stage's rating of {high:g} K "
                  "(instruments.stage max_temperature)")
    fastest = ratings.get("max_ramp_rate")
    if ramp is not None and fastest is not None and ramp > fastest:
        t.problem("ramp_rate", f"{ramp:g} K/min is above the stage's rating of "
                  f"{fastest:g} K/min (instruments.stage max_ramp_rate)")
    rated = None
    if (rated_min is None) != (rated_max is None):
        t.problem("device_rated_min" if rated_min is None else "device_rated_max",
                  "give both ends of the device's rated range, or neither")
    elif rated_min is not None:
        rated = (rated_min, rated_max)
        if rated_min >= rated_max:
            t.problem("device_rated_min", f"{rated_min:g} K is not below "
                      f"device_rated_max {rated_max:g} K")
    for k, point in enumerate(points):
        _within(t, "set_points", f"item {k + 1}: ", point, lowest, highest, rated)
    _within(t, "standby", "", standby, lowest, highest, rated)
    if stable_for is not None and poll is not None and stable_for < poll:
        t.problem("stable_for", f"{stable_for:g} s is shorter than one poll ({poll:g} s)")
    cold = [p for p in points if p < STANDBY_DEW_WARNING_K]
    if cold:
        warnings.append(f"[temperature] set points down to {min(cold) - ZERO_C_K:.4g} degC: "
                        "below the dew point of room air water condenses and frost forms on "
                        "the device and probes; purge with dry gas before cooling")
    return TemperaturePlan(
        set_points_K=tuple(points), ramp_K_per_min=ramp, soak_s=soak or 0.0,
        stable_within_K=within or 0.1, stable_for_s=stable_for or 0.0,
        timeout_s=timeout or 1800.0, poll_s=poll or 1.0, standby_K=standby,
        lowest_K=lowest, highest_K=highest, device_rated_K=rated, only=only)


def _within(t: TableReader, key: str, where: str, value: float, lowest: float,
            highest: float, rated: tuple[float, float] | None) -> None:
    if not lowest <= value <= highest:
        t.problem(key, f"{where}{value:g} K is outside lowest {lowest:g} K .. highest "
                  f"{highest:g} K")
    elif rated is not None and not rated[0] <= value <= rated[1]:
        t.problem(key, f"{where}{value:g} K is outside the device's rated range "
                  f"{rated[0]:g} K .. {rated[1]:g} K")


def _read_only(t: TableReader, step_names: set[str], points: list[float]) -> dict:
    raw = t.raw("only")
    if raw is None:
        return {}
    if not isinstance(raw, dict):
        t.problem("only", "expected a table [temperature.only] of step name = list of "
                  "set points")
        return {}
    out: dict[str, tuple[float, ...]] = {}
    for name, value in raw.items():
        if name not in step_names:
            t.problem("only", f"{name!r} is not the name of a step")
            continue
        chosen = []
        for item in value if isinstance(value, list) else [value]:
            try:
                k = kelvin(item)
            except BadInput as exc:
                t.problem("only", f"{name}: {exc}")
                continue
            if not any(abs(k - p) < 1e-6 for p in points):
                t.problem("only", f"{name}: {item!r} is not one of the set points")
                continue
            chosen.append(k)
        out[name] = tuple(chosen)
    return out


def step_label(set_point_K: float) -> str:
    """How a set point shows in a step's name: "iv@298.15K"."""
    return f"{set_point_K:.6g}K"


def expand_steps(steps: tuple, plan: TemperaturePlan) -> tuple:
    """The steps of a run over temperature, in run order: for each set point, each step
    that runs there, renamed ``NAME@<T>K`` and carrying its ``set_point_K``."""
    from dataclasses import replace

    return tuple(replace(step, name=f"{step.name}@{step_label(t)}", set_point_K=t)
                 for t in plan.set_points_K for step in steps if plan.runs_at(step.name, t))


def thermal_seconds(plan: TemperaturePlan, start_K: float = DEFAULT_STANDBY_K) -> float:
    """The time the stage needs over the run: each ramp at the plan's rate (none counted
    without one), the stability window and the soak at each set point, and the ramp back
    to standby. The stage's own lag is not known here and comes on top."""
    rate = plan.ramp_K_per_min
    path = [start_K, *plan.set_points_K, plan.standby_K]
    ramps = sum(abs(b - a) for a, b in zip(path, path[1:], strict=False))
    ramp_s = 60.0 * ramps / rate if rate else 0.0
    return ramp_s + len(plan.set_points_K) * (plan.stable_for_s + plan.soak_s)


def describe(plan: TemperaturePlan) -> str:
    """One line for `pnbench check`."""
    c = [f"{t - ZERO_C_K:.4g}" for t in plan.set_points_K]
    ramp = f"ramp {plan.ramp_K_per_min:g} K/min" if plan.ramp_K_per_min else \
        "ramp as fast as the stage goes"
    rated = (f", device rated {plan.device_rated_K[0] - ZERO_C_K:.4g} to "
             f"{plan.device_rated_K[1] - ZERO_C_K:.4g} degC" if plan.device_rated_K else "")
    return (f"temperature: {len(c)} set points {', '.join(c)} degC; {ramp}; stable within "
            f"+-{plan.stable_within_K:g} K for {plan.stable_for_s:g} s, soak "
            f"{plan.soak_s:g} s, at most {plan.timeout_s:g} s each; standby "
            f"{plan.standby_K - ZERO_C_K:.4g} degC; stage limits "
            f"{plan.lowest_K - ZERO_C_K:.4g} to {plan.highest_K - ZERO_C_K:.4g} degC{rated}")
