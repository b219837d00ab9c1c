"""The words the user reads for the engine's codes (statuses, the guard that ended a
step) and the app's standing advice. Codes stay codes in the run folder; only what is
shown is translated here, so no internal name reaches the screen."""

from __future__ import annotations

#: The guard (limits.Verdict.kind) that ended a step, as a phrase after "ended by".
GUARD_WORDS = {
    "voltage": "the voltage limit",
    "current": "the current limit",
    "power": "the power limit",
    "breakdown_guard": "its breakdown guard (as planned)",
    "compliance_storm": "repeated compliance (too many readings in a row at the "
                        "compliance limit)",
    "overflow": "repeated overflow readings",
    "overshoot": "a reading beyond the limits",
    "settled": "settling (its parameters stopped moving)",
}

#: Run and step statuses as shown.
STATUS_WORDS = {
    "safety_stop": "stopped by a safety limit",
    "ended_early": "settled early",
}

SHORT_ADVICE = ("Quitting the app aborts it. For overnight runs use `pnbench run PLAN "
                "--headless` and look in with `pnbench watch RUN_DIR`.")

OVERNIGHT_ADVICE = (
    "Overnight and other long runs belong in headless mode: start them with "
    "`pnbench run PLAN --headless` (in tmux or with nohup) and look in with "
    "`pnbench watch RUN_DIR`, which you can open and quit at any time without "
    "touching the acquisition."
)


def guard_words(kind: object) -> str:
    """What ended a step, in words ("" for none)."""
    if not kind:
        return ""
    return GUARD_WORDS.get(str(kind), str(kind).replace("_", " "))


def status_words(status: object) -> str:
    text = str(status or "")
    return STATUS_WORDS.get(text, text.replace("_", " "))
