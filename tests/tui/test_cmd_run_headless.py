"""Headless progress: bars with an ETA and live parameters on a terminal, plain lines in a
log, and silence (not a crash) when the terminal goes away."""

from __future__ import annotations

import io
import time

from pnbench.sweeps.events import Event
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.headless import Progress, bar, format_duration, format_parameter

PLAN = parse_plan("""
[device]
name = "X"
[limits]
max_voltage = "2 V"
max_current = "100 mA"
max_power = "1 W"
[[steps]]
name = "forward"
kind = "iv_forward"
stop = "0.8 V"
points = 10
compliance = "10 mA"
[[steps]]
name = "forward2"
kind = "iv_forward"
stop = "0.8 V"
points = 30
compliance = "10 mA"
""")


def feed(progress, events):
    for e in events:
        progress.listener(e)
    progress._drain()


def ev(kind, step=None, **data):
    return Event(0, 0.0, kind, step, data)


def test_helpers():
    assert format_duration(59) == "00:59" and format_duration(3725) == "1:02:05"
    assert format_duration(float("nan")) == "--:--"
    assert bar(5, 10, 10) == "[#####-----]"
    text = format_parameter("IS", {"value": 2.5e-9, "sigma": 2.5e-11, "settled": True})
    assert text.startswith("IS = 2.5 nA") and "1.0%" in text and text.endswith("✓")


def test_plain_lines_when_not_a_terminal():
    out = io.StringIO()
    p = Progress(PLAN, stream=out, tty=False)
    feed(p, [ev("run_started", planned=40, progress={}),
             ev("step_started", "forward", step_kind="iv_forward", planned=10, done=0),
             *[ev("point", "forward", index=k) for k in range(10)],
             ev("fit", "forward", parameters={"N": {"value": 1.05, "sigma": 0.01,
                                                    "settled": False}}),
             ev("limit", "forward", message="power guard"),
             ev("step_finished", "forward", status="limit", done=10, planned=10,
                ended_by="power"),
             ev("run_finished", status="completed", reason="all steps finished",
                outputs_off_confirmed=True)])
    text = out.getvalue()
    assert "\x1b[" not in text
    lines = text.splitlines()
    assert any("step forward (iv_forward): 10 points" in x for x in lines)
    assert any("limit in forward: power guard" in x for x in lines)
    assert any("ended by power" in x for x in lines)
    assert any(x.endswith("fit forward: N = 1.05 ±1.0%") for x in lines)
    assert "outputs off confirmed: yes" in lines[-1]


def test_terminal_bars_with_eta_and_parameters():
    out = io.StringIO()
    p = Progress(PLAN, stream=out, tty=True)
    feed(p, [ev("run_started", planned=40, progress={}),
             ev("step_started", "forward", step_kind="iv_forward", planned=10, done=0),
             ev("point", "forward", index=0)])
    time.sleep(0.05)
    feed(p, [ev("point", "forward", index=k) for k in range(1, 10)]
         + [ev("fit", "forward", parameters={"IS": {"value": 1e-14, "sigma": 1e-16,
                                                    "settled": True}})])
    block = p.block()
    assert block[0].startswith(">forward ") and "[" + "#" * 24 + "]" in block[0]
    assert "10/10" in block[0] and "0/30" in block[1]
    assert "ETA" in block[2] and "--:--" not in block[2]
    assert "IS = 10 fA" in block[3]
    p._redraw()
    p.say("limit in forward: x")
    assert "\x1b[4F\x1b[J" in out.getvalue()  # the block is cleared before a message


def test_resumed_run_shows_what_was_done():
    p = Progress(PLAN, stream=io.StringIO(), tty=False)
    feed(p, [ev("run_started", resumed=True, planned=40, done=25,
                progress={"forward": {"done": 10, "status": "done"},
                          "forward2": {"done": 15, "status": "running"}})])
    assert p.total_done() == 25 and p.steps["forward"]["status"] == "done"


class Gone(io.StringIO):
    def write(self, text):
        raise OSError(5, "Input/output error")


def test_a_closed_terminal_does_not_stop_anything():
    p = Progress(PLAN, stream=Gone(), tty=True)
    feed(p, [ev("run_started", planned=40, progress={})])
    p._redraw()
    assert p._broken
