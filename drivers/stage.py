"""The third instrument role: a thermal stage (temperature-controlled chuck, oven, cryostat).

Like the SMU and the LCR meter it works on a session and the ``[stage]`` table of a
dialect; pnbench speaks kelvin, the stage the dialect's ``temperature_unit`` (K or °C) and
its ramp rate in that unit per minute (a kelvin and a degree Celsius are the same step).
The stage has limits of its own (lowest and highest set point, fastest ramp) that every
set point is checked against before it is sent. There is no "off" that is safe for a
stage: heater off lets a hot chuck cool or a cold one warm unattended, so the way out of
a run is ``standby``, a set point the plan names (25 °C by default), regulation left on.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from pnbench.drivers import scpi
from pnbench.drivers.dialect import Dialect, StageCommands
from pnbench.drivers.exchange import flag as _flag
from pnbench.drivers.rolebase import Role
from pnbench.drivers.session import Session
from pnbench.errors import BadInput, InstrumentError, SafetyStop

ZERO_C_K = 273.15
#: The standby temperature when a plan names none: 25 °C.
DEFAULT_STANDBY_K = 298.15
#: A set point read back within this many kelvin counts as accepted.
SET_POINT_TOLERANCE_K = 0.01


@dataclass(frozen=True)
class StageLimits:
    """The stage's own limits: set points within [low_K, high_K], ramps up to
    max_ramp_K_per_min (inf: no limit of its own)."""

    low_K: float
    high_K: float
    max_ramp_K_per_min: float = math.inf

    def __post_init__(self) -> None:
        if not (0 < self.low_K < self.high_K and math.isfinite(self.high_K)):
            raise BadInput(f"stage limits: need 0 K < lowest ({self.low_K!r} K) < highest "
                           f"({self.high_K!r} K)")
        if not self.max_ramp_K_per_min > 0:
            raise BadInput(f"stage limits: the fastest ramp must be above 0 K/min, found "
                           f"{self.max_ramp_K_per_min!r}")


@dataclass(frozen=True)
class StageReading:
    set_point_K: float
    temperature_K: float
    regulating: bool | None  # None: the dialect has no control_query


class ThermalStage(Role):
    """A thermal stage: set point, measured temperature, ramp rate, regulation, standby."""

    role = "stage"
    commands: StageCommands

    def __init__(self, session: Session, dialect: Dialect | None = None,
                 limits: StageLimits | None = None) -> None:
        super().__init__(session, dialect)
        self.limits = limits or StageLimits(3.0, 1273.15)
        self.set_point_K: float | None = None
        self.ramp_K_per_min: float | None = None
        self.standby_K = DEFAULT_STANDBY_K  # where safe_off sends the stage

    # --- units --------------------------------------------------------------------------
    def _to_stage(self, t_K: float) -> float:
        return t_K - ZERO_C_K if self.commands.temperature_unit == "C" else t_K

    def _from_stage(self, value: float) -> float:
        return value + ZERO_C_K if self.commands.temperature_unit == "C" else value

    def _check(self, t_K: float, what: str) -> float:
        t_K = float(t_K)
        lim = self.limits
        if not math.isfinite(t_K):
            raise BadInput(f"stage {what} must be a finite temperature, found {t_K!r}")
        if not lim.low_K <= t_K <= lim.high_K:
            raise SafetyStop(f"stage {what} {t_K:.6g} K is outside the stage's limits "
                             f"{lim.low_K:.6g} K to {lim.high_K:.6g} K; nothing was sent")
        return t_K

    # --- commands -----------------------------------------------------------------------
    def configure(self, ramp_K_per_min: float | None = None) -> None:
        """Set the ramp rate (None or inf: as fast as the stage goes) within the stage's
        limit; any error the stage queues is raised with its own message."""
        c = self.commands
        rate = math.inf if ramp_K_per_min is None else float(ramp_K_per_min)
        if not rate > 0:
            raise BadInput(f"stage ramp rate must be above 0 K/min, found {rate!r}")
        if rate > self.limits.max_ramp_K_per_min:
            raise SafetyStop(f"stage ramp rate {rate:g} K/min is above the stage's limit "
                             f"{self.limits.max_ramp_K_per_min:g} K/min")
        units = []
        if math.isfinite(rate):
            if not c.ramp_rate:
                raise BadInput(f"dialect {self.dialect.source}: [stage] ramp_rate is empty, "
                               f"so a ramp rate of {rate:g} K/min cannot be set")
            units.append(self.dialect.fill(c.ramp_rate, value=rate))
        self.ramp_K_per_min = rate
        if units:
            message = self.dialect.join(units)
            self.session.write(message)
            self.session.drain_errors(context=f"configuring the stage with {message!r}")

    def set_point(self, t_K: float) -> None:
        """Send a set point (checked against the limits first) and regulation on."""
        t_K = self._check(t_K, "set point")
        c = self.commands
        units = [self.dialect.fill(c.set_point, value=self._to_stage(t_K))]
        if c.control:
            units.append(self.dialect.fill(c.control, state=True))
        message = self.dialect.join(units)
        self.session.write(message)
        self.set_point_K = t_K
        self.session.drain_errors(context=f"setting the stage to {t_K:.6g} K with "
                                          f"{message!r}")

    def read(self) -> StageReading:
        """Set point, measured temperature and regulation: one message, one reply."""
        c = self.commands
        queries = [c.set_point_query, c.measure] + ([c.control_query] if c.control_query
                                                     else [])
        message = self.dialect.join(queries)
        units = self.session.ask(message)
        try:
            sp, measured = (scpi.parse_number(u) for u in units[:2])
        except ValueError as exc:
            raise InstrumentError(f"{self.session.resource_name}: malformed stage reading "
                                  f"in reply to {message!r}: {exc}") from None
        if not (math.isfinite(sp) and math.isfinite(measured)):
            raise InstrumentError(f"{self.session.resource_name}: the stage answered "
                                  f"{units[:2]!r} to {message!r}: not a temperature (sensor "
                                  f"fault or overflow marker)")
        regulating = _flag(self.session, units[2], message) if c.control_query else None
        return StageReading(self._from_stage(sp), self._from_stage(measured), regulating)

    def temperature_K(self) -> float:
        """The temperature the stage measures now [K]."""
        return self.read().temperature_K

    def standby(self, t_K: float = DEFAULT_STANDBY_K) -> list[str]:
        """Set point to the standby temperature, regulation on, confirmed by asking.

        Returns the problems met; raises InstrumentError only when the standby set point
        cannot be confirmed. A standby outside the stage's limits is refused (SafetyStop)
        before anything is sent.
        """
        t_K = self._check(t_K, "standby temperature")
        problems: list[str] = []
        try:
            self.set_point(t_K)
        except InstrumentError as exc:
            problems.append(f"standby set point: {exc}")
        try:
            reading = self.read()
        except Exception as exc:  # noqa: BLE001 - report and fail below
            raise InstrumentError(f"{self.session.resource_name}: the stage's standby set "
                                  f"point {t_K:.6g} K could not be confirmed ({exc}); CHECK "
                                  "THE STAGE" + ("" if not problems else ": "
                                                 + "; ".join(problems))) from None
        if abs(reading.set_point_K - t_K) > SET_POINT_TOLERANCE_K:
            raise InstrumentError(f"{self.session.resource_name}: the stage reports set "
                                  f"point {reading.set_point_K:.6g} K after standby "
                                  f"{t_K:.6g} K was sent; CHECK THE STAGE")
        if reading.regulating is False:
            problems.append("the stage reports regulation off at standby")
        return problems

    def safe_off(self) -> list[str]:
        """The stage's part of every way out: standby (see `standby`). Idempotent."""
        return self.standby(self.standby_K)
