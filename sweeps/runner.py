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
from typing import TYPE_CHECKING

from pnbench.errors import InstrumentError, OperatorStop, SafetyStop
from pnbench.modeling.smallsignal import parallel_from_admittance
from pnbench.sweeps import ending
from pnbench.sweeps import events as ev
from pnbench.sweeps.benchtypes import BenchLike
from pnbench.sweeps.control import Control
from pnbench.sweeps.correction import Corrections
from pnbench.sweeps.events import EventBus, finite
from pnbench.sweeps.limits import Reading, StepGuard, Verdict, not_finite
from pnbench.sweeps.plan import Plan
from pnbench.sweeps.planstep import Step
from pnbench.sweeps.record import Point, RunFolder
from pnbench.sweeps.statuses import ExitCode, RunStatus, StepStatus, exit_code_for, step_finished
from pnbench.sweeps.thermalrun import StageRun

if TYPE_CHECKING:
    from pnbench.drivers.roles import SmuReading

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


class Runner:
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

    def _smu_step(self, step: Step, start: int) -> tuple[str, Verdict | None]:
        guard = StepGuard(self.plan.limits, step.source, step.compliance,
                          step.breakdown_guard_A)
        if self.state is not None:
            for p in self.state.tails.get(step.name, []):
                guard.after(step.points[p.index].level, _reading_of(p))
        self._arm_smu(step)
        clean = False
        try:
            verdict = self._approach(step, start, guard) if start > 0 else None
            # (index, level) straight from the step's lazy levels: no planned-point
            # object a point (an SMU step's point k is its level k)
            for index, level in enumerate(step.levels[start:], start):
                level = float(level)
                if verdict is not None:
                    break
                if self._checkpoint(step):
                    self._arm_smu(step)
                    verdict = self._approach(step, index, guard)
                    if verdict is not None:
                        break
                verdict = guard.before(level)
                if verdict is not None:
                    break
                reading = self._read_smu(step, level)
                v, i = reading.voltage_V, reading.current_A
                if not (math.isfinite(v) and math.isfinite(i)):
                    self._judgeable(step, index, level, v, i)
                self._record(step, Point(step.name, index, "iv", self.bus.elapsed_s(), v, i,
                                         compliance=bool(reading.compliance),
                                         temperature_K=self.stage.temperature_K(step.name)))
                verdict = guard.after(level, reading)
                if verdict is None and step.end_when_settled is not None and \
                        self._settled(step):
                    clean = True
                    return StepStatus.SETTLED, None
            if verdict is not None and verdict.ends == "run":
                self.bus.emit(ev.Limit, step.name, guard=verdict.kind,
                              message=verdict.message, level=verdict.level)
                raise SafetyStop(f"step {step.name}: {verdict.message}")
            clean = True
            return (StepStatus.DONE, None) if verdict is None else self._ended(step, verdict)
        finally:
            if clean:  # after a fault the shutdown's safe_off (which reconnects) does it
                self._disarm_smu()

    def _arm_smu(self, step: Step) -> None:
        smu = self.bench.smu
        smu.configure(source=step.source, limit=step.compliance, nplc=step.nplc,
                      four_wire=step.four_wire)
        smu.output(True)
        self.bus.emit(ev.Output, step.name, role="smu", on=True)

    def _disarm_smu(self) -> None:
        smu = self.bench.smu
        smu.ramp_to_zero()
        smu.output(False)
        self.bus.emit(ev.Output, self.current_step, role="smu", on=False)

    def _approach(self, step: Step, index: int, guard: StepGuard) -> Verdict | None:
        """Bring the source back to the level before ``index`` through at most ten of the
        step's earlier levels (after a pause or a resume), each checked by the guards
        before and after like any level; the readings are not kept."""
        earlier = step.levels[:index]
        stride = max(1, len(earlier) // 10)
        for level in earlier[stride - 1::stride]:
            verdict = guard.before(level)
            if verdict is None:
                r = self.bench.smu.apply_and_read(level)
                self._judgeable(step, None, level, r.voltage_V, r.current_A)
                verdict = guard.after(level, Reading(r.voltage_V, r.current_A,
                                                     bool(r.compliance)))
            if verdict is not None:
                return verdict
        return None

    def _read_smu(self, step: Step, level: float) -> Reading | SmuReading:
        """The reading at ``level`` (settled, averaged); either kind carries the three
        fields the guards and the point take (no copy of a single reading)."""
        smu = self.bench.smu
        r = smu.apply_and_read(level)
        if step.settle_s > 0 and self.time_scale > 0:
            self._sleep(step.settle_s)
            r = smu.apply_and_read(level)
        if step.average == 1:
            return r
        readings = [r] + [smu.apply_and_read(level) for _ in range(step.average - 1)]
        n = len(readings)
        return Reading(sum(x.voltage_V for x in readings) / n,
                       sum(x.current_A for x in readings) / n,
                       any(x.compliance for x in readings))

    def _lcr_step(self, step: Step, start: int) -> tuple[str, Verdict | None]:
        lcr = self.bench.lcr
        self._arm_lcr(step)
        last_bias = None
        clean = False
        try:
            for planned in step.points[start:]:
                if self._checkpoint(step):
                    self._arm_lcr(step)
                    last_bias = None
                bias, f = planned.level, planned.frequency_Hz
                if not self.plan.limits.voltage_allowed(bias):
                    clean = True
                    return self._ended(step, Verdict("voltage", f"bias {bias:g} V is outside "
                                                     "the voltage limits", level=bias))
                if bias != last_bias and step.settle_s > 0 and self.time_scale > 0:
                    lcr.apply_and_read(bias, f)
                    self._sleep(step.settle_s)
                last_bias = bias
                readings = [lcr.apply_and_read(bias, f) for _ in range(step.average)]
                y = sum(r.admittance_S for r in readings) / len(readings)
                cp, gp = parallel_from_admittance(y, f)
                self._judgeable(step, planned.index, bias, cp, gp, frequency_Hz=f)
                point = Point(step.name, planned.index, "cv", self.bus.elapsed_s(),
                              float(readings[-1].bias_V), None, float(f), float(cp), float(gp),
                              temperature_K=self.stage.temperature_K(step.name))
                self._record(step, point)
                if self._settled(step):
                    clean = True
                    return StepStatus.SETTLED, None
            clean = True
            return StepStatus.DONE, None
        finally:
            if clean:
                lcr.bias(False)
                self.bus.emit(ev.Output, step.name, role="lcr", on=False)

    def _arm_lcr(self, step: Step) -> None:
        lcr = self.bench.lcr
        lcr.configure(ac_level_V=step.ac_level_V)
        lcr.bias(True)
        self.bus.emit(ev.Output, step.name, role="lcr", on=True)

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


def _reading_of(point: Point) -> Reading:
    return Reading(point.voltage_V or 0.0, point.current_A or 0.0, point.compliance)
