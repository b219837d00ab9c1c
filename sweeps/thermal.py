"""Bringing the stage to a set point and keeping an eye on it while the steps run.

`settle` sets the point, then reads the stage every ``poll_s`` until every reading has
stayed within ``stable_within_K`` of the set point for ``stable_for_s``, then soaks for
``soak_s`` (a reading outside the band during the soak starts the wait again). It tells
what happens through ``emit(kind, data)`` — ``stage_ramping``, ``stage_stable``,
``stage_drifting`` — and raises InstrumentError (exit code 3) when the stage has not
reached and held the set point within ``timeout_s``: the caller's way out then turns the
sources off and sends the stage to standby. ``should_stop()`` is asked at every poll, so
an operator's stop or a signal ends the wait at once.

`Watch` follows the stage during the steps: at most one reading per ``poll_s``, and a
``stage_drifting`` warning once per excursion beyond the band. The temperature a point
records is the mean of the stage's last readings over one stability window
(``stable_for_s``), the soak's and then the step's: it averages the sensor's noise down
and follows the stage as it settles further; after an excursion it starts again from the
readings that follow it.

Time comes from a clock with ``now()`` and ``sleep(s)``: `WallClock` for real stages, the
simulated bench's SimClock (drivers/sim/stage.py) in-process, so ``--time-scale 0`` runs
a soak of minutes at once.
"""

from __future__ import annotations

import collections
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

from pnbench.drivers.stage import ThermalStage
from pnbench.errors import InstrumentError
from pnbench.sweeps.thermalplan import TemperaturePlan

Emit = Callable[[str, dict], None]


class Clock(Protocol):
    def now(self) -> float: ...

    def sleep(self, seconds: float) -> None: ...


def _window(plan: TemperaturePlan) -> int:
    """Readings in one stability window (at least one)."""
    return max(1, int(round(plan.stable_for_s / plan.poll_s)))


class WallClock:
    """Monotonic seconds; sleep wakes early when ``stop`` (a threading.Event) is set."""

    def __init__(self, stop=None) -> None:
        self.stop = stop

    def now(self) -> float:
        return time.monotonic()

    def sleep(self, seconds: float) -> None:
        if self.stop is not None:
            self.stop.wait(max(0.0, seconds))
        else:
            time.sleep(max(0.0, seconds))


@dataclass
class Settled:
    """How a set point was reached: the mean of the readings since it was stable (and
    how many), and the time it took."""

    set_point_K: float
    temperature_K: float
    waited_s: float
    readings: tuple[float, ...] = ()


def settle(stage: ThermalStage, clock: Clock, set_point_K: float, plan: TemperaturePlan,
           emit: Emit, should_stop: Callable[[], bool] = lambda: False) -> Settled | None:
    """Bring the stage to ``set_point_K`` and hold it (see the module notes); None when
    ``should_stop()`` said so first."""
    if plan.ramp_K_per_min is not None:
        stage.configure(plan.ramp_K_per_min)
    stage.set_point(set_point_K)
    start = clock.now()
    first = stage.read()
    emit("stage_ramping", {"set_point_K": set_point_K, "temperature_K": first.temperature_K,
                           "ramp_K_per_min": plan.ramp_K_per_min})
    band, last = plan.stable_within_K, first.temperature_K
    inside_since: float | None = None
    stable_at: float | None = None
    recent: collections.deque = collections.deque(maxlen=_window(plan))
    while True:
        if should_stop():
            return None
        now = clock.now()
        reading = stage.read() if now > start else first
        last = reading.temperature_K
        inside = abs(last - set_point_K) <= band
        if not inside:
            if stable_at is not None:
                emit("stage_drifting", {"set_point_K": set_point_K, "temperature_K": last,
                                        "during": "soak", "band_K": band})
            inside_since = stable_at = None
            recent.clear()
        elif inside_since is None:
            inside_since = now
        if stable_at is not None:
            recent.append(last)
        if stable_at is None and inside_since is not None and \
                now - inside_since >= plan.stable_for_s:
            stable_at = now
            emit("stage_stable", {"set_point_K": set_point_K, "temperature_K": last,
                                  "waited_s": now - start})
            recent.append(last)
        if stable_at is not None and now - stable_at >= plan.soak_s:
            return Settled(set_point_K, sum(recent) / len(recent), now - start,
                           tuple(recent))
        if now - start > plan.timeout_s:
            state = ("has not reached it" if inside_since is None else
                     f"has not held it for {plan.stable_for_s:g} s")
            raise InstrumentError(
                f"the stage did not reach and hold {set_point_K:g} K within "
                f"{plan.timeout_s:g} s (last reading {last:.4g} K; it {state} within "
                f"+-{band:g} K); check the stage, its limits and the plan's "
                "[temperature] timeout")
        clock.sleep(plan.poll_s)


class Watch:
    """The stage's temperature during the steps (see the module notes)."""

    def __init__(self, stage: ThermalStage, clock: Clock, set_point_K: float,
                 plan: TemperaturePlan, emit: Emit, settled: Settled | None = None) -> None:
        self.stage, self.clock, self.plan, self.emit = stage, clock, plan, emit
        self.set_point_K = set_point_K
        self._at = -float("inf") if settled is None else clock.now()
        self._recent = collections.deque(settled.readings if settled else (),
                                         maxlen=_window(plan))
        self.temperature_K = float("nan") if settled is None else settled.temperature_K
        self.drifting = False

    def reading(self, step: str | None = None) -> float:
        """The stage temperature for the next point [K] (read at most once per poll)."""
        now = self.clock.now()
        if now - self._at >= self.plan.poll_s or not self._recent:
            self._at = now
            last = self.stage.read().temperature_K
            outside = abs(last - self.set_point_K) > self.plan.stable_within_K
            if outside and not self.drifting:
                self.emit("stage_drifting", {"set_point_K": self.set_point_K,
                                             "temperature_K": last,
                                             "during": step or "step",
                                             "band_K": self.plan.stable_within_K})
            if outside or self.drifting:  # an excursion: the mean starts again
                self._recent.clear()
            self.drifting = outside
            self._recent.append(last)
            self.temperature_K = sum(self._recent) / len(self._recent)
        return self.temperature_K
