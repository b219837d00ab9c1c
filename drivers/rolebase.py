"""What every instrument role shares: its session, dialect and identity, the confirmed
switch-off every `safe_off` ends with, and the checks of the numbers a role is given.
The roles themselves are in `roles` (`Smu`, `LcrMeter`) and `stage` (`ThermalStage`).
"""

from __future__ import annotations

import math

from pnbench.drivers.dialect import Dialect
from pnbench.drivers.session import Session
from pnbench.errors import BadInput, InstrumentError


def positive(name: str, x: float) -> float:
    """``x`` as a float; BadInput naming ``name`` unless it is a positive number."""
    x = float(x)
    if not (math.isfinite(x) and x > 0):
        raise BadInput(f"{name} must be a positive number, found {x!r}")
    return x


def finite(name: str, x: float) -> float:
    """``x`` as a float; BadInput naming ``name`` unless it is a finite number."""
    x = float(x)
    if not math.isfinite(x):
        raise BadInput(f"{name} must be a finite number, found {x!r}")
    return x


class Role:
    """What every instrument role shares: its session, dialect and identity."""

    role = ""

    def __init__(self, session: Session, dialect: Dialect | None = None) -> None:
        self.session = session
        self.dialect = dialect or session.dialect
        self.commands = self.dialect.require(self.role)
        self._identity: str | None = None

    @property
    def identity(self) -> str:
        """The instrument's *IDN? reply, asked once."""
        if self._identity is None:
            self._identity = self.session.identify()
        return self._identity

    def _switch_off(self, message: str, is_on, what: str, problems: list[str]) -> bool | None:
        """Send the off message, then ask whether ``what`` is still on.

        Appends what went wrong to ``problems``; raises InstrumentError when the state
        cannot be read back or is still on. Returns the state read (None when the dialect
        has no query for it).
        """
        try:
            self.session.write(message)
        except Exception as exc:  # noqa: BLE001 - go on to the confirmation
            problems.append(f"{what} off command failed: {exc}")
        try:
            still_on = is_on()
        except Exception as exc:  # noqa: BLE001
            problems.append(f"{what} state query failed: {exc}")
            raise InstrumentError(f"{self.session.resource_name}: {what} could not be "
                                  "confirmed off; CHECK THE INSTRUMENT: "
                                  + "; ".join(problems)) from None
        if still_on:
            raise InstrumentError(f"{self.session.resource_name}: {what} is still ON after "
                                  "the off command; CHECK THE INSTRUMENT"
                                  + ("" if not problems else ": " + "; ".join(problems)))
        return still_on
