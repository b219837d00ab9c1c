"""The LCR meter's open/short fixture correction, as the dialect spells it: run it, turn
the stored correction on or off and ask whether it is on, read what it measured; and, on
the simulated bench, set its fixture's state (`fixture_is`).

A mixin of `roles.LcrMeter` (it uses the role's session, dialect and commands); kept apart
so the role module stays small. Every string comes from the dialect's ``[lcr]`` table.
"""

from __future__ import annotations

from pnbench.errors import DialectError


class LcrCorrections:
    """Open and short correction of an LCR meter (mixed into `roles.LcrMeter`)."""

    def _correction(self, which: str, timeout_ms: float) -> None:
        command = getattr(self.commands, f"{which}_correction")
        if not command:
            raise DialectError(f"dialect {self.dialect.source}: [lcr] {which}_correction is "
                               "empty, so this meter's correction cannot be started")
        self.session.write(command)
        self.session.wait_complete(timeout_ms)
        self.session.drain_errors(context=f"the {which} correction ({command!r})")

    def open_correction(self, timeout_ms: float = 120_000) -> None:
        """Run the open correction (fixture open) and wait for it to finish."""
        self._correction("open", timeout_ms)

    def short_correction(self, timeout_ms: float = 120_000) -> None:
        """Run the short correction (fixture shorted) and wait for it to finish."""
        self._correction("short", timeout_ms)

    def correction_state(self, which: str) -> bool | None:
        """Whether the meter applies its stored ``which`` ("open"/"short") correction now;
        None when the dialect has no query for it."""
        query = getattr(self.commands, f"{which}_state_query")
        if not query:
            return None
        from pnbench.drivers.roles import _flag  # the role module imports this one

        return _flag(self.session, self.session.query(query), query)

    def set_correction_state(self, which: str, on: bool) -> bool:
        """Turn the meter's stored ``which`` correction on or off; False (nothing sent)
        when the dialect has no command for it."""
        command = getattr(self.commands, f"{which}_state")
        if not command:
            return False
        message = self.dialect.fill(command, state=bool(on))
        self.session.write(message)
        self.session.drain_errors(context=f"the {which} correction state ({message!r})")
        return True

    def correction_data(self, which: str, frequency_Hz: float) -> tuple[float, float] | None:
        """What the ``which`` ("open"/"short") correction measured at ``frequency_Hz``:
        the open's (G [S], B [S]) or the short's (R [ohm], X [ohm]); None when the
        dialect has no query for it."""
        query = getattr(self.commands, f"{which}_data_query")
        if not query:
            return None
        from pnbench.drivers.roles import _fields, _positive

        frequency_Hz = _positive("LCR frequency", frequency_Hz)
        message = self.dialect.join([self.dialect.fill(self.commands.frequency,
                                                       value=frequency_Hz), query])
        units = self.session.ask(message)
        values = _fields(self.session, units[0], ("primary", "secondary"), message)
        return values["primary"], values["secondary"]

    def fixture_is(self, state: str) -> None:
        """The fixture now holds the device, or is open or shorted (``state`` "device",
        "open", "short"), as the operator confirmed. A real meter is told nothing (the
        operator's hands did it); the simulated bench's meter is told with its own
        command (`drivers.sim.fixture`), so its readings follow."""
        from pnbench.drivers.sim.backend import is_sim_backend

        if not is_sim_backend(getattr(self.session, "backend", None)):
            return
        from pnbench.drivers.sim.fixture import PATTERN, state_word

        self.session.write(f"{PATTERN} {state_word(state)}")
        self.session.drain_errors(context=f"setting the simulated fixture {state}")
