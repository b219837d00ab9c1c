"""How the app ends a sweep's end work: the engine's end work (final fit, model, card,
report) is waited for before the process ends, and a SIGHUP or SIGTERM that came
meanwhile makes the exit code 4 although the run completed."""

from __future__ import annotations

from types import SimpleNamespace

from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.tui.app.exit import exit_code, finish_end_work

PLAN = """[device]
name = "LH-ZL560"

[limits]
max_voltage = "2 V"
max_reverse_voltage = "8 V"
max_current = "100 mA"
max_power = "100 mW"

[[steps]]
name = "forward"
kind = "iv_forward"
start = "0.2 V"
stop = "0.75 V"
points = 8
compliance = "50 mA"
"""


def test_the_end_work_is_waited_for_and_a_signal_meanwhile_gives_exit_4(tmp_path):
    plan = parse_plan(PLAN, "p.toml").on_simulated_bench("lh-zl560@pnsim:time_scale=0")
    from pnbench.tui.report import write_report

    launch = Launch.new(plan, out_dir=tmp_path, write_report=write_report)
    launch.start()  # the engine's thread: the run, then its end work
    live = SimpleNamespace(launch=launch, run_dir=None, running=True, wait=launch.wait)
    app = SimpleNamespace(live=live, state=SimpleNamespace(status="running"))
    finish_end_work(app)  # returns once the engine has finished the folder
    assert not launch.is_alive()
    assert launch.outcome.status == "completed"
    assert (launch.run_dir / "report.html").is_file()
    assert exit_code(app, 0) == 0
    app.stopped_by_signal = "SIGTERM"
    assert exit_code(app, 0) == 4


def test_finishing_without_a_sweep_does_nothing():
    app = SimpleNamespace(live=None, state=SimpleNamespace(status="idle"))
    finish_end_work(app)
    assert exit_code(app, 0) == 0
