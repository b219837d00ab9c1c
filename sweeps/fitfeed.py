"""Feeding the incremental fitters off the acquisition path.

The runner hands each point to `FitWorker.submit`, which appends it to the step's typed
columns (`fitmodel.Columns`, about a microsecond; no object is kept or queued), and goes
on to the next bias point. The worker thread wakes every `snapshot_interval_s` (at once
for a step end), adds the rows appended meanwhile to one `IncrementalFitter` per step as
one batch (far cheaper per point than one by one, and it leaves the interpreter to the
acquisition thread in between), takes a snapshot (also when the step ends: that event says
``final``), emits a ``fit`` event (with the reverse fit's ``leakage`` and ``ibv_A``),
flags a step whose target parameters (`settle_targets`) have settled to the step's
``end_when_settled``, and writes model.json and the model card through the run folder.

The columns are all the worker keeps of a point (8 bytes a value). After each step it
writes a provisional model assembled from the live fits' snapshots (no new fitting, so a
step end costs the same in a run's first hour as in its last); the run's model is fitted
once, from those columns, when the run ends (`finish`). Nothing is read back from points.csv.

A fit event publishes estimates only (`estimates`): a value its fitter's bounds chose, or
one with a relative standard error beyond MAX_REL_SIGMA, goes under ``not_determined``
with the reason instead of ``parameters``, so the app's table and the headless lines
never show it. A live C-V or admittance fit holds what earlier steps of the run
extracted (`fitmodel.live_holds`: IS, N, RS, RSH from I-V, and for admittance CJO, VJ, M,
CFIX from C-V, with their covariance) and then fits the network the meter sees at the
step's test level, as the run's final fit does.

Fitting never stops a run: a fitter that raises is reported once as a ``warning`` event
and that step goes on without live estimates.
"""

from __future__ import annotations

import gc
import math
import queue
import sys
import threading
import time
from collections.abc import Callable

from pnbench.sweeps import fitcorrection, fitmodel, thermalfit
from pnbench.sweeps.events import EventBus, finite
from pnbench.sweeps.planstep import Step
from pnbench.sweeps.record import Point

_STOP = object()
#: The largest relative standard error of a value a fit event publishes as an estimate.
MAX_REL_SIGMA = 1.0
#: What a step of each kind is for: a step with ``end_when_settled`` ends when these
#: have settled (``OPTIONAL_TARGETS`` count only where the fit determines them).
SETTLE_TARGETS = {"iv_forward": ("IS", "N", "RS"), "cv": ("CJO", "VJ", "M"),
                  "admittance": ("TT",), "iv_reverse": ()}
OPTIONAL_TARGETS = frozenset({"RS"})
#: How often the interpreter hands its lock from a running thread to a waiting one while
#: the worker runs (Python's default is 5 ms). Each point's acquisition thread waits on
#: instrument replies a few times, and each time it wakes it waits for the lock: behind
#: a fit in full flight that was up to 5 ms a wait, some tens of milliseconds a point
#: (the convoy effect of one busy thread among waiting ones).
SWITCH_INTERVAL_S = 0.001


def estimates(result) -> tuple[list[str], dict[str, str]]:
    """The parameters of a fit that a ``fit`` event may publish as estimates, and the
    others with the reason (a value the fitter's bounds chose, or one whose relative
    standard error exceeds MAX_REL_SIGMA, is no estimate: the app and the headless
    printer show whatever the event carries). A failed fit publishes none; a successful
    one may state a value without an uncertainty (BV read between two points)."""
    shown, dropped = [], {}
    edge = set(result.extras.get("at_bound", ()))
    for n in result.names:
        value, sigma = result.values[n], result.sigmas.get(n, math.inf)
        if not result.success:
            dropped[n] = "the fit failed"
        elif n in edge:
            dropped[n] = "at the edge of the allowed range"
        elif not math.isfinite(value):
            dropped[n] = "no finite value"
        elif math.isfinite(sigma) and sigma > MAX_REL_SIGMA * abs(value):
            dropped[n] = f"uncertainty {sigma / abs(value):.0%} of the value"
        else:
            shown.append(n)
    return shown, dropped


def settle_targets(step_kind: str, shown: list[str]) -> tuple[str, ...]:
    """The parameters whose uncertainty decides that a step of this kind has settled
    (SETTLE_TARGETS; RS only where the fit determines it). An optional parameter the
    step is not for, such as a shunt just past the 3-sigma mark, never holds a step up.
    A reverse step has none: its figures (BV, leakage at the deepest bias) are only
    known at its end, so it runs to its stop or its breakdown guard."""
    return tuple(n for n in SETTLE_TARGETS.get(step_kind, ())
                 if n not in OPTIONAL_TARGETS or n in shown)


def figures(result) -> dict:
    """Figures of a fit that are not model-card parameters, for its event: the reverse
    fit's leakage at its reference voltage and the current at which BV is stated."""
    out: dict = {}
    extras = result.extras
    if "IBV_A" in extras:
        out["ibv_A"] = finite(extras["IBV_A"])
    if "leakage_A" in extras:
        sigma = extras.get("leakage_sigma_A")
        out["leakage"] = {"voltage_V": finite(extras["leakage_voltage_V"]),
                          "current_A": finite(extras["leakage_A"]),
                          "sigma_A": None if sigma is None else finite(sigma)}
    lack = misfit_figure(result)
    if lack is not None:
        out["misfit"] = lack
    return out


def misfit_figure(result) -> dict | None:
    """The lack-of-fit verdict of a fit for its event (None before the checks ran):
    ``misfit`` (bool), ``basis`` ("stated noise": chi-square and the runs test, or
    "runs test": the noise is estimated, so chi-square says nothing), ``runs_z`` and
    ``reduced_chi2`` where they apply."""
    lack = result.extras.get("lack_of_fit")
    if not isinstance(lack, dict):
        return None
    noises = [v for k, v in result.extras.items() if k.startswith("noise")
              and isinstance(v, dict)]
    stated = bool(noises) and not any(v.get("estimated", True) for v in noises)
    out = {"misfit": bool(lack.get("misfit")),
           "basis": "stated noise" if stated else "runs test"}
    if lack.get("runs_z") is not None:
        out["runs_z"] = finite(lack["runs_z"])
    if stated:
        out["reduced_chi2"] = finite(result.reduced_chi2)
    return out


class FitWorker:
    """One thread that owns every fitter of a run."""

    def __init__(self, steps: tuple[Step, ...], bus: EventBus, *, temperature_K: float,
                 write_model: Callable[[object], None] | None = None,
                 snapshot_interval_s: float = 0.25, enabled: bool = True,
                 area_m2: float | None = None, extras: dict | None = None) -> None:
        self.steps = {s.name: s for s in steps}
        self.bus = bus
        self.temperature_K = temperature_K
        self.area_m2 = area_m2
        self.extras = extras or {}
        self.write_model = write_model
        self.interval = snapshot_interval_s
        self.enabled = enabled and fitmodel.available()
        # a step's start and end, and the stop: what orders the steps' fits
        self._queue: queue.SimpleQueue = queue.SimpleQueue()
        self._fitters: dict[str, object] = {}
        self._broken: set[str] = set()
        over_t = thermalfit.over_temperature(self.steps)
        self._columns: dict[str, fitmodel.Columns] = {
            s.name: fitmodel.Columns(s.kind, temperature=over_t) for s in steps}
        self._fed: dict[str, int] = {s.name: 0 for s in steps}  # points given to the fitter
        self._current: str | None = None  # the step the acquisition thread submits to
        self._open: list[str] = []  # steps started and not ended (the worker's view)
        self._dirty: set[str] = set()
        self._settled: set[str] = set()
        self.latest: dict[str, object] = {}  # step -> FitResult
        self._thread: threading.Thread | None = None
        self._switch_s = sys.getswitchinterval()
        self._last_snapshot = 0.0

    # -- called from the acquisition thread ------------------------------------------
    def start(self) -> None:
        """Start the worker thread, after importing what it will use (`fitmodel.warm_up`,
        on this thread: before the run's first point, not beside the acquisition), with
        the interpreter switching threads every SWITCH_INTERVAL_S and the objects that
        exist now left out of the cyclic collector's passes, until `finish`."""
        if self.enabled and self._thread is None:
            fitmodel.warm_up(s.kind for s in self.steps.values())
            self._switch_s = sys.getswitchinterval()
            sys.setswitchinterval(min(self._switch_s, SWITCH_INTERVAL_S))
            # what exists now (modules, the plan, the bench) outlives the run: the cyclic
            # collector's full passes skip it until `finish` (one such pass over it held
            # the lock for ~20 ms on whichever thread set it off)
            gc.freeze()
            self._thread = threading.Thread(target=self._loop, name="pnbench-fit",
                                            daemon=True)
            self._thread.start()

    def submit(self, step: Step, point: Point) -> None:
        """Keep the point in the step's columns (about a microsecond; no object is kept
        and nothing is queued: the worker takes the new rows when it wakes)."""
        if self.enabled:
            self._columns[step.name].append(point)
            if step.name != self._current:  # once a step: its rows are fed from now on
                self._current = step.name
                self._queue.put((step.name, "start"))

    def step_done(self, step_name: str) -> None:
        if self.enabled:
            self._current = None
            self._queue.put((step_name, None))

    def is_settled(self, step_name: str) -> bool:
        return step_name in self._settled

    def preload(self, step: Step, points: list[Point]) -> None:
        """Feed points already on disk (a resumed run) synchronously, then snapshot."""
        if not self.enabled or not points:
            return
        self._columns[step.name].extend(points)
        self._feed(step.name)
        self._snapshot(step.name)

    def preload_columns(self, step: Step, col: dict, live: bool = True) -> None:
        """Points already on disk, given by column (`PointColumns.fit_columns`): kept for
        the run's final model, and with ``live`` fed to the step's fitter and
        snapshotted (a resumed run goes on with it; end work alone needs no live fit)."""
        if not self.enabled or not len(col["voltage_V"]):
            return
        self._columns[step.name].extend_columns(col)
        if not live:  # nothing for a live fitter: the run's model is fitted at the end
            self._fed[step.name] = len(self._columns[step.name])
            return
        self._feed(step.name)
        self._snapshot(step.name)

    def finish(self, timeout_s: float = 60.0) -> None:
        """Feed what is left, take the last snapshots and write the final model."""
        if self._thread is not None:
            self._queue.put(_STOP)
            self._thread.join(timeout_s)
            self._thread = None
            sys.setswitchinterval(self._switch_s)
            gc.unfreeze()
        elif self.enabled:
            self._write_model(final=True)

    # -- the worker thread ----------------------------------------------------------------
    def _loop(self) -> None:
        """Wake every `interval` (at once for a step end or the stop): feed the rows that
        came meanwhile to their fitters as one batch each (far cheaper per point than one
        by one; the acquisition thread keeps the interpreter in between), snapshot."""
        while True:
            try:
                batch = [self._queue.get(timeout=self.interval)]
            except queue.Empty:
                batch = []
            while True:
                try:
                    batch.append(self._queue.get_nowait())
                except queue.Empty:
                    break
            if self._handle(batch):
                return
            if time.monotonic() - self._last_snapshot >= self.interval:
                self._snapshot_dirty()

    def _handle(self, batch: list) -> bool:
        """Act on a step's start ``(step, "start")``, its end ``(step, None)`` and the stop
        mark in order, then feed the open steps' new rows. A step is fed only once its
        start was read, so a step's fitter never begins before the previous step's last
        snapshot (an admittance fit holds what the earlier steps found). True when the
        stop mark was met."""
        for k, item in enumerate(batch):
            if item is _STOP:
                for name in self._open:
                    self._feed(name)
                self._snapshot_dirty()
                self._write_model(final=True)
                return True
            name, what = item
            if what == "start":
                self._open.append(name)
                continue
            self._feed(name)
            if name in self._open:
                self._open.remove(name)
            # when the run's end follows at once, its model (fitted from every point)
            # comes next: the step's last snapshot needs no refit, no provisional model
            ending = batch[k + 1:k + 2] == [_STOP]
            self._snapshot(name, final=True, refit=not ending)
            self._fitters.pop(name, None)  # done: its result stays, its copy goes
            if not ending:
                self._write_model(final=False)
        for name in self._open:
            self._feed(name)
        return False

    def _feed(self, name: str) -> None:
        """Give a step's fitter the rows it has not had yet."""
        columns = self._columns[name]
        start, n = self._fed[name], len(columns)
        if n <= start or name in self._broken:
            return
        step = self.steps[name]
        try:
            fitter = self._fitters.get(name)
            if fitter is None:
                held, held_cov = fitmodel.live_holds(step.kind, self.latest.values())
                t = step.set_point_K if step.set_point_K is not None else self.temperature_K
                fitter = fitmodel.new_fitter(step.kind, t, held,
                                             fitmodel.breakdown_current_A(
                                                 self.steps.values()),
                                             ac_level_V=getattr(step, "ac_level_V", None),
                                             held_covariance=held_cov,
                                             stated_noise=self.extras.get("stated_noise"),
                                             step=step)
                self._fitters[name] = fitter
            rows = columns.view(start)
            self._fed[name] = start + len(rows["voltage_V"])
            fitmodel.add_columns(fitter, step.kind, fitcorrection.compensated(
                step, rows, self.extras.get("lcr_correction")))
        except Exception as exc:  # noqa: BLE001 - fitting must never stop a run
            self._break(name, exc)
            return
        self._dirty.add(name)

    def _snapshot_dirty(self) -> None:
        for name in list(self._dirty):
            self._snapshot(name)
        self._last_snapshot = time.monotonic()

    def _snapshot(self, name: str, final: bool = False, refit: bool = True) -> None:
        self._dirty.discard(name)
        fitter = self._fitters.get(name)
        if fitter is None or name in self._broken:
            return
        step = self.steps[name]
        try:
            # the step's last word: optional parameters decided afresh; when the run's
            # model follows at once, only where the data call for it, except for a C-V
            # sweep, whose TT, RFIX and CFIX can stand in for each other until its last
            # (highest-bias) points are in
            if final and (refit or step.kind in ("cv", "admittance")):
                fitter.refit()
            elif final:
                fitter.settle()
            result = fitter.snapshot()
        except Exception as exc:  # noqa: BLE001
            self._break(name, exc)
            return
        self.latest[name] = result
        target = step.end_when_settled
        settled = result.settled(target) if target else result.settled(0.01)
        shown, not_determined = estimates(result)
        aims = settle_targets(step.kind, shown)
        if (target and result.success and aims and all(result.settled(target, aims).values())
                and len(self._columns[name]) >= step.min_points):
            self._settled.add(name)
        self.bus.emit("fit", name, fit_kind=result.kind, success=bool(result.success),
                      message=str(result.message), n_points=int(result.n_points),
                      parameters={
                          n: {"value": result.values[n], "sigma": finite(result.sigmas[n]),
                              "settled": bool(settled.get(n, False))}
                          for n in shown},
                      not_determined=not_determined, final=final, **figures(result))

    def _write_model(self, final: bool) -> None:
        """model.json and the card: at the run's end fitted from every point (once),
        after a step assembled from the live snapshots (`fitmodel.model_of_snapshots`)."""
        if self.write_model is None:
            return
        try:
            # the run's end: the columns hand their memory over (nothing is appended any
            # more), and the fit lets each step's go once pooled
            columns = {name: c.take() for name, c in self._columns.items() if len(c)} \
                if final else {}
            if final and thermalfit.over_temperature(self.steps):
                model = thermalfit.model_over_temperature(
                    self.steps, columns, area_m2=self.area_m2, extras=self.extras,
                    ibv_A=fitmodel.breakdown_current_A(self.steps.values()))
            elif final:
                model = fitmodel.model_of_columns(self.steps, columns, self.temperature_K,
                                                  area_m2=self.area_m2, extras=self.extras,
                                                  consume=True)
            else:
                model = fitmodel.model_of_snapshots(self.steps, self.latest,
                                                    self.temperature_K,
                                                    area_m2=self.area_m2, extras=self.extras)
        except Exception as exc:  # noqa: BLE001
            self.bus.emit("warning", None, message=f"model not written: {exc}")
            return
        if model is not None:
            self.write_model(model)

    def _break(self, name: str, exc: BaseException) -> None:
        self._broken.add(name)
        self.bus.emit("warning", name, message=f"live fit stopped for this step: "
                      f"{type(exc).__name__}: {exc}")
