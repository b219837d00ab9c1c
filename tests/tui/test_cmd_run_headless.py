"""Headless progress: bars with an ETA and live parameters on a terminal, plain lines in a
log, and silence (not a crash) when the terminal goes away."""

from __future__ import annotations

import io

from plantext import forward, limits, plan_text

from pnbench.sweeps.events import KIND_CLASSES
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.headless import Progress, bar, format_duration, format_parameter, leakage_text

PLAN = parse_plan(plan_text(
    forward(start=None, stop="0.8 V", points=10, compliance="10 mA"),
    forward("forward2", start=None, stop="0.8 V", points=30, compliance="10 mA"),
    device="X", limits=limits(max_reverse_voltage=None, max_power="1 W")))


def feed(progress, events):
    for e in events:
        progress.listener(e)
    progress._drain()


def ev(kind, step=None, time_s=0.0, **data):
    return KIND_CLASSES[kind].build({"seq": 0, "time_s": time_s, "step": step}, data)


def test_helpers():
    # one duration format for headless, the app and watch (sweeps.progress)
    assert format_duration(59) == "0:59" and format_duration(3725) == "1:02:05"
    assert format_duration(float("nan")) == "--"
    assert bar(5, 10, 10) == "[#####-----]"
    text = format_parameter("IS", {"value": 2.5e-9, "sigma": 2.5e-11, "settled": True})
    assert text.startswith("IS = 2.500 nA") and "1.0%" in text and text.endswith("✓")


def test_plain_lines_when_not_a_terminal():
    out = io.StringIO()
    p = Progress(PLAN, stream=out, tty=False)
    feed(p, [ev("run_started", planned=40, progress={}),
             ev("step_started", "forward", step_kind="iv_forward", planned=10, done=0),
             *[ev("point", "forward", index=k) for k in range(10)],
             ev("fit", "forward", parameters={"N": {"value": 1.07, "sigma": 0.01,
                                                    "settled": False}}),
             ev("limit", "forward", message="power guard"),
             ev("step_finished", "forward", status="limit", done=10, planned=10,
                ended_by="power"),
             # the fit worker's last fit of a step comes after the step has ended
             ev("fit", "forward", parameters={"N": {"value": 1.05, "sigma": 0.01,
                                                    "settled": False}}, final=True),
             ev("run_finished", status="completed", reason="all steps finished",
                outputs_off_confirmed=True)])
    text = out.getvalue()
    assert "\x1b[" not in text
    lines = text.splitlines()
    assert any("step forward (iv_forward): 10 points" in x for x in lines)
    assert any("limit in forward: power guard" in x for x in lines)
    assert any("ended by the power limit" in x for x in lines)
    assert [x.split(" ", 1)[1] for x in lines if " fit " in x] == [
        "fit forward: N = 1.050 ±1.0%"]
    assert "outputs off confirmed: yes" in lines[-1]


def fit_line(event) -> str:
    out = io.StringIO()
    p = Progress(PLAN, stream=out, tty=False)
    feed(p, [event])
    return out.getvalue().split(" ", 1)[1].rstrip("\n")


def test_reverse_fit_line_says_what_it_found_or_why_not():
    """A reverse step's fit has no model-card parameter until breakdown: its line gives
    the leakage at the reference voltage and says that IBV was not reached."""
    leak = {"voltage_V": -5.0, "current_A": 1.2e-12, "sigma_A": 3e-14}
    assert fit_line(ev("fit", "forward", fit_kind="iv_reverse", parameters={},
                       not_determined={}, final=True, ibv_A=1e-5, leakage=leak,
                       message="leakage only from 33 reverse points; BV not ...")) == (
        "fit forward: no breakdown (IBV = 10 uA not reached); leakage 1.2 pA ±2.5% at -5 V")
    bv = {"BV": {"value": 34.19, "sigma": 0.01, "settled": True}}
    assert fit_line(ev("fit", "forward", fit_kind="iv_reverse", parameters=bv,
                       final=True, ibv_A=1e-5)) == (
        "fit forward: BV = 34.190 V ±0.0% ✓ at IBV = 10 uA")
    # within two standard errors of zero: below what the instrument resolves
    assert leakage_text({"voltage_V": -32.0, "current_A": -5e-13, "sigma_A": 3e-13}) == (
        "leakage below 1.1 pA at -32 V")


def test_fit_line_names_what_was_not_determined_or_why_nothing():
    line = fit_line(ev("fit", "forward", fit_kind="admittance",
                       parameters={"TT": {"value": 2e-9, "sigma": 3e-11, "settled": False}},
                       not_determined={"VJ": "x", "M": "y"}, final=True))
    assert line == "fit forward: TT = 2.000 ns ±1.5%; VJ, M not determined"
    line = fit_line(ev("fit", "forward", fit_kind="iv_forward", parameters={},
                       message="too few forward points (3; need 4); more", final=True))
    assert line == "fit forward: too few forward points (3; need 4)"


def test_terminal_bars_with_eta_and_parameters():
    out = io.StringIO()
    p = Progress(PLAN, stream=out, tty=True)
    feed(p, [ev("run_started", planned=40, progress={}),
             ev("step_started", "forward", step_kind="iv_forward", planned=10, done=0),
             ev("point", "forward", index=0, time_s=1.0)])
    feed(p, [ev("point", "forward", index=k, time_s=1.0 + 0.2 * k) for k in range(1, 10)]
         + [ev("fit", "forward", parameters={"IS": {"value": 1e-14, "sigma": 1e-16,
                                                    "settled": True}})])
    block = p.block()
    assert block[0].startswith(">forward ") and "[" + "#" * 24 + "]" in block[0]
    assert "10/10" in block[0] and "0/30" in block[1]
    assert "ETA 0:06" in block[2]  # 30 points left at the measured 0.2 s per point
    assert "IS = 10.00 fA" in block[3]
    p._redraw()
    p.say("limit in forward: x")
    assert "\x1b[4F\x1b[J" in out.getvalue()  # the block is cleared before a message


def test_resumed_run_shows_what_was_done():
    p = Progress(PLAN, stream=io.StringIO(), tty=False)
    feed(p, [ev("run_started", resumed=True, planned=40, done=25,
                progress={"forward": {"done": 10, "status": "done"},
                          "forward2": {"done": 15, "status": "running"}})])
    assert p.total_done() == 25 and p.steps["forward"].status == "done"


class Gone(io.StringIO):
    def write(self, text):
        raise OSError(5, "Input/output error")


def test_a_closed_terminal_does_not_stop_anything():
    p = Progress(PLAN, stream=Gone(), tty=True)
    feed(p, [ev("run_started", planned=40, progress={})])
    p._redraw()
    assert p._broken
