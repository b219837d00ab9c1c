"""The one exception family of pnbench.

It lives at the bottom of the import graph so every layer can raise it; the command
line maps it, in one place, to the exit codes of the design (2 bad input, 3 instrument
or connection, 4 stopped by a safety limit or the operator, 1 anything unexpected).
"""

from __future__ import annotations


class PnbenchError(Exception):
    """Base of every error pnbench reports to a person."""

    exit_code = 1


class BadInput(PnbenchError):
    """A plan, data file, device file, dialect or option that cannot be used."""

    exit_code = 2


class PlanError(BadInput):
    """A plan file that does not validate."""


class DataFileError(BadInput):
    """A data file (CSV, model.json, model card, run folder) that cannot be read."""


class DialectError(BadInput):
    """An instrument dialect file with a missing, unknown or malformed key."""


class DeviceFileError(BadInput):
    """A simulated-device file that cannot be used."""


class InstrumentError(PnbenchError):
    """An instrument refused a command, answered nonsense, timed out or went away."""

    exit_code = 3


class SafetyStop(PnbenchError):
    """A safety limit stopped the run."""

    exit_code = 4


class OperatorStop(PnbenchError):
    """The operator stopped the run (abort, Ctrl-C, a signal)."""

    exit_code = 4
