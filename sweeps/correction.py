"""Open/short correction of the LCR meter, as a plan's ``[lcr_correction]`` asks.

The runner calls `Corrections.before_lcr_step` before every LCR step; the correction runs
before the first one (and, with ``every_set_point``, before the first one at each stage
set point). Every output is switched off (and confirmed off) first; then, for each
correction in order (open, then short), the operator is asked to set the fixture state
and confirm it (an ``operator_prompt`` event answered through `Control.answer`), unless
the plan says the states are prepared in advance (``confirmed = true``).
``apply = "meter"``: the meter runs its own correction command, what it measured is read
back at each of the plan's LCR frequencies where the dialect has a query for it, and its
stored correction is turned on (where the dialect can) and corrects every reading after.
``apply = "software"``: the meter's stored correction is turned off and pnbench reads the
open and the shorted fixture itself, as ordinary readings, at every test level and
frequency of the plan's LCR steps (`sweeps.fixturereadings`; no correction command
needed); the readings stay raw in points.csv and the fits compensate them from these
values (`sweeps.fitcorrection.compensated`). Each run of the correction is one entry of
run.json's ``lcr_correction["runs"]`` (its set point, who applies it, the values) and an
``lcr_correction`` event.

A resumed run reuses the entry recorded for its set point (``on_resume = "reuse"``, the
default) when it still holds: compensated in software, always; applied by the meter, when
the meter says it still applies it (the dialect's state query). A meter that no longer
applies it (switched off since) or cannot say so gets the correction again, the operator
asked as for the first one. ``on_resume = "repeat"`` always runs it again.
"""

from __future__ import annotations

import math

from pnbench.errors import DialectError, InstrumentError, OperatorStop
from pnbench.sweeps import events as ev
from pnbench.sweeps import fixturereadings
from pnbench.sweeps.control import Control
from pnbench.sweeps.plan import Plan

#: What the operator is asked to do before each correction, and after the last one.
ASK = {
    "open": "Open correction of the LCR meter: take the device out of the fixture and "
            "leave the fixture open (probes apart, in their measuring position). "
            "Confirm when the fixture is open.",
    "short": "Short correction of the LCR meter: short the fixture's terminals (a "
             "shorting bar or the probes together). Confirm when the fixture is shorted.",
    "device": "The corrections are done: put the device back in the fixture. Confirm to "
              "start the measurement.",
}
#: Set points closer than this are one (kelvin).
SAME_SET_POINT_K = 1e-6


def lcr_frequencies(plan: Plan) -> list[float]:
    """Every frequency of the plan's LCR steps, once, in rising order."""
    return sorted({f for s in plan.steps if s.instrument == "lcr" for f in s.frequencies_Hz})


def runs_of(record: object) -> list[dict]:
    """The entries of a run.json ``lcr_correction`` record, oldest first (a record from
    before entries were kept counts as one entry applied by the meter)."""
    if not isinstance(record, dict) or not record.get("done"):
        return []
    runs = record.get("runs")
    if isinstance(runs, list):
        return [r for r in runs if isinstance(r, dict)]
    return [{"set_point_K": None, "applied_by": "meter", "values": record.get("values")}]


def entry_for(record: object, set_point_K: float | None) -> dict | None:
    """The correction entry that holds for points at this stage set point: the latest
    one taken at it when the record says it runs at every set point, else the latest."""
    runs = runs_of(record)
    if runs and isinstance(record, dict) and record.get("every_set_point") \
            and set_point_K is not None:
        runs = [r for r in runs if isinstance(r.get("set_point_K"), (int, float))
                and abs(r["set_point_K"] - set_point_K) < SAME_SET_POINT_K]
    return runs[-1] if runs else None


class Corrections:
    """The plan's LCR correction over one run (one process of it)."""

    def __init__(self, plan: Plan, bench, bus: ev.EventBus, control: Control, folder,
                 fit=None) -> None:
        self.plan, self.bench, self.bus, self.control = plan, bench, bus, control
        self.folder, self.fit = folder, fit
        self.done_here: set = set()  # set points corrected (or reused) in this process

    def check(self) -> None:
        """DialectError when the LCR meter's dialect cannot do what the plan asks
        (checked before the first step, so no data is taken for nothing). Software
        compensation needs no correction command: pnbench reads the open and the short."""
        correction, lcr = self.plan.correction, self.bench.lcr
        commands = getattr(lcr, "commands", None)
        if correction is None or commands is None or correction.apply == "software":
            return
        for which in correction.which:
            if not getattr(commands, f"{which}_correction", ""):
                raise DialectError(f"[lcr_correction] asks for the {which} correction, and "
                                   f"the LCR meter's dialect has no {which}_correction "
                                   "command to start it")

    def before_lcr_step(self, step) -> None:
        """Run (or reuse) the correction if this step needs one first."""
        correction = self.plan.correction
        if correction is None:
            return
        key = step.set_point_K if correction.every_set_point else None
        if key in self.done_here:
            return
        record = self.folder.run.get("lcr_correction")
        earlier = entry_for(record, key)
        reason = ""  # why a resumed run corrects again
        if earlier is not None:  # recorded by an earlier process of this run: a resume
            if correction.on_resume == "repeat":
                reason = ("resumed: the plan asks to repeat the LCR correction "
                          "(on_resume = \"repeat\")")
                self._say(step, reason, warning=False)
            else:
                reused, reason = self._reusable(earlier, step)
                if reused:
                    self.done_here.add(key)
                    self._tell_fit(record)
                    self.bus.emit(ev.Correction, step.name,
                                  corrections=list(correction.which),
                                  confirmed=correction.confirmed,
                                  values=earlier.get("values"),
                                  applied_by=earlier.get("applied_by", "meter"),
                                  set_point_K=earlier.get("set_point_K"), reused=True,
                                  reason=reason)
                    return
        entry = run_correction(self.plan, self.bench, self.bus, self.control, self.folder,
                               step.name, step.set_point_K)
        if reason:
            entry["reason"] = reason
        record = {**correction.to_json_dict(), "done": True,
                  "applied_by": entry["applied_by"], "values": entry["values"],
                  "runs": [*runs_of(record), entry]}
        self.folder.update_run(lcr_correction=record)
        self.bus.emit(ev.Correction, step.name, corrections=list(correction.which),
                      confirmed=correction.confirmed, values=entry["values"],
                      applied_by=entry["applied_by"], set_point_K=entry["set_point_K"],
                      reason=reason)
        self.done_here.add(key)
        self._tell_fit(record)

    def _tell_fit(self, record: dict) -> None:
        if isinstance(getattr(self.fit, "extras", None), dict):
            self.fit.extras["lcr_correction"] = record  # the fits use and state it

    def _say(self, step, message: str, warning: bool = True) -> None:
        self.folder.log(message)
        if warning:
            self.bus.emit(ev.WarningEvent, step.name, message=message)

    def _reusable(self, entry: dict, step) -> tuple[bool, str]:
        """Whether the recorded entry still holds on this meter (see the module notes),
        and why, said in the run's log (and as a warning when it runs again)."""
        lcr = self.bench.lcr
        which = self.plan.correction.which
        where = _where(entry.get("set_point_K"))
        if entry.get("applied_by") == "software":
            for w in which:  # a meter switched on again may apply its stored data
                lcr.set_correction_state(w, False)
            text = (f"resumed: the LCR correction recorded{where} is reused; its values "
                    "compensate the readings in software")
            self._say(step, text, warning=False)
            return True, text
        states = {w: lcr.correction_state(w) for w in which}
        if all(states.values()):
            text = (f"resumed: the LCR meter still applies the correction recorded{where}; "
                    "it is reused")
            self._say(step, text, warning=False)
            return True, text
        lost = [w for w, on in states.items() if on is False]
        if lost:
            text = (f"resumed: the LCR meter no longer applies its {' and '.join(lost)} "
                    "correction (switched off or reset since the run stopped?): the "
                    "correction runs again, every output off")
        else:
            text = ("resumed: " + NO_STATE_QUERY.format(
                queries=" or ".join(f"{w}_state_query" for w, on in states.items()
                                    if on is None), where=where)
                    + ("" if self.plan.correction.confirmed else
                       ", each fixture state confirmed by the operator"))
        self._say(step, text)
        return False, text


#: Why a meter whose dialect cannot report its correction state is corrected again.
NO_STATE_QUERY = ("the LCR meter cannot report whether it still applies the correction "
                  "recorded{where} (its dialect has no {queries}); if it was switched off "
                  "since, the correction is lost, so it runs again, every output off")


def resume_note(plan: Plan) -> str | None:
    """What a resumed run of ``plan`` will do about a correction the meter applies when
    the LCR meter's dialect cannot report its correction state (None otherwise): said by
    `pnbench check`, so the operator knows before the run why a resume corrects again."""
    correction = plan.correction
    if correction is None or correction.apply != "meter" or correction.on_resume != "reuse":
        return None
    from pnbench.drivers.dialect import load_dialect

    lcr = plan.instruments.get("lcr")
    commands = load_dialect(getattr(lcr, "dialect", None)).lcr
    missing = [f"{w}_state_query" for w in correction.which
               if not getattr(commands, f"{w}_state_query", "")]
    if not missing:
        return None
    return ("on resume the LCR correction runs again: the meter's dialect has no "
            f"{' or '.join(missing)} to say whether the meter still applies it (a meter "
            "switched off since has lost it), so a resumed run corrects again, every "
            "output off" + ("" if correction.confirmed else
                            ", the operator asked for each fixture state again"))


def _where(set_point_K: object) -> str:
    return f" at {set_point_K:g} K" if isinstance(set_point_K, (int, float)) else ""


def run_correction(plan: Plan, bench, bus: ev.EventBus, control: Control, folder,
                   step: str | None, set_point_K: float | None = None) -> dict:
    """Run the plan's corrections with every output off; return the entry run.json
    records for it (set point, who applies it, the values, notes)."""
    correction = plan.correction
    assert correction is not None
    report = bench.safe_off()
    for role, ok in report.items():
        bus.emit(ev.Output, step, role=role, on=not ok, confirmed=ok)
    if not all(report.values()):
        raise InstrumentError("the outputs could not be confirmed off before the LCR "
                              "correction; nothing was corrected")
    lcr = bench.lcr
    values: dict[str, dict | None] = {}
    notes: list[str] = []
    software = correction.apply == "software"
    if software:  # raw readings: the meter's own stored correction must not touch them
        for which in correction.which:
            notes += _keep_off(lcr, which)
    for which in correction.which:
        _confirm(which, correction.confirmed, bus, control, step)
        lcr.fixture_is(which)
        folder.log(f"LCR {which} correction" + _where(set_point_K)
                   + (": pnbench reads the fixture" if software else ""))
        if software:
            values[which] = fixturereadings.measure(
                lcr, which, fixturereadings.level_frequency_pairs(plan),
                fixturereadings.readings_for(plan), check=control.check)
        else:
            getattr(lcr, f"{which}_correction")()
            values[which] = _data(lcr, which, lcr_frequencies(plan))
            lcr.set_correction_state(which, True)
    if not correction.confirmed:
        _confirm("device", False, bus, control, step)
    lcr.fixture_is("device")
    entry = {"set_point_K": set_point_K, "applied_by": correction.apply, "values": values,
             "step": step, "notes": notes}
    if software:  # which test level's values compensate each step's points
        entry["step_ac_level_V"] = {s.name: s.ac_level_V for s in plan.steps
                                    if s.instrument == "lcr"}
    return entry


def _keep_off(lcr, which: str) -> list[str]:
    """Turn the meter's own ``which`` correction off for a software correction; notes."""
    if lcr.set_correction_state(which, False):
        return []
    if lcr.correction_state(which):
        raise DialectError(f"[lcr_correction] apply = \"software\": the LCR meter applies its "
                           f"{which} correction and its dialect has no {which}_state "
                           "command to turn it off, so the readings would be corrected twice")
    return [f"the dialect has no {which}_state command: pnbench takes it that the meter "
            f"does not apply its {which} correction to the readings"]


def _confirm(topic: str, confirmed: bool, bus: ev.EventBus, control: Control,
             step: str | None) -> None:
    if confirmed:
        return
    message = ASK[topic]
    name = f"{topic}_correction" if topic != "device" else "device_back"
    if not control.ask(message, lambda: bus.emit(ev.OperatorPrompt, step, topic=name,
                                                 message=message)):
        raise OperatorStop(f"the operator did not confirm: {message.split(':')[0].lower()}")


def _data(lcr, which: str, frequencies: list[float]) -> dict | None:
    """The correction's data per frequency; None when the meter cannot report it."""
    rows = []
    for f in frequencies:
        pair = lcr.correction_data(which, f)
        if pair is None:
            return None
        rows.append((f, *pair))
    if which == "open":
        return {"frequency_Hz": [r[0] for r in rows], "G_S": [r[1] for r in rows],
                "B_S": [r[2] for r in rows],
                "C_F": [r[2] / (2 * math.pi * r[0]) for r in rows]}
    return {"frequency_Hz": [r[0] for r in rows], "R_ohm": [r[1] for r in rows],
            "X_ohm": [r[2] for r in rows]}
