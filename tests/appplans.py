"""Plans for tests and benchmarks that run the app on the simulated switching diode:
a forward I-V step, and optionally a reverse one, inside small safe limits."""

from __future__ import annotations

_HEAD = """[plan]
format = 1
title = "{title}"

[device]
name = "{device}"
temperature = "300.15 K"

[limits]
max_voltage = "1 V"
max_reverse_voltage = "20 V"
max_current = "50 mA"
max_power = "50 mW"

[[steps]]
name = "forward"
kind = "iv_forward"
start = "0.3 V"
stop = "0.65 V"
points = {forward}
compliance = "20 mA"
"""

_REVERSE = """
[[steps]]
name = "reverse"
kind = "iv_reverse"
start = "0 V"
stop = "{stop}"
points = {reverse}
compliance = "1 mA"
breakdown_guard = "100 uA"
"""


def sweep_plan(device: str, forward: int, reverse: int = 0, *, reverse_stop: str = "-5 V",
               title: str = "app test plan") -> str:
    """Plan text: ``forward`` forward points, and a reverse step of ``reverse`` points."""
    text = _HEAD.format(title=title, device=device, forward=forward)
    if reverse:
        text += _REVERSE.format(stop=reverse_stop, reverse=reverse)
    return text
