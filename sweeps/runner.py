"""The runner: executes a plan's steps on the instrument roles, safely, and records it all.

    runner = Runner(plan, folder, bench, bus, fit=worker, time_scale=1.0)
    outcome = runner.run()          # on any thread; pause(), resume(), abort() from others

Order of work for one SMU point: check the level against the guards (before it is applied),
apply and read (settle, average), append the point to points.csv (flushed), emit it, hand
it to the fitter, check the reading. Nothing between two points waits for the disk: the
run folder's background thread fsyncs and writes the steps' progress to run.json
(`RunFolder.update_run_soon`); changes of state (start, pause, the end) are written
before the runner goes on. Every way out of `run` (the end, an exception, an
instrument fault, an abort, Ctrl-C, a signal handled by `stopsignals`) goes through the
same `finally`: ramp the source to zero, outputs and LCR bias off, read back that they are
off, and record it in run.json (`outputs_off_confirmed`); then the end work in the order
of `sweeps.ending` (final fit, model.json and card, report, and only then the status).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from pnbench.errors import InstrumentError, OperatorStop, SafetyStop
from pnbench.sweeps import ending
from pnbench.sweeps import events as ev
from pnbench.sweeps.benchtypes import BenchLike
from pnbench.sweeps.control import Control
from pnbench.sweeps.correction import Corrections
from pnbench.sweeps.events import EventBus, finite
from pnbench.sweeps.limits import Verdict, not_finite
from pnbench.sweeps.plan import Plan
from pnbench.sweeps.planstep import Step
from pnbench.sweeps.record import Point, RunFolder
from pnbench.sweeps.statuses import ExitCode, RunStatus, StepStatus, exit_code_for, step_finished
from pnbench.sweeps.steploops import StepLoops
from pnbench.sweeps.thermalrun import StageRun

#: run.json is refreshed (done counts) at most this often while points flow.
RUN_JSON_REFRESH_S = 5.0
#: At most one compliance event per step in this interval (the points carry the flag).
COMPLIANCE_EVENT_INTERVAL_S = 1.0


@dataclass(frozen=True)
class Outcome:
    status: RunStatus
    reason: str
    outputs_off_confirmed: bool
    run_dir: str

    @property
    def exit_code(self) -> ExitCode:
        return exit_code_for(self.status, self.outputs_off_confirmed)


class Runner(StepLoops):
    def __init__(self, plan: Plan, folder: RunFolder, bench: BenchLike, bus: EventBus, *,
                 fit=None, time_scale: float = 1.0, resume_state=None,
                 write_report: ending.ReportWriter | None = None,
                 seconds_per_point: dict[str, float] | None = None) -> None:
        self.plan = plan
        self.folder = folder
        self.bench = bench
        self.bus = bus
        self.fit = fit
        self.time_scale = time_scale
        self.state = resume_state
        self.write_report = write_report
        self.seconds_per_point = dict(seconds_per_point or {})
        self.done = {s.name: 0 for s in plan.steps}
        self.step_status: dict[str, str] = {s.name: StepStatus.PENDING for s in plan.steps}
        self.ended_by: dict[str, str] = {}
        if resume_state is not None:
            self.done.update(resume_state.done)
            self.step_status.update(resume_state.statuses)
            self.ended_by.update(resume_state.ended_by)
        self.current_step: str | None = None
        self.step_failed = False  # the step in hand ended by an instrument fault
        self.in_shutdown = False
        self.control = Control()
        self.corrections = Corrections(plan, bench, bus, self.control, folder, fit)
        self._last_refresh = 0.0
        self._last_compliance_event: dict[str, float] = {}
        self._compliance_count: dict[str, int] = {}
        self.stage = StageRun(plan, bench, lambda kind, step, data: self.bus.emit(
            kind, step, **data), self._stage_should_stop, folder.log)

    # -- control (any thread) -----------------------------------------------------------
    def pause(self) -> None:
        self.control.pause()

    def resume(self) -> None:
        self.control.resume()

    def answer(self, ok: bool) -> None:
        """The operator's answer to the question of the last operator_prompt event."""
        self.control.answer(ok)

    def abort(self, reason: str = "stopped by the operator",
              status: str = RunStatus.ABORTED) -> None:
        self.control.abort(reason, status)

    @property
    def paused(self) -> bool:
        return self.control.paused

    # -- the run --------------------------------------------------------------------------
    def run(self) -> Outcome:
        status, reason, failure = RunStatus.COMPLETED, "all steps finished", None
        try:
            self._begin()
            for step in self.plan.steps:
                if step_finished(self.step_status[step.name]):
                    continue
                self._run_step(step)
        except OperatorStop as exc:
            status = RunStatus(self.control.status)
            reason = str(exc)
        except SafetyStop as exc:
            status, reason = RunStatus.SAFETY_STOP, str(exc)
        except InstrumentError as exc:
            status, reason = RunStatus.FAILED, str(exc)
        except KeyboardInterrupt:
            status, reason = RunStatus.ABORTED, "stopped by the operator (Ctrl-C)"
        except BaseException as exc:  # noqa: BLE001 - recorded, then raised again below
            status, reason, failure = RunStatus.FAILED, f"internal error: {exc!r}", exc
        finally:
            confirmed = self._shutdown(status, reason)
        if failure is not None:
            raise failure
        return Outcome(status, reason, confirmed, str(self.folder.path))

    def _begin(self) -> None:
        resumed = self.state is not None
        self.folder.update_run(status=RunStatus.RUNNING, reason="", steps=self._steps_doc())
        self.bus.emit(ev.RunStarted, None, resumed=resumed,
                      resume_count=self.folder.run.get("resume_count", 0),
                      planned=self.plan.total_points, done=sum(self.done.values()),
                      steps=[s.name for s in self.plan.steps], run_dir=str(self.folder.path),
                      progress={n: {"done": self.done[n], "status": self.step_status[n]}
                                for n in self.done},
                      seconds_per_point=self.seconds_per_point)
        self.folder.log(("resumed" if resumed else "started") + f": {self.plan.total_points} "
                        f"points planned in {len(self.plan.steps)} steps")
        if not resumed:
            # The plan's own warnings (a large AC level, ...) belong in the run's record,
            # where the app, watch and the report show them.
            for warning in self.plan.warnings:
                self.bus.emit(ev.WarningEvent, None, message=f"plan: {warning}")
        for name, status, message in (self.state.newly_finished if resumed else []):
            if message:
                self.bus.emit(ev.Limit, name, guard=self.ended_by.get(name), message=message,
                              level=None)
            self.bus.emit(ev.StepFinished, name, status=status, done=self.done[name],
                          planned=self.plan.step(name).planned,
                          ended_by=self.ended_by.get(name), compliance_count=0)
        self.corrections.check()  # before any step: a correction the meter cannot do
        if self.fit is not None:
            self.fit.start()

    def _shutdown(self, status: str, reason: str) -> bool:
        self.in_shutdown = True
        confirmed = False
        try:
            confirmed = self._all_off()
        finally:
            self.folder.sync()
            if self.current_step is not None:
                self._finish_step_record(self.current_step, StepStatus.FAILED
                                         if self.step_failed else StepStatus.INTERRUPTED)
            ending.begin_end_work(self.folder, status, reason,
                                  outputs_off_confirmed=confirmed, steps=self._steps_doc())
            ending.finish_run(self.folder, self.bus, status=status, reason=reason,
                              outputs_off_confirmed=confirmed, fit=self.fit,
                              write_report=self.write_report, done=sum(self.done.values()),
                              planned=self.plan.total_points)
        return confirmed

    def _all_off(self) -> bool:
        report = self.bench.safe_off()
        for role, ok in report.items():
            self.bus.emit(ev.Output, None, role=role, on=not ok, confirmed=ok)
        confirmed = all(report.values())
        if not confirmed:
            bad = ", ".join(r for r, ok in report.items() if not ok)
            self.bus.emit(ev.ErrorEvent, None, message=f"could not confirm that the {bad} "
                          "output is off: switch it off at the instrument and check the "
                          "fixture before touching it")
        return confirmed

    # -- steps ------------------------------------------------------------------------------
    def _run_step(self, step: Step) -> None:
        self.stage.before_step(step)
        self.control.check()
        self.current_step = step.name
        start = self.done[step.name]
        self.step_status[step.name] = StepStatus.RUNNING
        self._compliance_count[step.name] = 0
        self.folder.update_run_soon(steps=self._steps_doc())
        self.bus.emit(ev.StepStarted, step.name, step_kind=step.kind, planned=step.planned,
                      done=start, instrument=step.instrument)
        self.folder.log(f"step {step.name} ({step.kind}): from point {start} of "
                        f"{step.planned}")
        if self._settled(step):  # a resumed step whose fit had already settled
            self._finish_step_record(step.name, StepStatus.SETTLED)
            self.current_step = None
            return
        if step.instrument == "smu":
            status, verdict = self._smu_step(step, start)
        else:
            self.corrections.before_lcr_step(step)  # outputs off; open, short; or reused
            status, verdict = self._lcr_step(step, start)
        if verdict is not None:
            self.ended_by[step.name] = verdict.kind
        self.bench.check_errors(step.instrument, f"step {step.name}")
        self._finish_step_record(step.name, status)
        self.current_step = None

    def _finish_step_record(self, name: str, status: str) -> None:
        self.folder.sync_soon()
        self.step_status[name] = status
        self.bus.emit(ev.StepFinished, name, status=status, done=self.done[name],
                      planned=self.plan.step(name).planned,
                      ended_by=self.ended_by.get(name),
                      compliance_count=self._compliance_count.get(name, 0))
        self.folder.update_run_soon(steps=self._steps_doc())
        if self.fit is not None and status not in (StepStatus.INTERRUPTED,
                                                   StepStatus.FAILED):
            self.fit.step_done(name)

    def _steps_doc(self) -> list[dict]:
        return [{"name": s.name, "kind": s.kind, "planned": s.planned,
                 "done": self.done[s.name], "status": self.step_status[s.name],
                 "ended_by": self.ended_by.get(s.name)} for s in self.plan.steps]

    # -- per point ----------------------------------------------------------------------
    def _record(self, step: Step, point: Point) -> None:
        self.folder.append_point(point)
        self.done[step.name] = point.index + 1
        self.bus.emit(ev.PointTaken, step.name, time_s=point.time_s, index=point.index,
                      point_kind=point.kind, voltage_V=point.voltage_V,
                      current_A=point.current_A, frequency_Hz=point.frequency_Hz,
                      capacitance_F=point.capacitance_F, conductance_S=point.conductance_S,
                      compliance=point.compliance, planned=step.planned)
        if self.fit is not None:
            self.fit.submit(step, point)
        if point.compliance:
            self._compliance(step, point)
        now = time.monotonic()
        if now - self._last_refresh >= RUN_JSON_REFRESH_S:
            self._last_refresh = now
            self.folder.update_run_soon(steps=self._steps_doc())

    def _compliance(self, step: Step, point: Point) -> None:
        count = self._compliance_count.get(step.name, 0) + 1
        self._compliance_count[step.name] = count
        now = time.monotonic()
        if now - self._last_compliance_event.get(step.name, -1e9) >= \
                COMPLIANCE_EVENT_INTERVAL_S:
            self._last_compliance_event[step.name] = now
            self.bus.emit(ev.Compliance, step.name, index=point.index,
                          voltage_V=finite(point.voltage_V), current_A=finite(point.current_A),
                          limit=step.compliance, count=count)

    def _ended(self, step: Step, verdict: Verdict) -> tuple[str, Verdict]:
        self.bus.emit(ev.Limit, step.name, guard=verdict.kind, message=verdict.message,
                      level=verdict.level)
        self.folder.log(f"step {step.name} ended by {verdict.kind}: {verdict.message}")
        return StepStatus.LIMIT, verdict

    def _settled(self, step: Step) -> bool:
        return (step.end_when_settled is not None and self.fit is not None
                and self.done[step.name] >= step.min_points
                and self.fit.is_settled(step.name))

    def _judgeable(self, step: Step, index: int | None, level: float, a: float, b: float,
                   frequency_Hz: float | None = None) -> None:
        """A reading that is not a finite number is an instrument fault: the step and the
        run end as failed, and no further level follows it."""
        if math.isfinite(a) and math.isfinite(b):  # every point: no message to build
            return
        where = (f"point {index}" if index is not None else "on the way back") + \
            f" at {level:g} {step.source_unit if step.instrument == 'smu' else 'V'}" + \
            (f", {frequency_Hz:g} Hz" if frequency_Hz is not None else "")
        message = not_finite(step.name, step.instrument, where, (a, b))
        if message is not None:
            self.step_failed = True
            raise InstrumentError(message)

    # -- pause and abort ----------------------------------------------------------------
    def _checkpoint(self, step: Step) -> bool:
        """Raise OperatorStop on abort; on pause, turn the step's source off, wait, and
        return True so the caller re-arms it. False when nothing happened."""
        control = self.control
        if control.abort_request is None and not control.paused:  # every point
            return False
        control.check()
        if not control.paused:
            return False
        if step.instrument == "smu":
            self._disarm_smu()
        else:
            self.bench.lcr.bias(False)
            self.bus.emit(ev.Output, step.name, role="lcr", on=False)
        self.folder.update_run(status=RunStatus.PAUSED, steps=self._steps_doc())
        self.bus.emit(ev.Paused, step.name, done=self.done[step.name])
        self.folder.log(f"paused in step {step.name} (outputs off)")
        self.control.wait_while_paused()
        self.folder.update_run(status=RunStatus.RUNNING)
        self.bus.emit(ev.Resumed, step.name, done=self.done[step.name])
        self.folder.log(f"resumed step {step.name}")
        return True

    def _stage_should_stop(self) -> bool:
        """Asked at every poll of the stage: an abort raises OperatorStop at once."""
        self.control.check()
        return False

    def _sleep(self, seconds: float) -> None:
        self.control.sleep(seconds * self.time_scale)

