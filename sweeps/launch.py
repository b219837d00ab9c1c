"""One run from start to end: folder, bench, fitter, runner, in the right order.

    plan = plan.on_simulated_bench("lh-qt16@pnsim:time_scale=0")   # or real instruments
    launch = Launch.new(plan, out_dir="runs", listeners=[queue.put])
    outcome = launch.run()       # blocking; or launch.start() + launch.wait() on a thread
    launch.pause(); launch.resume(); launch.abort("why")

    launch = Launch.resume_from(run_dir, force_identity=False)

The command line and the app both use this, so a run started either way leaves the same
run folder, report included: the front end passes ``write_report`` (sweeps never import
the report) and the runner calls it in the end order of `sweeps.ending`. Connection
failures before the first point are recorded in run.json (status ``failed``) and raised
to the caller. A resumed run whose steps are all finished only does its end work, from
the folder, without opening the instruments.
"""

from __future__ import annotations

import threading
from pathlib import Path

from pnbench import version
from pnbench.errors import BadInput, DataFileError, PnbenchError
from pnbench.modeling.modelset import card_name
from pnbench.sweeps import ending
from pnbench.sweeps import guardian as guardian_mod
from pnbench.sweeps import resume as resume_mod
from pnbench.sweeps.bench import connections_for, open_bench
from pnbench.sweeps.check import step_seconds
from pnbench.sweeps.events import ErrorEvent, EventBus, RunFinished, RunStarted, WarningEvent
from pnbench.sweeps.fitfeed import FitWorker
from pnbench.sweeps.plan import Plan, parse_plan
from pnbench.sweeps.record import RunFolder, iso, plan_path, read_run, utc_now
from pnbench.sweeps.runfit import run_extras
from pnbench.sweeps.runner import Outcome, Runner
from pnbench.sweeps.statednoise import run_noise
from pnbench.sweeps.statuses import RunStatus, run_status


class Launch:
    def __init__(self, plan: Plan, *, out_dir: str | Path | None = None,
                 run_dir: str | Path | None = None, force_identity: bool = False,
                 listeners=(), fit: bool = True, guardian: bool = True,
                 write_report: ending.ReportWriter | None = None) -> None:
        # A plan that names no instrument for a role it needs is bad input: say so
        # before a run folder exists (nothing is connected here).
        connections_for(plan, plan.roles_needed)
        self.plan = plan
        sim = plan.simulated  # the simulated bench is a backend of the plan's instruments
        self.simulate = sim.device if sim is not None else None
        self.time_scale = sim.time_scale if sim is not None else 1.0
        self.out_dir = Path(out_dir) if out_dir is not None else Path("runs")
        self.resume_dir = Path(run_dir) if run_dir is not None else None
        self.force_identity = force_identity
        self.listeners = list(listeners)
        self.fit_enabled = fit
        self.use_guardian = guardian
        self.write_report = write_report
        self._ending = False  # the end work of a resumed, fully measured run
        self.run_dir: Path | None = self.resume_dir
        self.outcome: Outcome | None = None
        self.error: BaseException | None = None
        self.runner: Runner | None = None
        self.bench = None
        self._thread: threading.Thread | None = None
        self._pending: list = []  # control calls made before the runner exists

    # -- constructors -------------------------------------------------------------------
    @classmethod
    def new(cls, plan: Plan, *, out_dir: str | Path = "runs", listeners=(),
            fit: bool = True, write_report: ending.ReportWriter | None = None) -> Launch:
        return cls(plan, out_dir=out_dir, listeners=listeners, fit=fit,
                   write_report=write_report)

    @classmethod
    def resume_from(cls, run_dir: str | Path, *, plan: Plan | None = None,
                    force_identity: bool = False, listeners=(), fit: bool = True,
                    write_report: ending.ReportWriter | None = None) -> Launch:
        """Prepare to continue the run in ``run_dir`` with its own plan.toml, on the
        instruments it recorded (a simulated run on the same simulated bench), or with
        ``plan`` (the same plan, perhaps put on another bench by the caller)."""
        run_dir = Path(run_dir)
        run = read_run(run_dir)
        if plan is None:
            plan = plan_of_run(run_dir, run)
            backend = simulated_backend(run)
            if backend is not None and plan.simulated is None:  # a --simulate rehearsal
                plan = plan.on_simulated_bench(backend)
            # a plan that names the simulated bench itself keeps its instruments as they
            # are, with their dialects, ratings and stated noise
        return cls(plan, run_dir=run_dir, force_identity=force_identity,
                   listeners=listeners, fit=fit, write_report=write_report)

    # -- control ------------------------------------------------------------------------
    def pause(self) -> None:
        self._control("pause")

    def resume(self) -> None:
        self._control("resume")

    def abort(self, reason: str = "stopped by the operator",
              status: str = RunStatus.ABORTED) -> None:
        self._control("abort", reason, status)

    def answer(self, ok: bool) -> None:
        """Answer the runner's operator_prompt (a fixture state set and confirmed)."""
        self._control("answer", ok)

    def _control(self, name: str, *args) -> None:
        runner = self.runner
        if runner is None:
            self._pending.append((name, args))
        else:
            getattr(runner, name)(*args)

    @property
    def in_shutdown(self) -> bool:
        return self._ending or (self.runner is not None and self.runner.in_shutdown)

    # -- running ------------------------------------------------------------------------
    def start(self) -> None:
        """Run on a background thread; `wait()` for it, `outcome`/`error` tell the end."""
        self._thread = threading.Thread(target=self._thread_main, name="pnbench-run",
                                        daemon=True)
        self._thread.start()

    def _thread_main(self) -> None:
        try:
            self.run()
        except BaseException as exc:  # noqa: BLE001 - kept for the caller to show
            self.error = exc

    def is_alive(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def wait(self, timeout_s: float | None = None) -> bool:
        if self._thread is None:
            return True
        self._thread.join(timeout_s)
        return not self._thread.is_alive()

    def run(self) -> Outcome:
        """Connect, run every remaining step, switch off, write the record. Blocking."""
        folder, state = self._open_folder()
        self.run_dir = folder.path
        started = state.started_epoch_s if state is not None else None
        bus = EventBus(sink=folder.append_event,
                       start_seq=state.last_seq if state is not None else 0,
                       started_epoch_s=started)
        for listener in self.listeners:
            bus.add_listener(listener)
        try:
            if state is not None and state.end_work_only:
                return self._finish_only(folder, bus, state)
            return self._run_on_bench(folder, bus, state)
        finally:
            folder.close()

    def _finish_only(self, folder: RunFolder, bus: EventBus, state) -> Outcome:
        """Every point is on disk: do the end work the previous process did not finish
        (final fit, model, card, report, status), without the instruments."""
        self._ending = True
        finishing = state.finishing or {}
        status = run_status(finishing.get("status"), RunStatus.COMPLETED)
        reason = str(finishing.get("reason") or "all steps finished")
        planned = self.plan.total_points
        done = sum(state.done.values())
        bus.emit(RunStarted, None, resumed=True, resume_count=folder.run.get(
            "resume_count", 0), planned=planned, done=done,
            steps=[s.name for s in self.plan.steps], run_dir=str(folder.path),
            progress={n: {"done": state.done[n], "status": state.statuses[n]}
                      for n in state.done})
        bus.emit(WarningEvent, None, message="every point was already measured: finishing "
                 "the end work (fit, model, card, report) without the instruments")
        folder.log("resume: every step finished; end work only, instruments not used")
        confirmed = bool(state.outputs_off_confirmed)
        ending.begin_end_work(folder, status, reason)
        fit = self._fit_worker(folder, bus, state)
        ending.finish_run(folder, bus, status=status, reason=reason,
                          outputs_off_confirmed=confirmed, fit=fit,
                          write_report=self.write_report, done=done, planned=planned)
        self.outcome = Outcome(status, reason, confirmed, str(folder.path))
        return self.outcome

    def _open_folder(self):
        if self.resume_dir is None:
            try:
                folder = RunFolder.create(self.out_dir, self.plan.text, self._run_doc(),
                                          self._metadata(),
                                          temperature_column=self.plan.temperature is not None)
            except OSError as exc:
                raise BadInput(f"cannot create a run folder in {self.out_dir} "
                               f"({exc.strerror or exc}); give another output folder "
                               "(--out)") from None
            folder.log(f"plan {self.plan.path}; device {self.plan.device.name}; "
                       f"simulated: {self.simulate or 'no'}")
            return folder, None
        folder = RunFolder.reopen(self.resume_dir)
        try:
            state = resume_mod.load_state(self.resume_dir, self.plan)
        except BaseException:
            folder.close()
            raise
        run = folder.run
        history = list(run.get("resumes") or [])
        history.append({"at": iso(utc_now()), "previous_status": state.previous_status,
                        "points_on_disk": sum(state.done.values()),
                        "guardian": state.guardian})
        folder.update_run(resume_count=int(run.get("resume_count", 0)) + 1, resumes=history,
                          ended=None)
        folder.log(f"resume #{len(history)}: previous status {state.previous_status!r}, "
                   f"{sum(state.done.values())} points on disk")
        return folder, state

    def _run_on_bench(self, folder: RunFolder, bus: EventBus, state) -> Outcome:
        expected, prime = {}, None
        if state is not None:
            expected = {role: (info or {}).get("identity", "")
                        for role, info in (folder.run.get("instruments") or {}).items()}
            prime = resume_mod.last_smu_level(self.plan, state)
        guardian = None
        try:
            with open_bench(self.plan, expected=expected, force_identity=self.force_identity,
                            prime=prime) as bench:
                self.bench = bench
                folder.update_run(instruments=bench.instruments, guardian=None)
                if self.simulate is None and self.use_guardian:
                    guardian = guardian_mod.start(folder.path)
                for change in bench.identity_changes:
                    bus.emit(WarningEvent, None, message=f"--force-identity: {change}")
                    folder.log(f"identity accepted by --force-identity: {change}")
                if state is not None and (state.previous_status == RunStatus.RUNNING
                                          or state.guardian):
                    bus.emit(WarningEvent, None, message="the previous process ended without "
                             "closing the run (killed, crashed or power lost); continuing "
                             "after the last recorded point")
                fit = self._fit_worker(folder, bus, state)
                self.runner = Runner(self.plan, folder, bench, bus, fit=fit,
                                     time_scale=bench.time_scale, resume_state=state,
                                     write_report=self.write_report,
                                     seconds_per_point=self._seconds_per_point())
                for name, args in self._pending:
                    getattr(self.runner, name)(*args)
                outcome = self.runner.run()
            if not all(bench.last_off.values()) and outcome.outputs_off_confirmed:
                folder.update_run(outputs_off_confirmed=False)
                outcome = Outcome(outcome.status, outcome.reason, False, outcome.run_dir)
            self.outcome = outcome
            return outcome
        except PnbenchError as exc:
            if self.runner is None:  # failed before the first point: record why
                self._record_failure(folder, bus, exc)
            raise
        finally:
            self.bench = None
            if guardian is not None:
                guardian_mod.release(guardian)

    def _record_failure(self, folder: RunFolder, bus: EventBus, exc: PnbenchError) -> None:
        status = RunStatus.FAILED
        # `connected` false: no instrument was ever reached, so nothing was switched on
        # (the viewers say that rather than "outputs off not confirmed")
        connected = self.bench is not None
        folder.update_run(status=status, reason=str(exc), ended=iso(utc_now()),
                          outputs_off_confirmed=False, connected=connected)
        bus.emit(ErrorEvent, None, message=str(exc))
        bus.emit(RunFinished, None, status=status, reason=str(exc),
                 outputs_off_confirmed=False, connected=connected)
        folder.log(f"failed before the first point: {exc}")

    def _fit_worker(self, folder: RunFolder, bus: EventBus, state) -> FitWorker:
        def write_model(model) -> None:
            name = card_name(self.plan.device.name)
            folder.write_model(model.to_json_dict(), model.card_text(name), name)

        worker = FitWorker(self.plan.steps, bus, temperature_K=self.plan.device.temperature_K,
                           write_model=write_model,
                           enabled=self.fit_enabled, area_m2=self.plan.device.area_m2,
                           extras=run_extras(self.plan.device.name, folder.run))
        if state is not None:  # by column: a long run's points never become objects
            for step in self.plan.steps:
                if step.name in state.columns:
                    worker.preload_columns(step, state.columns[step.name].fit_columns(),
                                           live=not state.end_work_only)
        return worker

    def _seconds_per_point(self) -> dict[str, float]:
        """The plan's own estimate of each step's seconds per point (`check`), at the
        simulated bench's time scale: the progress model's ETA until rates are measured."""
        scale = self.time_scale if self.simulate is not None else 1.0
        return {s.name: step_seconds(s, self.plan.line_frequency_Hz) * scale
                / max(s.planned, 1) for s in self.plan.steps}

    def _run_doc(self) -> dict:
        plan = self.plan
        return {
            "status": RunStatus.RUNNING, "reason": "", "device": plan.device.to_json_dict(),
            "instruments": {}, "software_version": version(), "ended": None,
            "limits": plan.limits.to_json_dict(),
            "steps": [{"name": s.name, "kind": s.kind, "planned": s.planned, "done": 0,
                       "status": "pending", "ended_by": None} for s in plan.steps],
            "outputs_off_confirmed": False, "simulated": self.simulate,
            "stated_noise": run_noise(plan),
            "time_scale": self.time_scale if self.simulate else None,
            "plan_source": str(Path(plan.path).resolve()) if plan.path else None,
            "resume_count": 0,
        }

    def _metadata(self) -> dict:
        d = self.plan.device
        meta = {"device": d.name, "temperature_K": d.temperature_K}
        if d.area_m2 is not None:
            meta["area_m2"] = d.area_m2
        if d.material:
            meta["material"] = d.material
        return meta


def plan_of_run(run_dir: Path, run: dict | None = None) -> Plan:
    """The plan a run folder was started with (its plan.toml), validated again; relative
    dialect paths are read from where the original plan was."""
    run = run if run is not None else read_run(run_dir)
    file = plan_path(run_dir)
    try:
        text = file.read_bytes()
    except OSError as exc:
        raise DataFileError(f"{file}: cannot read the plan of this run ({exc})") from None
    source = run.get("plan_source")
    base = Path(source).parent if isinstance(source, str) else Path(run_dir)
    return parse_plan(text, str(file), base_dir=base)


def simulated_backend(run: dict, time_scale: float | None = None) -> str | None:
    """The simulated bench a recorded run ran on (its backend string), with
    ``time_scale`` instead of the recorded one when given; None for real instruments."""
    from pnbench.drivers.sim.backend import backend_for, is_sim_backend, parse

    device = run.get("simulated")
    if not device:
        return None
    recorded = ((run.get("instruments") or {}).get("smu") or {}).get("backend") or (
        ((run.get("instruments") or {}).get("lcr") or {}).get("backend"))
    if is_sim_backend(recorded):
        spec = parse(recorded)
    else:  # a run folder from before the simulated bench was a backend
        spec = parse(backend_for(str(device), float(run.get("time_scale") or 1.0)))
    scale = spec.time_scale if time_scale is None else float(time_scale)
    return backend_for(spec.device, scale, spec.watchdog)
