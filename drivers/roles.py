"""Instrument roles on a session and a dialect: a source-measure unit and an LCR meter.

Each bias point is one program message (set the level, read, ask for compliance) so the
per-point cost is one round trip. Every fault is an InstrumentError; settings that
cannot be used are DialectError or BadInput. `safe_off` is the way out of every run: it
ramps the source to zero, turns the output off and confirms it by asking.
What every role shares (session, identity, the confirmed switch-off) is in `rolebase`.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from pnbench.drivers.dialect import Dialect, LcrCommands, SmuCommands
from pnbench.drivers.exchange import LcrExchange, SmuExchange
from pnbench.drivers.exchange import flag as _flag
from pnbench.drivers.exchange import reading_fields as _fields  # noqa: F401 - lcrcorrection's
from pnbench.drivers.exchange import reading_values as _values
from pnbench.drivers.lcrcorrection import LcrCorrections
from pnbench.drivers.rolebase import Role
from pnbench.drivers.rolebase import finite as _finite
from pnbench.drivers.rolebase import positive as _positive  # also lcrcorrection's
from pnbench.drivers.session import Session
from pnbench.errors import BadInput, DialectError, InstrumentError
from pnbench.modeling import smallsignal

#: A reading within this fraction of the limit counts as compliance when the dialect
#: has no status query for it.
COMPLIANCE_FRACTION = 1e-3

#: Default rate of the ramp to zero, in volts per second at the terminals. At 10 V/s a
#: 1 nF device or fixture draws C dV/dt = 10 nA and a 1 uF one 10 uA, well inside any
#: compliance, and 40 V come down in 4 s; a step of a few hundred volts per second, as
#: an unpaced ramp gives, would push microamperes to milliamperes through a large
#: capacitance or a long cable. Common practice, no source; plans set their own rate.
RAMP_RATE_V_PER_S = 10.0
#: Dwell between the steps of the ramp, and the most steps one ramp takes.
RAMP_DWELL_S = 0.02
RAMP_MAX_STEPS = 500


@dataclass(frozen=True, slots=True)
class SmuReading:
    voltage_V: float
    current_A: float
    compliance: bool


@dataclass(frozen=True, slots=True)
class LcrReading:
    frequency_Hz: float
    bias_V: float
    admittance_S: complex
    primary: float
    secondary: float


class Smu(Role):
    """A source-measure unit: source voltage or current, limit the other, read both."""

    role = "smu"
    commands: SmuCommands

    def __init__(self, session: Session, dialect: Dialect | None = None) -> None:
        super().__init__(session, dialect)
        self.source: str | None = None
        self.limit: float | None = None
        self.level: float | None = None
        self.last_voltage_V: float | None = None  # terminal voltage of the last reading
        #: Ramp to zero at this rate (V/s); dwells are multiplied by ``ramp_time_scale``
        #: (the simulated bench's time scale: 0 skips them, as it skips all waiting).
        self.ramp_rate_V_per_s = RAMP_RATE_V_PER_S
        self.ramp_time_scale = 1.0
        self._output_on = False
        self._exchanges: dict[str, SmuExchange] = {}  # by source function

    def _set_command(self, level: float) -> str:
        template = self.commands.set_voltage if self.source == "voltage" else (
            self.commands.set_current)
        return self.dialect.fill(template, value=level)

    def configure(self, source: str = "voltage", limit: float = 1e-3, nplc: float = 1.0,
                  four_wire: bool = False, range_: float | None = None) -> None:
        """Set the source function, the limit on the other quantity, the measurement
        range of that quantity (None: autorange), integration time and sensing; the level
        goes to zero. Any error the instrument queues is raised with its own message."""
        if source not in ("voltage", "current"):
            raise BadInput(f"SMU source must be 'voltage' or 'current', found {source!r}")
        limit = _positive("SMU limit", limit)
        nplc = _positive("SMU integration time (NPLC)", nplc)
        if range_ is not None:
            range_ = _positive("SMU measurement range", range_)
        if self._output_on:
            self.safe_off()
        c = self.commands
        measured = "current" if source == "voltage" else "voltage"
        fill = self.dialect.fill
        units = [c.source_voltage_mode if source == "voltage" else c.source_current_mode,
                 fill(c.set_voltage if source == "voltage" else c.set_current, value=0.0),
                 fill(getattr(c, f"{measured}_limit"), value=limit)]
        auto = getattr(c, f"{measured}_autorange")
        fixed = getattr(c, f"{measured}_range")
        if range_ is None:
            if auto:
                units.append(fill(auto, state=True))
        else:
            if not fixed:
                raise DialectError(f"dialect {self.dialect.source}: [smu] {measured}_range is "
                                   f"empty, so a fixed {measured} range cannot be set")
            if auto:
                units.append(fill(auto, state=False))
            units.append(fill(fixed, value=range_))
        if c.integration_nplc:
            units.append(fill(c.integration_nplc, value=nplc))
        if c.remote_sense:
            units.append(fill(c.remote_sense, state=four_wire))
        elif four_wire:
            raise DialectError(f"dialect {self.dialect.source}: [smu] remote_sense is empty, "
                               "so 4-wire sensing cannot be selected")
        message = self.dialect.join(units)
        self.session.write(message)
        self.source, self.limit, self.level = source, limit, 0.0
        self.session.drain_errors(context=f"configuring the SMU with {message!r}")

    def _require_configured(self) -> None:
        if self.source is None:
            raise RuntimeError("Smu.configure() must come before sourcing")

    def set_level(self, level: float) -> None:
        """Set the source level (volts or amperes, as configured)."""
        self._require_configured()
        level = _finite("SMU level", level)
        self.level = level
        self.session.write(self._set_command(level))

    def _exchange(self) -> SmuExchange:
        """The set-and-read message of the configured source function (built once)."""
        ex = self._exchanges.get(self.source)
        if ex is None:
            ex = self._exchanges[self.source] = SmuExchange.of(self.dialect, self.source)
        return ex

    def apply_and_read(self, level: float) -> SmuReading:
        """Set the level, read, and ask for compliance: one message, one reply (the
        message from a template worked out once, the reply parsed once)."""
        self._require_configured()
        level = _finite("SMU level", level)
        ex = self._exchange()
        message = ex.message(level)
        self.level = level
        units = self.session.ask(message, ex.queries)
        values = _values(self.session, units[0], ex.fields, message)
        voltage, current = values[ex.voltage], values[ex.current]
        compliance = False
        if ex.compliance >= 0:
            flag = values[ex.compliance]
            compliance = math.isfinite(flag) and round(flag) != 0
        if ex.tripped:
            compliance = compliance or _flag(self.session, units[1], message)
        elif ex.compliance < 0:
            measured = current if self.source == "voltage" else voltage
            compliance = abs(measured) >= self.limit * (1.0 - COMPLIANCE_FRACTION)
        if math.isfinite(voltage):
            self.last_voltage_V = voltage
        return SmuReading(voltage, current, compliance)

    def output(self, on: bool) -> None:
        """Turn the output on or off; turning it on checks the instrument accepted it."""
        if on:
            self._require_configured()
            self._output_on = True  # from now on, safe_off has work to do
        message = self.dialect.fill(self.commands.output, state=bool(on))
        self.session.write(message)
        if on:
            self.session.drain_errors(context=f"turning the output on with {message!r}")
        else:
            self._output_on = False

    def output_is_on(self) -> bool:
        """Ask the instrument whether its output is on."""
        query = self.commands.output_query
        return _flag(self.session, self.session.query(query), query)

    def ramp_plan(self) -> tuple[int, float]:
        """(steps, dwell in s) of the ramp to zero from the present level: the terminal
        voltage (the level when sourcing voltage; the last reading, else the voltage limit,
        when sourcing current) comes down at ``ramp_rate_V_per_s``, in at least ten
        steps, at most RAMP_MAX_STEPS."""
        if self.source is None or not self.level:
            return 1, 0.0
        if self.source == "voltage":
            volts = abs(self.level)
        else:
            known = self.last_voltage_V if self.last_voltage_V is not None else self.limit
            volts = abs(known or 0.0)
        duration = volts / self.ramp_rate_V_per_s
        steps = max(10, min(RAMP_MAX_STEPS, math.ceil(duration / RAMP_DWELL_S)))
        return steps, duration / steps * self.ramp_time_scale

    def ramp_to_zero(self, sleep=time.sleep) -> None:
        """Step the source level to zero at the ramp rate, each step confirmed complete
        (*OPC?) and followed by a dwell."""
        if self.source is None:
            return
        start = self.level if self.level is not None else 0.0
        opc = self.dialect.common.operation_complete
        count, dwell = self.ramp_plan()
        for k in range(count - 1, -1, -1):
            self.level = start * k / count
            self.session.expect_complete(self.dialect.join(
                [self._set_command(self.level), opc]))
            if k and dwell > 0:
                sleep(dwell)
        self.last_voltage_V = None

    def safe_off(self) -> list[str]:
        """Ramp to zero, output off, confirm by query. Idempotent.

        Returns the problems met on the way (empty when all went well); raises
        InstrumentError only when the output cannot be confirmed off.
        """
        problems: list[str] = []
        interrupted = False
        try:
            self.ramp_to_zero()
        except KeyboardInterrupt:
            interrupted = True
            problems.append("ramp to zero interrupted by the operator; output turned off")
        except Exception as exc:  # noqa: BLE001 - keep going: the output must go off
            problems.append(f"ramp to zero failed: {exc}")
        self._switch_off(self.dialect.fill(self.commands.output, state=False),
                         self.output_is_on, "SMU output", problems)
        self._output_on = False
        if interrupted:
            raise KeyboardInterrupt
        return problems


def admittance_from_reading(form: str, primary: float, secondary: float,
                            frequency_Hz: float) -> complex:
    """Complex admittance [S] from a two-element LCR reading of `form` (see LCR_FORMS).

    The parallel (Cp, Gp) and series (Cs, Rs) forms go through the meter conversions of
    `pnbench.modeling.smallsignal`; the other forms are turned into one of those first.
    A marker value (overflow or not-a-number) gives nan+nanj.
    """
    if not (math.isfinite(primary) and math.isfinite(secondary)):
        return complex(math.nan, math.nan)
    w = 2.0 * math.pi * frequency_Hz
    if form == "parallel":
        y = smallsignal.admittance_from_parallel(primary, secondary, frequency_Hz)
    elif form == "parallel_r":
        gp = 1.0 / secondary if secondary else math.inf
        y = smallsignal.admittance_from_parallel(primary, gp, frequency_Hz)
    elif form == "parallel_d":
        y = smallsignal.admittance_from_parallel(primary, secondary * w * primary, frequency_Hz)
    elif form == "series":
        y = smallsignal.admittance_from_series(primary, secondary, frequency_Hz)
    elif form == "series_d":
        y = smallsignal.admittance_from_series(primary, secondary / (w * primary), frequency_Hz)
    elif form == "admittance":
        y = complex(primary, secondary)
    elif form == "impedance":
        z = complex(primary, secondary)
        y = 1.0 / z if z != 0 else complex(math.inf, 0.0)
    else:
        raise ValueError(f"unknown LCR form {form!r}")
    return complex(y)


class LcrMeter(LcrCorrections, Role):
    """An LCR meter: AC level, frequency, DC bias, corrections; reads admittance."""

    role = "lcr"
    commands: LcrCommands

    def __init__(self, session: Session, dialect: Dialect | None = None) -> None:
        super().__init__(session, dialect)
        self.form = self.commands.form
        self.ac_level_V: float | None = None
        self._bias_on = False
        self._exchange: LcrExchange | None = None  # the per-point message, built once

    def configure(self, ac_level_V: float) -> None:
        """Select the dialect's reading form, set the AC level; DC bias to zero and off."""
        ac_level_V = _positive("LCR AC level", ac_level_V)
        c = self.commands
        fill = self.dialect.fill
        units = []
        if c.model:
            units.append(fill(c.model, form=self.form) if "{form}" in c.model else c.model)
        units += [fill(c.ac_level, value=ac_level_V), fill(c.bias_level, value=0.0),
                  fill(c.bias_state, state=False)]
        message = self.dialect.join(units)
        self.session.write(message)
        self.ac_level_V = ac_level_V
        self._bias_on = False
        self.session.drain_errors(context=f"configuring the LCR meter with {message!r}")

    def apply_and_read(self, bias_V: float, frequency_Hz: float) -> LcrReading:
        """Set the DC bias and the frequency, then read: one message, one reply."""
        bias_V = _finite("LCR bias", bias_V)
        frequency_Hz = _positive("LCR frequency", frequency_Hz)
        ex = self._exchange
        if ex is None:
            ex = self._exchange = LcrExchange.of(self.dialect)
        message = ex.message(bias_V, frequency_Hz)
        units = self.session.ask(message, ex.queries)
        values = _values(self.session, units[0], ex.fields, message)
        primary, secondary = values[ex.primary], values[ex.secondary]
        return LcrReading(
            frequency_Hz=frequency_Hz, bias_V=bias_V,
            admittance_S=admittance_from_reading(self.form, primary, secondary, frequency_Hz),
            primary=primary, secondary=secondary)

    def bias(self, on: bool) -> None:
        """Turn the DC bias on or off; turning it on checks the instrument accepted it."""
        if on:
            self._bias_on = True
        message = self.dialect.fill(self.commands.bias_state, state=bool(on))
        self.session.write(message)
        if on:
            self.session.drain_errors(context=f"turning the bias on with {message!r}")
        else:
            self._bias_on = False

    def bias_is_on(self) -> bool | None:
        """Ask whether the DC bias is on; None when the dialect has no such query."""
        query = self.commands.bias_state_query
        if not query:
            return None
        return _flag(self.session, self.session.query(query), query)

    def safe_off(self) -> list[str]:
        """Bias to zero and off, confirmed by query when the dialect has one. Idempotent.

        Returns the problems met; raises InstrumentError only when the bias cannot be
        confirmed off.
        """
        c = self.commands
        problems: list[str] = []
        message = self.dialect.join([self.dialect.fill(c.bias_level, value=0.0),
                                     self.dialect.fill(c.bias_state, state=False)])
        still_on = self._switch_off(message, self.bias_is_on, "LCR DC bias", problems)
        if still_on is None:
            if problems:
                raise InstrumentError(f"{self.session.resource_name}: LCR DC bias could not "
                                      "be turned off: " + "; ".join(problems))
            problems.append("bias off sent; the dialect has no bias_state_query to confirm it")
        self._bias_on = False
        return problems
