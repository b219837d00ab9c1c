"""A plan's ``[lcr_correction]`` table: the LCR meter's open/short fixture correction.

    [lcr_correction]
    corrections = ["open", "short"]   # one or both; open runs first
    confirmed = false                 # true: unattended, the fixture states prepared
    apply = "meter"                   # or "software": pnbench compensates at fit time
    every_set_point = false           # a run over temperature: again at each set point
    on_resume = "reuse"               # or "repeat": run it again on every resume

Read like the rest of the plan (`planread.TableReader`), every problem with its key and
line; docs/plan-format.md explains each key.
"""

from __future__ import annotations

from dataclasses import dataclass

from pnbench.sweeps.planread import Problems, TableReader

#: The LCR meter's fixture corrections a plan may ask for, in the order they run.
CORRECTIONS = ("open", "short")


#: Who applies the correction: the meter to its readings, or pnbench at fit time.
CORRECTION_APPLY = ("meter", "software")
#: What a resumed run does with a correction recorded before it stopped.
CORRECTION_ON_RESUME = ("reuse", "repeat")


@dataclass(frozen=True)
class Correction:
    """Open/short correction of the LCR meter, run before its first step.

    ``confirmed`` False: the operator is asked to set each fixture state (open, then
    shorted) and confirm it. True: the states are prepared in advance (unattended runs);
    a device left in the fixture then becomes part of the "open" and is subtracted from
    every reading after it. ``apply``: "meter" (the meter corrects its readings) or
    "software" (the meter measures the fixture, pnbench compensates at fit time, the
    readings in points.csv stay raw). ``every_set_point``: in a run over temperature,
    run it again before the first LCR step at each stage set point. ``on_resume``:
    "reuse" the recorded correction when the meter still holds it, or "repeat" it.
    """

    which: tuple[str, ...]
    confirmed: bool = False
    apply: str = "meter"
    every_set_point: bool = False
    on_resume: str = "reuse"

    def to_json_dict(self) -> dict:
        return {"corrections": list(self.which), "confirmed": self.confirmed,
                "apply": self.apply, "every_set_point": self.every_set_point,
                "on_resume": self.on_resume}


def read_correction(raw: object, problems: Problems) -> Correction | None:
    if raw is None:
        return None
    t = TableReader(raw, ("lcr_correction",), problems)
    which = t.raw("corrections", True, 'a list such as ["open", "short"]')
    confirmed = t.boolean("confirmed", False)
    apply = t.choice("apply", CORRECTION_APPLY, "meter") or "meter"
    every = t.boolean("every_set_point", False)
    on_resume = t.choice("on_resume", CORRECTION_ON_RESUME, "reuse") or "reuse"
    t.finish()
    if which is None:
        return None
    if (not isinstance(which, list) or not which
            or not all(isinstance(w, str) and w in CORRECTIONS for w in which)
            or len(set(which)) != len(which)):
        t.problem("corrections", f"found {which!r}; give one or both of "
                  f"{', '.join(repr(c) for c in CORRECTIONS)}, each once")
        return None
    return Correction(which=tuple(c for c in CORRECTIONS if c in which), confirmed=confirmed,
                      apply=apply, every_set_point=every, on_resume=on_resume)


def check_correction_over_temperature(correction: Correction | None, temperature,
                                       problems: Problems, warnings: list[str]) -> None:
    """every_set_point needs a [temperature] table; a run over temperature that corrects
    once is told that the fixture's stray changes with temperature."""
    if correction is None:
        return
    if correction.every_set_point and temperature is None:
        problems.add(("lcr_correction", "every_set_point"), "repeats the correction at "
                     "each stage set point, and the plan has no [temperature] table")
    elif temperature is not None and not correction.every_set_point \
            and len(temperature.set_points_K) > 1:
        warnings.append("[lcr_correction] runs once, at the first set point, while the "
                        "fixture's stray capacitance changes with temperature; "
                        "every_set_point = true repeats it at each set point")
