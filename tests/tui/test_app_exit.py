"""How the app ends a sweep's end work: the report of its last sweep is finished before
the process ends (written by run_app when the app ended before it began), and a SIGHUP
or SIGTERM that came meanwhile makes the exit code 4 although the run completed."""

from __future__ import annotations

import threading
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


def finished_app(tmp_path, **extra):
    plan = parse_plan(PLAN, "p.toml").on_simulated_bench("lh-zl560@pnsim:time_scale=0")
    launch = Launch.new(plan, out_dir=tmp_path)
    assert launch.run().status == "completed"
    live = SimpleNamespace(launch=launch, run_dir=launch.run_dir, running=False)
    return SimpleNamespace(live=live, control=SimpleNamespace(report=True),
                           state=SimpleNamespace(status="completed"), **extra)


def test_the_report_is_written_when_the_app_ended_before_it_began(tmp_path):
    app = finished_app(tmp_path)
    finish_end_work(app)
    assert (app.live.run_dir / "report.html").is_file()
    assert exit_code(app, 0) == 0


def test_a_report_in_progress_is_waited_for_and_a_signal_gives_exit_4(tmp_path):
    done = threading.Event()
    app = finished_app(tmp_path, report_done=done, stopped_by_signal="SIGTERM")
    app.report_dir = app.live.run_dir
    waited = []
    timer = threading.Timer(0.2, lambda: (waited.append(True), done.set()))
    timer.start()
    finish_end_work(app)  # returns once the worker's report is done
    assert waited == [True]
    assert not (app.live.run_dir / "report.html").exists()  # the worker's job, not redone
    assert exit_code(app, 0) == 4
