"""The sweep the app owns: start, pause, resume, abort, close, and what it says.

No Textual here: the app calls these from its message handlers (the blocking ones on
worker threads) and draws what they return. One `RunControl` per app; each start makes
a fresh `LiveRun` (the engine's Launch on its own thread, seen through a queue).
"""

from __future__ import annotations

from pathlib import Path

from pnbench.drivers.sim.backend import parse as parse_sim
from pnbench.sweeps.limits import HAZARDOUS_VOLTAGE_V
from pnbench.sweeps.quantities import format_quantity


class RunControl:
    def __init__(self, factory, *, bench: str | None = None, out_dir: str | Path = "runs",
                 report: bool = True) -> None:
        self.factory = factory
        #: the simulated bench as a backend string (DUT@pnsim[:...]), or None
        self.bench = bench
        spec = parse_sim(bench) if bench is not None else None
        #: for what the screens say: the simulated device and its time scale
        self.simulate = spec.device if spec is not None else None
        self.time_scale = spec.time_scale if spec is not None else 1.0
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
        if self.bench is not None:  # the simulated bench: a backend of the instruments
            plan = plan.on_simulated_bench(self.bench)
        self.live = self.factory(plan, out_dir=self.out_dir, report=self.report)
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
