"""What the runner asks of a bench and of its instruments, written down as Protocols.

`sweeps.bench.Bench` (real instruments or the simulated bench, through the driver roles)
and the in-process fake of the tests both satisfy `BenchLike`; `tests/sweeps/
test_bench_protocol.py` checks that the two keep the same members and signatures, so a
change to one cannot leave the other (and the runner tests) behind.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Protocol, runtime_checkable

if TYPE_CHECKING:  # the roles module pulls in pyvisa; only the annotations need it
    from pnbench.drivers.roles import LcrReading, SmuReading


@runtime_checkable
class SmuRole(Protocol):
    """A source-measure unit as the runner drives it (`drivers.roles.Smu`)."""

    source: str | None
    limit: float | None
    level: float

    def configure(self, source: str = "voltage", limit: float = 1e-3, nplc: float = 1.0,
                  four_wire: bool = False, range_: float | None = None) -> None: ...

    def apply_and_read(self, level: float) -> SmuReading: ...

    def output(self, on: bool) -> None: ...

    def ramp_to_zero(self) -> None: ...

    def safe_off(self) -> list[str]: ...


@runtime_checkable
class LcrRole(Protocol):
    """An LCR meter as the runner drives it (`drivers.roles.LcrMeter`)."""

    def configure(self, ac_level_V: float) -> None: ...

    def apply_and_read(self, bias_V: float, frequency_Hz: float) -> LcrReading: ...

    def bias(self, on: bool) -> None: ...

    def safe_off(self) -> list[str]: ...

    # the open/short fixture correction (sweeps.correction)
    def open_correction(self, timeout_ms: float = 120_000) -> None: ...

    def short_correction(self, timeout_ms: float = 120_000) -> None: ...

    def correction_data(self, which: str, frequency_Hz: float) -> tuple[float, float] | None:
        ...

    def correction_state(self, which: str) -> bool | None: ...

    def set_correction_state(self, which: str, on: bool) -> bool: ...

    def fixture_is(self, state: str) -> None: ...


@runtime_checkable
class BenchLike(Protocol):
    """The connected instruments of one run, as `open_bench` yields them.

    ``smu`` and ``lcr`` are None for a role the plan does not use. ``safe_off`` ramps to
    zero, turns every output off and says per role whether that was confirmed; it never
    raises. ``check_errors`` raises InstrumentError when the role's instrument has queued
    an error.
    """

    last_off: dict
    identity_changes: list

    @property
    def smu(self) -> SmuRole | None: ...

    @property
    def lcr(self) -> LcrRole | None: ...

    @property
    def instruments(self) -> dict: ...

    def safe_off(self) -> dict[str, bool]: ...

    def check_errors(self, role: str, context: str) -> None: ...
