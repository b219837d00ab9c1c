"""The sweep the app owns: start, pause, resume, abort, close, and what it says.

No Textual here: the app calls these from its message handlers (the blocking ones on
worker threads) and draws what they return. One `RunControl` per app; each start makes
a fresh `LiveRun` (the engine's Launch on its own thread, seen through a queue).
"""

from __future__ import annotations

from pathlib import Path

from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V
from pnbench.sweeps.quantities import format_quantity


class RunControl:
    def __init__(self, factory, *, simulate: str | None = None, time_scale: float = 1.0,
                 out_dir: str | Path = "runs", report: bool = True) -> None:
        self.factory = factory
        self.simulate = simulate
        self.time_scale = time_scale
        self.out_dir = Path(out_dir)
        #: write report.html when a sweep ends (off with --no-report)
        self.report = report
        self.live = None

    @property
    def active(self) -> bool:
        return self.live is not None and self.live.running

    def start(self, plan) -> None:
        """Make and start a LiveRun of `plan` (connecting happens on the engine's thread);
        PnbenchError when the engine refuses it before any folder exists."""
        if self.simulate:  # the simulated bench is a backend of the plan's instruments
            from pnbench.drivers.sim.backend import backend_for

            plan = plan.on_simulated_bench(backend_for(self.simulate, self.time_scale))
        self.live = self.factory(plan, out_dir=self.out_dir)
        self.live.start()

    def where(self, plan) -> str:
        if self.simulate:
            return f"the simulated bench ({Path(self.simulate).name})"
        return ", ".join(f"{role.upper()} at {inst.resource}"
                         for role, inst in sorted(plan.instruments.items()))

    def start_question(self, plan) -> str:
        """The text of the start question: what runs where, the limits, and a plain
        word when the plan goes above the hazardous-voltage threshold."""
        lim = plan.limits
        text = (f"'{plan.title or plan.device.name}': {len(plan.steps)} steps, "
                f"{plan.total_points} points on {self.where(plan)}. Sources switch on at "
                f"the device's terminals; limits: "
                f"{format_quantity(lim.max_voltage_V, 'V', 3)} forward, "
                f"{format_quantity(lim.max_reverse_voltage_V, 'V', 3)} reverse, "
                f"{format_quantity(lim.max_current_A, 'A', 3)}.")
        highest = lim.highest_voltage_V()
        if highest > HAZARDOUS_VOLTAGE_V:
            where = "simulated terminals" if self.simulate else "the fixture"
            text += (f"\n\nHAZARDOUS VOLTAGE: this plan goes up to "
                     f"{format_quantity(highest, 'V', 3)}, above the "
                     f"{HAZARDOUS_VOLTAGE_V:g} V DC threshold. Keep {where} guarded and "
                     "the interlock closed; touch nothing until the banner says the "
                     "outputs are off.")
        return text

    def toggle_pause(self, paused: bool) -> None:
        """Blocking: run it on a worker."""
        if self.active:
            (self.live.resume if paused else self.live.pause)()

    def abort(self) -> None:
        """Blocking: run it on a worker."""
        if self.live is not None:
            self.live.abort()

    def close(self) -> None:
        if self.live is not None:
            self.live.close()
