"""Open/short correction of the LCR meter, as a plan's ``[lcr_correction]`` asks.

The runner calls `run_correction` before the first LCR step it runs. Every output is
switched off (and confirmed off) first; then, for each correction in order (open, then
short), the operator is asked to set the fixture state and confirm it (an
``operator_prompt`` event answered through `Control.answer`), unless the plan says the
states are prepared in advance (``confirmed = true``). What the meter measured is read
back at each of the plan's LCR frequencies where the dialect has a query for it, and the
whole record goes into run.json (``lcr_correction``) and an ``lcr_correction`` event.
"""

from __future__ import annotations

import math

from pnbench.errors import InstrumentError, OperatorStop
from pnbench.sweeps import events as ev
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


def lcr_frequencies(plan: Plan) -> list[float]:
    """Every frequency of the plan's LCR steps, once, in rising order."""
    return sorted({f for s in plan.steps if s.instrument == "lcr" for f in s.frequencies_Hz})


def run_correction(plan: Plan, bench, bus: ev.EventBus, control: Control, folder,
                   step: str | None) -> dict:
    """Run the plan's corrections with every output off; return what run.json records."""
    correction = plan.correction
    assert correction is not None
    report = bench.safe_off()
    for role, ok in report.items():
        bus.emit(ev.Output, step, role=role, on=not ok, confirmed=ok)
    if not all(report.values()):
        raise InstrumentError("the outputs could not be confirmed off before the LCR "
                              "correction; nothing was corrected")
    lcr = bench.lcr
    frequencies = lcr_frequencies(plan)
    values: dict[str, dict | None] = {}
    for which in correction.which:
        _confirm(which, correction.confirmed, bus, control, step)
        folder.log(f"LCR {which} correction")
        getattr(lcr, f"{which}_correction")()
        values[which] = _data(lcr, which, frequencies)
    if not correction.confirmed:
        _confirm("device", False, bus, control, step)
    record = {**correction.to_json_dict(), "done": True, "values": values}
    folder.update_run(lcr_correction=record)
    bus.emit(ev.Correction, step, corrections=list(correction.which),
             confirmed=correction.confirmed, values=values)
    return record


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
