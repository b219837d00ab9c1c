"""The end of a run in its one order (final fit, model and card, report, then the status,
then run_finished), a crash between any two of those stages, and a resume that finishes
the end work from the folder alone, without the instruments."""

from __future__ import annotations

import pytest
from plantext import cv, forward, plan_text

from pnbench.sweeps import launch as launch_mod
from pnbench.sweeps import record
from pnbench.sweeps.events import RunFinished
from pnbench.sweeps.fitfeed import FitWorker
from pnbench.sweeps.launch import Launch
from pnbench.sweeps.plan import parse_plan
from pnbench.sweeps.record import RunFolder

PLAN = plan_text(forward(points=25), cv(bias_points=5), device="LH-QT16-end")


class Killed(BaseException):
    """Stands for the process being killed at that instant (nothing after it runs)."""


def report_writer(calls: list):
    def write(run_dir):
        # the report is made before the status: the folder says what it will end with
        info = record.read_run(run_dir)
        calls.append((info.status, info.end_status, record.has(run_dir, "model.json")))
        path = record.report_path(run_dir)
        record.atomic_write(path, "<html>report</html>")
        return path
    return write


def new_launch(tmp_path, calls):
    plan = parse_plan(PLAN.encode(), "plan.toml")
    plan = plan.on_simulated_bench("lh-qt16@pnsim:time_scale=0")
    return Launch.new(plan, out_dir=tmp_path,
                      write_report=report_writer(calls))


def test_the_end_work_comes_before_the_status(tmp_path):
    calls: list = []
    launch = new_launch(tmp_path, calls)
    outcome = launch.run()
    assert outcome.status == "completed" and outcome.exit_code == 0
    # when the report was written: model.json there, status still live, ending completed
    assert calls == [("running", "completed", True)]
    info = record.read_run(launch.run_dir)
    assert info.status == "completed" and info.finishing is None
    assert isinstance(record.read_events(launch.run_dir)[-1], RunFinished)
    assert record.read_model(launch.run_dir).values["IS"] > 0


def _crash_at(monkeypatch, stage: str, calls: list) -> None:
    if stage == "model":  # killed before the final fit wrote the run's model
        original_finish = FitWorker.finish

        def finish(self, *args, **kwargs):
            self.write_model = None  # the fit thread stops writing, as in a kill
            original_finish(self, *args, **kwargs)
            raise Killed
        monkeypatch.setattr(FitWorker, "finish", finish)
    elif stage == "report":
        def broken(run_dir):
            raise Killed
        calls.append(broken)
    elif stage == "status":
        original = RunFolder.update_run

        def update_run(self, **changes):
            if changes.get("status") == "completed":
                raise Killed
            return original(self, **changes)
        monkeypatch.setattr(RunFolder, "update_run", update_run)


@pytest.mark.parametrize("stage", ["model", "report", "status"])
def test_a_crash_in_the_end_work_leaves_it_unfinished_and_resume_finishes_it(
        tmp_path, monkeypatch, stage):
    calls: list = []
    launch = new_launch(tmp_path, calls)
    hooks: list = []
    _crash_at(monkeypatch, stage, hooks)
    if hooks:
        launch.write_report = hooks[0]
    with pytest.raises(Killed):
        launch.run()
    monkeypatch.undo()
    run_dir = launch.run_dir
    info = record.read_run(run_dir)
    # never "completed" with the end work undone; what it was ending with is recorded
    assert info.status == "running" and info.end_status == "completed", stage
    assert not any(isinstance(e, RunFinished) for e in record.read_events(run_dir))
    if stage == "model":  # at most the provisional model of the step ends is there
        doc = record.read_model_doc(run_dir)
        assert doc is None or doc.get("provisional") is True

    def no_bench(*args, **kwargs):
        raise AssertionError("the end work must not open the instruments")

    def no_rows(*args, **kwargs):
        raise AssertionError("end work reads the folder by column, never row by row")

    first = record.read_model(run_dir) if stage != "model" else None
    monkeypatch.setattr(launch_mod, "open_bench", no_bench)
    monkeypatch.setattr(record.PointColumns, "row", no_rows)
    calls.clear()
    again = Launch.resume_from(run_dir, write_report=report_writer(calls))
    outcome = again.run()
    assert outcome.status == "completed" and outcome.exit_code == 0, stage
    info = record.read_run(run_dir)
    assert info.status == "completed" and info.finishing is None
    assert info["resume_count"] == 1
    assert calls == [("running", "completed", True)]
    assert record.read_model(run_dir).values["IS"] > 0 and record.read_card(run_dir)
    assert not record.read_model_doc(run_dir).get("provisional")  # the final model
    if first is not None:  # fitted again from the columns read back: the same model
        assert record.read_model(run_dir).values == first.values
    events = record.read_events(run_dir)
    assert isinstance(events[-1], RunFinished) and events[-1].status == "completed"
    seqs = [e.seq for e in events]
    assert seqs == list(range(1, len(seqs) + 1))
    assert len(record.read_columns(run_dir)) == 25 + 10  # no point taken again
