"""The instruments' stated noise of a run: read from a plan, a dialect or the simulated
bench, and handed to the run's fits in their form (`fitnoise.StatedNoise`).

A plan's `[instruments.ROLE]` table may state the instrument's 1-sigma noise of one
reading at 1 NPLC (PLAN_KEYS, docs/plan-format.md); a dialect file may state it in its
`[smu_noise]` / `[lcr_noise]` tables (docs/dialects.md). The plan wins over the
dialect. A run on the simulated bench takes the device file's own figures (the bench
knows its noise; `drivers.sim.statednoise`). The result goes into run.json as
``stated_noise`` ({"iv": ..., "cv": ...}, each with its ``source``) and from there to the
run's final fit, `pnbench fit RUN_DIR` and the app's review refit.
"""

from __future__ import annotations

from pnbench.errors import BadInput
from pnbench.modeling.stated import StatedNoise, floor_table
from pnbench.sweeps.planread import TableReader
from pnbench.sweeps.quantities import parse_quantity

#: The unit word of a table of floors per range (`read_floor_table`).
RANGE_TABLE = "A per range"
#: Keys an instrument table may carry about its noise, per role: key -> (unit, meaning).
PLAN_KEYS = {
    "smu": {"current_noise_percent": ("%", "current noise, percent of the reading"),
            "current_noise_floor": ("A", "current noise floor"),
            "current_noise_floor_per_range": (RANGE_TABLE, "current noise floor of each "
                                              "current range: { range = floor }"),
            "voltage_noise_percent": ("%", "voltage noise, percent of the reading"),
            "voltage_noise_floor": ("V", "voltage noise floor")},
    "lcr": {"noise_percent": ("%", "noise of G and of B, percent of |Y|"),
            "noise_floor": ("F", "noise floor as a capacitance (2 pi f C siemens)")},
}
#: Which fits each role's noise reaches.
FIT_OF_ROLE = {"smu": "iv", "lcr": "cv"}
#: The largest percent a stated noise may be (beyond it the figure is a typo).
MAX_PERCENT = 50.0


def read_plan_noise(t: TableReader, role: str | None) -> StatedNoise | None:
    """The noise an instrument table states (None when it states none); problems are
    reported on ``t`` with the key named."""
    keys = PLAN_KEYS.get(role or "", {})
    other = [k for r, table in PLAN_KEYS.items() if r != role for k in table
             if t.has(k) and k not in keys]
    for key in other:
        t.problem(key, f"is a noise figure of another role; a {role} states "
                  f"{', '.join(keys) or 'none'}")
    if not any(t.has(k) for k in keys):
        return None
    got: dict[str, float | None] = {}
    before = len(t.problems.items)
    table: tuple = ()
    for key, (unit, _meaning) in keys.items():
        if unit == "%":
            got[key] = t.number(key, 0.0, 0.0, MAX_PERCENT)
        elif unit == RANGE_TABLE:
            table = read_floor_table(t, key)
        else:
            got[key] = t.quantity(key, unit, 0.0, nonnegative=True)
    if any(v is None for v in got.values()) or len(t.problems.items) > before:
        return None  # a figure was refused: said once, with its key
    if role == "smu":
        if not got["current_noise_percent"] and not got["current_noise_floor"] \
                and not any(f for _, f in table):
            t.problem("current_noise_percent", "a stated SMU noise needs the current's: "
                      "give current_noise_percent, current_noise_floor and/or "
                      "current_noise_floor_per_range above zero")
            return None
        volt = None
        if got["voltage_noise_percent"] or got["voltage_noise_floor"]:
            volt = StatedNoise(got["voltage_noise_percent"] / 100.0,
                               got["voltage_noise_floor"])
        return StatedNoise(got["current_noise_percent"] / 100.0,
                           got["current_noise_floor"], voltage=volt, floor_by_range=table)
    if not got["noise_percent"] and not got["noise_floor"]:
        t.problem("noise_percent", "a stated LCR noise needs noise_percent and/or "
                  "noise_floor above zero")
        return None
    return StatedNoise(got["noise_percent"] / 100.0, got["noise_floor"])


def read_floor_table(t: TableReader, key: str) -> tuple[tuple[float, float], ...]:
    """A table of current floors per range, ``{ "1 uA" = "2 pA", "1e-3" = 5e-9 }``: each
    key a current range (a quantity in A, quoted as TOML keys are), each value its floor
    (a number in A or a quantity); () when absent or refused (the problem named on
    ``t``)."""
    raw = t.raw(key)
    if raw is None:
        return ()
    if not isinstance(raw, dict) or not raw:
        t.problem(key, "expected a table of current range = noise floor, such as "
                  '{ "1 uA" = "2 pA", "1 mA" = "5 nA" }, found ' + repr(raw))
        return ()
    pairs = []
    for name, value in raw.items():
        try:
            rng = parse_quantity(name, "A", what=f"range {name!r}", low=0.0)
        except BadInput as exc:
            t.problem(key, str(exc))
            return ()
        if not rng > 0:
            t.problem(key, f"range {name!r} must be above zero")
            return ()
        if isinstance(value, bool) or not isinstance(value, (int, float, str)):
            t.problem(key, f"range {name!r}: expected a floor in A such as 2e-12 or "
                      f'"2 pA", found {value!r}')
            return ()
        try:
            floor = parse_quantity(value, "A", what=f"the floor of range {name!r}", low=0.0)
        except BadInput as exc:
            t.problem(key, str(exc))
            return ()
        pairs.append((rng, floor))
    try:
        return floor_table(pairs)
    except ValueError as exc:
        t.problem(key, str(exc))
        return ()


def run_noise(plan) -> dict:
    """run.json's ``stated_noise`` of a plan: {"iv"|"cv": StatedNoise JSON + "source"}.
    The simulated bench states its own; else the plan's instrument table, else its
    dialect; a role that states none is left out (its fits estimate the noise)."""
    out: dict = {}
    sim = plan.simulated
    if sim is not None:
        from pnbench.drivers.sim.device import resolve_device
        from pnbench.drivers.sim.statednoise import device_noise

        for fit, noise in device_noise(resolve_device(sim.device)).items():
            out[fit] = {**noise.to_json_dict(),
                        "source": f"the simulated bench's device file ({sim.device})"}
        return out
    for role, fit in FIT_OF_ROLE.items():
        inst = plan.instruments.get(role)
        if inst is None:
            continue
        if inst.noise is not None:
            out[fit] = {**inst.noise.to_json_dict(), "source": f"plan [instruments.{role}]"}
            continue
        noise = dialect_noise(inst.dialect, role)
        if noise is not None:
            out[fit] = {**noise.to_json_dict(),
                        "source": f"dialect {inst.dialect} [{role}_noise]"}
    return out


def dialect_noise(path: str | None, role: str) -> StatedNoise | None:
    """A dialect file's stated noise for a role (the built-in default states none)."""
    if path is None:
        return None
    from pnbench.drivers.dialect import load_dialect

    return load_dialect(path).noise.get(role)


def fit_noise(stated: object) -> dict[str, StatedNoise] | None:
    """The fits' ``noise`` argument from run.json's ``stated_noise`` (None when absent
    or unreadable: the fits then estimate it)."""
    if not isinstance(stated, dict):
        return None
    out = {}
    for fit in ("iv", "cv"):
        try:
            if stated.get(fit) is not None:
                out[fit] = StatedNoise.from_json_dict(stated[fit])
        except ValueError:
            continue
    return out or None
