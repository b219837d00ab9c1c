"""Plan text for tests and benchmarks, built in one place (keys as in docs/plan-format.md).

A plan is `plan_text(*steps, device=..., limits=..., instruments=...)`; the steps come
from `forward`, `reverse`, `cv` and `admittance`, which hold the usual values of the
simulated parts and take any key as a keyword (None leaves a key out). Values are written
as TOML: strings quoted, numbers and lists as they are. `Raw("...")` goes in verbatim,
for a placeholder a test fills in later with str.format.
"""

from __future__ import annotations

import json
from collections.abc import Mapping


class Raw(str):
    """Text written into the plan as it is (not quoted)."""


#: The limits most tests run inside: a forward sweep to 2 V, reverse to 40 V.
LIMITS = {"max_voltage": "2 V", "max_reverse_voltage": "40 V", "max_current": "100 mA",
          "max_power": "150 mW"}


def toml_value(value: object) -> str:
    if isinstance(value, Raw):
        return str(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"no TOML form for {value!r}")


def table(header: str, values: Mapping[str, object]) -> str:
    """One TOML table (``[[steps]]`` when header is "[steps]")."""
    lines = [f"[{header}]"]
    lines += [f"{k} = {toml_value(v)}" for k, v in values.items() if v is not None]
    return "\n".join(lines) + "\n"


def _step(kind: str, name: str, defaults: dict, keys: dict) -> dict:
    return {"name": name, "kind": kind, **{**defaults, **keys}}


def forward(name: str = "forward", **keys) -> dict:
    """An iv_forward step (forces voltage unless ``source="current"``)."""
    return _step("iv_forward", name, {"start": "0.3 V", "stop": "0.75 V", "points": 40,
                                      "compliance": "100 mA"}, keys)


def reverse(name: str = "reverse", **keys) -> dict:
    """An iv_reverse step from 0 V down, with a breakdown guard."""
    return _step("iv_reverse", name, {"stop": "-20 V", "points": 21, "compliance": "1 mA",
                                      "breakdown_guard": "10 uA"}, keys)


def cv(name: str = "cv", **keys) -> dict:
    """A cv step: a linear bias range at two frequencies unless ``bias`` is given."""
    defaults = {"bias_start": 0, "bias_stop": "-10 V", "bias_points": 6,
                "frequencies": ["100 kHz", "1 MHz"]}
    if "bias" in keys:
        defaults = {"frequencies": defaults["frequencies"]}
    return _step("cv", name, defaults, keys)


def admittance(name: str = "admittance", **keys) -> dict:
    """An admittance step: forward biases at four frequencies (diffusion capacitance)."""
    return _step("admittance", name, {
        "bias": ["0.55 V", "0.6 V", "0.63 V", "0.66 V", "0.68 V", "0.70 V", "0.72 V"],
        "frequencies": ["100 kHz", "300 kHz", "1 MHz", "2 MHz"]}, keys)


def plan_text(*steps: Mapping[str, object], device: str | Mapping[str, object] = "LH-T1",
              limits: Mapping[str, object] | None = None,
              instruments: Mapping[str, Mapping[str, object]] | None = None,
              plan: Mapping[str, object] | None = None) -> str:
    """A whole plan: [plan] (optional), [device], [instruments.ROLE], [limits], [[steps]].

    ``device`` is a name or the whole [device] table; ``limits`` replaces LIMITS.
    """
    parts = [table("plan", plan)] if plan else []
    parts.append(table("device", {"name": device} if isinstance(device, str) else device))
    for role, values in (instruments or {}).items():
        parts.append(table(f"instruments.{role}", values))
    parts.append(table("limits", LIMITS if limits is None else limits))
    parts += [table("[steps]", s) for s in steps]
    return "\n".join(parts)


def limits(**changes: object) -> dict:
    """LIMITS with some keys changed (None removes one)."""
    return {k: v for k, v in {**LIMITS, **changes}.items() if v is not None}


def sweep_plan(device: str, forward_points: int, reverse_points: int = 0, *,
               reverse_stop: str = "-5 V", title: str = "app test plan") -> str:
    """The app tests' plan on the simulated switching diode: ``forward_points`` forward
    points and, if asked, a reverse step of ``reverse_points``, inside small safe limits."""
    steps = [forward(start="0.3 V", stop="0.65 V", points=forward_points,
                     compliance="20 mA")]
    if reverse_points:
        steps.append(reverse(start="0 V", stop=reverse_stop, points=reverse_points,
                             breakdown_guard="100 uA"))
    return plan_text(*steps, plan={"format": 1, "title": title},
                     device={"name": device, "temperature": "300.15 K"},
                     limits={"max_voltage": "1 V", "max_reverse_voltage": "20 V",
                             "max_current": "50 mA", "max_power": "50 mW"})
