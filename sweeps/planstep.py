"""One `[[steps]]` table of a plan: read, checked against the limits, expanded to points.

Kinds: ``iv_forward`` (voltage lin/log or current-forced log decades), ``iv_reverse``
(voltage, with a breakdown guard current), ``cv`` (bias list or range x frequencies from
the LCR meter) and ``admittance`` (forward bias points x frequencies from the LCR meter).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

from pnbench.modeling.aclevel import thermal_voltage, worst_case_error
from pnbench.sweeps import points as pts
from pnbench.sweeps.limits import Limits
from pnbench.sweeps.planread import TableReader

KINDS = ("iv_forward", "iv_reverse", "cv", "admittance")
SMU_KINDS = ("iv_forward", "iv_reverse")
MAX_POINTS_PER_STEP = 100_000
_COMMON_KEYS = {"name", "kind", "settle", "average", "end_when_settled", "min_points"}
_RANGE_KEYS = {"start", "stop", "points", "points_per_decade", "spacing"}
#: The keys each kind of step accepts.
KEYS = {
    "iv_forward": _COMMON_KEYS | _RANGE_KEYS | {"source", "compliance", "nplc", "four_wire"},
    "iv_reverse": _COMMON_KEYS | _RANGE_KEYS | {"source", "compliance", "nplc", "four_wire",
                                                "breakdown_guard"},
    "cv": _COMMON_KEYS | {"bias", "bias_start", "bias_stop", "bias_points", "frequency",
                          "frequencies", "ac_level"},
}
KEYS["admittance"] = KEYS["cv"]
_NAME = re.compile(r"^[A-Za-z0-9_.-]{1,40}$")


@dataclass(frozen=True)
class Step:
    name: str
    kind: str
    points: Sequence[pts.PlannedPoint]  # lazy (`points.SmuPoints` / `points.LcrPoints`)
    source: str = "voltage"  # SMU steps: what is forced; LCR steps: "bias"
    compliance: float | None = None  # A when forcing voltage, V when forcing current
    breakdown_guard_A: float | None = None
    ac_level_V: float | None = None
    settle_s: float = 0.0
    nplc: float = 1.0
    average: int = 1
    four_wire: bool = False
    end_when_settled: float | None = None  # target relative error of the fitted values
    min_points: int = 8
    set_point_K: float | None = None  # a run over temperature: the stage set point

    @property
    def instrument(self) -> str:
        return "smu" if self.kind in SMU_KINDS else "lcr"

    @property
    def planned(self) -> int:
        return len(self.points)

    @property
    def source_unit(self) -> str:
        return "A" if self.source == "current" else "V"

    @property
    def levels(self) -> Sequence[float]:
        """The level (SMU) or bias (LCR) of each point, lazily."""
        return self.points.levels if hasattr(self.points, "levels") \
            else [p.level for p in self.points]

    @property
    def biases(self) -> Sequence[float]:
        """The levels (SMU) or the bias list (LCR) in order, lazily where planned."""
        return getattr(self.points, "biases", None) or self.levels

    @property
    def frequencies_Hz(self) -> tuple[float, ...]:
        """An LCR step's frequencies in the order measured (empty for SMU steps)."""
        return getattr(self.points, "frequencies_Hz", ())

    def to_json_dict(self) -> dict:
        return {"name": self.name, "kind": self.kind, "source": self.source,
                "planned": self.planned, "compliance": self.compliance,
                "breakdown_guard_A": self.breakdown_guard_A, "ac_level_V": self.ac_level_V,
                "settle_s": self.settle_s, "nplc": self.nplc, "average": self.average,
                "end_when_settled": self.end_when_settled}


def read_step(t: TableReader, limits: Limits | None, instruments: dict,
              warnings: list[str]) -> Step | None:
    """Read one step table; problems go to ``t.problems``; None when it cannot be built."""
    name = t.text("name", required=True)
    if name is not None and not _NAME.match(name):
        t.problem("name", f"{name!r}: a step name is 1 to 40 letters, digits, '_', '-' or "
                  "'.' (it becomes a column value in points.csv)")
        name = None
    kind = t.choice("kind", KINDS, required=True)
    common = {
        "settle_s": t.quantity("settle", "s", 0.0, nonnegative=True),
        "average": t.integer("average", 1, 1, 1000),
        "end_when_settled": t.number("end_when_settled", None, 1e-6, 0.999),
        "min_points": t.integer("min_points", 8, 2, MAX_POINTS_PER_STEP),
    }
    if kind == "iv_reverse" and common["end_when_settled"] is not None:
        warnings.append(f"step {name!r}: end_when_settled has no effect on a reverse step, "
                        "which runs to its stop or its breakdown guard (its leakage and BV "
                        "are only known at the end)")
    if common["settle_s"] is not None and common["settle_s"] > 3600:
        t.problem("settle", f"{common['settle_s']:g} s is more than an hour per point")
    step = None
    if kind in SMU_KINDS:
        step = _read_smu(t, kind, name, limits, common)
    elif kind in ("cv", "admittance"):
        step = _read_lcr(t, kind, name, limits, instruments.get("lcr"), common, warnings)
    if kind is not None:
        t.known.update(KEYS[kind])
    t.finish()
    required = (common["settle_s"], common["average"], common["min_points"])
    if step is None or not name or None in required:
        return None
    if step.planned > MAX_POINTS_PER_STEP:
        t.problem(None, f"{step.planned} points; at most {MAX_POINTS_PER_STEP} per step")
        return None
    return step


def _levels(t: TableReader, unit: str, start: float | None, stop: float | None,
            default_spacing: str) -> Sequence[float] | None:
    spacing = t.choice("spacing", ("lin", "log"), default_spacing)
    count = t.integer("points", None, 1, MAX_POINTS_PER_STEP)
    per_decade = t.integer("points_per_decade", None, 1, 1000)
    if start is None or stop is None or spacing is None:
        return None
    if count is not None and per_decade is not None:
        t.problem("points_per_decade", "give either points or points_per_decade, not both")
        return None
    if t.has("points") and count is None or t.has("points_per_decade") and per_decade is None:
        return None
    if spacing == "lin" and per_decade is not None:
        t.problem("points_per_decade", "points_per_decade needs spacing = \"log\"")
        return None
    if count is None and per_decade is None:
        t.problem(None, "missing key 'points' (how many levels; at least 1)"
                  + (" or 'points_per_decade'" if spacing == "log" else ""))
        return None
    if spacing == "log" and (start == 0 or stop == 0 or (start > 0) != (stop > 0)):
        t.problem("start", f"log spacing needs start and stop of the same sign, both "
                  f"nonzero; found {start:g} {unit} to {stop:g} {unit}")
        return None
    if count is not None and count > 1 and start == stop:
        t.problem("stop", f"start and stop are both {start:g} {unit}: a range of zero width")
        return None
    if spacing == "lin":
        return pts.LinearLevels(start, stop, count)
    if per_decade is not None:
        return pts.LogLevels(start, stop, pts.decade_count(start, stop, per_decade))
    return pts.LogLevels(start, stop, count)


def _read_smu(t: TableReader, kind: str, name, limits: Limits | None, common: dict):
    source = t.choice("source", ("voltage", "current"), "voltage")
    if kind == "iv_reverse" and source == "current":
        t.problem("source", "a reverse step forces voltage (the breakdown guard watches "
                  "the current); use source = \"voltage\"")
        return None
    unit = "A" if source == "current" else "V"
    other = "V" if source == "current" else "A"
    start = t.quantity("start", unit, None if source == "current" else 0.0,
                       required=source == "current")
    stop = t.quantity("stop", unit, required=True)
    compliance = t.quantity("compliance", other, required=True, positive=True)
    guard = t.quantity("breakdown_guard", "A", positive=True,
                       required=kind == "iv_reverse") if kind == "iv_reverse" else None
    nplc = t.number("nplc", 1.0, 0.001, 100.0)
    four_wire = t.boolean("four_wire", False)
    levels = _levels(t, unit, start, stop, "log" if source == "current" else "lin")
    if levels is None or compliance is None or nplc is None:
        return None
    assert start is not None and stop is not None
    if kind == "iv_forward" and stop <= start:
        t.problem("stop", f"a forward step goes up: stop ({stop:g} {unit}) must be above "
                  f"start ({start:g} {unit})")
        return None
    if kind == "iv_forward" and source == "current" and start <= 0:
        t.problem("start", f"a forced forward current must be positive, found {start:g} A")
        return None
    if kind == "iv_reverse":
        if start > 0:
            t.problem("start", f"reverse levels are at or below 0 V, found {start:g} V")
            return None
        if stop >= start:
            t.problem("stop", f"a reverse step goes down: stop ({stop:g} V) must be below "
                      f"start ({start:g} V), e.g. start = 0, stop = \"-20 V\"")
            return None
        if guard is None:
            return None
        if guard > compliance:
            t.problem("breakdown_guard", f"{guard:g} A is above the compliance "
                      f"{compliance:g} A: the guard could never fire")
            return None
    if limits is not None and not _within_limits(t, source, levels, compliance, limits):
        return None
    return Step(name=name or "", kind=kind, points=pts.smu_points(levels),
                source=source, compliance=compliance, breakdown_guard_A=guard, nplc=nplc,
                four_wire=four_wire, **common)


def _within_limits(t: TableReader, source: str, levels: Sequence[float], compliance: float,
                   limits: Limits) -> bool:
    ok = True
    if source == "voltage":
        for key, value in (("start", levels[0]), ("stop", levels[-1])):
            if not limits.voltage_allowed(value):
                t.problem(key, f"{value:g} V is outside the limits (-"
                          f"{limits.max_reverse_voltage_V:g} V to {limits.max_voltage_V:g} V "
                          "from [limits] max_reverse_voltage and max_voltage)")
                ok = False
        if compliance > limits.max_current_A:
            t.problem("compliance", f"{compliance:g} A is above max_current "
                      f"{limits.max_current_A:g} A")
            ok = False
        first_power = abs(levels[0]) * compliance
        if ok and first_power > limits.max_power_W:
            t.problem("start", f"at the first level {levels[0]:g} V a short would take "
                      f"{first_power:.3g} W (start x compliance), above max_power "
                      f"{limits.max_power_W:g} W; start lower")
            ok = False
    else:
        top = max(abs(levels[0]), abs(levels[-1]))  # a range: its ends are its extremes
        if top > limits.max_current_A:
            t.problem("stop", f"{top:g} A is above max_current {limits.max_current_A:g} A")
            ok = False
        if compliance > limits.max_voltage_V:
            t.problem("compliance", f"{compliance:g} V is above max_voltage "
                      f"{limits.max_voltage_V:g} V")
            ok = False
    return ok


def _read_lcr(t: TableReader, kind: str, name, limits: Limits | None, lcr, common: dict,
              warnings: list[str]):
    biases = None
    if t.has("bias"):
        biases = t.quantity_list("bias", "V")
        for key in ("bias_start", "bias_stop", "bias_points"):
            if t.has(key):
                t.problem(key, "give either a bias list or bias_start/bias_stop/bias_points")
                return None
        if biases is not None and not biases:
            t.problem("bias", "the bias list is empty: zero points")
            return None
    else:
        b0 = t.quantity("bias_start", "V", 0.0)
        b1 = t.quantity("bias_stop", "V", required=True)
        n = t.integer("bias_points", None, 1, MAX_POINTS_PER_STEP, required=True)
        if b0 is not None and b1 is not None and n is not None:
            if n > 1 and b0 == b1:
                t.problem("bias_stop", f"bias_start and bias_stop are both {b0:g} V: a "
                          "range of zero width")
                return None
            biases = pts.LinearLevels(b0, b1, n)
    if t.has("frequency") and t.has("frequencies"):
        t.problem("frequency", "give either frequency or frequencies, not both")
        return None
    key = "frequency" if t.has("frequency") else "frequencies"
    freqs = t.quantity_list(key, "Hz", required=True, positive=True)
    ac = t.quantity("ac_level", "V", 0.005 if kind == "admittance" else 0.02, positive=True)
    if biases is None or freqs is None or ac is None:
        return None
    if not freqs:
        t.problem(key, "the frequency list is empty: zero points")
        return None
    if not _lcr_within(t, biases, freqs, ac, limits, lcr):
        return None
    vt = thermal_voltage()
    error, distortion = worst_case_error(ac, vt)
    if any(b > 0.2 for b in biases) and error > 0.01:
        warnings.append(f"step {name!r}: ac_level {ac * 1e3:g} mV rms at forward bias is not "
                        f"small against N*Vt ({vt * 1e3:.1f} mV for N = 1): the conductance "
                        f"and diffusion capacitance readings may be off by up to "
                        f"{error:.1%} (second-order distortion {distortion:.0%}); "
                        f"{0.2 * vt * 1e3:.2g} mV rms (x = 0.28, x**2/8 = 1 %) keeps it "
                        f"under 1 %")
    return Step(name=name or "", kind=kind, points=pts.lcr_points(biases, freqs),
                source="bias", ac_level_V=ac, nplc=1.0, **common)


def _lcr_within(t: TableReader, biases, freqs, ac, limits: Limits | None, lcr) -> bool:
    ratings = lcr.ratings if lcr is not None else {}
    ok = True
    key = "bias" if "bias" in t.table else "bias_stop"
    for b in biases:
        if limits is not None and not limits.voltage_allowed(b):
            t.problem(key, f"bias {b:g} V is outside the limits (-"
                      f"{limits.max_reverse_voltage_V:g} V to {limits.max_voltage_V:g} V)")
            return False
        if "max_bias" in ratings and abs(b) > ratings["max_bias"]:
            t.problem(key, f"bias {b:g} V is beyond the LCR meter's rating of "
                      f"{ratings['max_bias']:g} V")
            return False
    fkey = "frequency" if "frequency" in t.table else "frequencies"
    low, high = ratings.get("min_frequency", 0.0), ratings.get("max_frequency", float("inf"))
    for f in freqs:
        if not low <= f <= high:
            t.problem(fkey, f"{f:g} Hz is outside the LCR meter's range {low:g} Hz to "
                      f"{high:g} Hz")
            ok = False
            break
    if "max_ac_level" in ratings and ac > ratings["max_ac_level"]:
        t.problem("ac_level", f"{ac:g} V is beyond the LCR meter's rating of "
                  f"{ratings['max_ac_level']:g} V")
        ok = False
    return ok
