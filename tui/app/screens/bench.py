"""The bench screen: instruments of the plan (role, resource, dialect, identity, state),
what the VISA backends see, the state of every source output, and one point sourced by
hand within the plan's limits. Every instrument call runs on a worker."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from pnbench.errors import PnbenchError
from pnbench.sweeps import record
from pnbench.tui.app.bench import (
    InstrumentRow,
    identify_rows,
    output_name,
    plan_rows,
    scan_resources,
    with_run_identities,
)
from pnbench.tui.app.widgets.banner import MessageStrip, ScreenBar, SourceBanner

REFRESH_S = 0.5
ROLE_NAMES = {"smu": "SMU (source-measure unit)", "lcr": "LCR meter",
              "stage": "thermal stage (hot surface; cold: dry purge)"}


class BenchScreen(Screen):
    """Instruments and outputs."""

    BINDINGS = [
        Binding("i", "identify", "Identify"),
        Binding("l", "scan", "List VISA"),
        Binding("m", "measure", "One point"),
    ]

    def __init__(self):
        super().__init__()
        self.rows: list[InstrumentRow] = []
        self.scanned: list[tuple[str, str]] | None = None
        self._identified = False
        self._busy = ""
        self._point = ""

    def compose(self) -> ComposeResult:
        yield SourceBanner()
        yield ScreenBar("bench", "Bench")
        yield MessageStrip()
        with VerticalScroll(id="bench-body"):
            yield Static("Instruments", classes="section", markup=False)
            yield Static("", id="bench-instruments", markup=False)
            yield Static("", id="bench-outputs", markup=False)
            yield Static("", id="bench-point", markup=False)
            yield Static("Resources the VISA backends list", classes="section", markup=False)
            yield Static("", id="bench-resources", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.refresh_rows()
        self.set_interval(REFRESH_S, self.refresh_rows)

    # ------------------------------------------------------------------ display
    def refresh_rows(self) -> None:
        if not self.is_current:
            return
        app = self.app
        rows = self.rows if self._identified else plan_rows(app.plan, app.simulate)
        live = app.live
        if live is not None and live.run_dir is not None:
            try:
                doc = record.read_run_doc(live.run_dir)
            except PnbenchError:
                doc = {}
            state = "in use by the sweep" if app.live_active else "released"
            rows = with_run_identities(plan_rows(app.plan, app.simulate), doc, state)
        if app.plan is None:
            rows = []
        self._fill(rows)
        self._show_outputs()
        self._show_resources()

    def _fill(self, rows: list[InstrumentRow]) -> None:
        """One block per role: the state first, then where it is and what it said."""
        self.rows = rows
        if not rows:
            text = "No plan loaded: F3 opens the Plan screen."
        else:
            outputs = self._outputs()
            blocks = []
            for row in rows:
                state = next((on for key, on in outputs.items()
                              if key.split("_")[0] == row.role), None)
                output = "unknown" if state is None else ("ON" if state else "off")
                backend = f" ({row.backend})" if row.backend else ""
                blocks.append(
                    f"{ROLE_NAMES.get(row.role, row.role.upper())}  [{row.state}]\n"
                    f"  resource  {row.resource}{backend}\n"
                    f"  dialect   {row.dialect or '--'}\n"
                    f"  identity  {row.identity or '-- (i asks it)'}\n"
                    f"  output    {output}")
            text = "\n".join(blocks)
        self.query_one("#bench-instruments", Static).update(text)

    def _outputs(self) -> dict[str, bool]:
        app = self.app
        truth = app.live.outputs() if app.live is not None else None
        return truth if truth is not None else dict(app.state.outputs)

    def _show_outputs(self) -> None:
        app = self.app
        truth = app.live.outputs() if app.live is not None else None
        outputs = truth if truth is not None else app.state.outputs
        if outputs:
            parts = [f"{output_name(k)}: {'ON' if v else 'off'}" for k, v in
                     sorted(outputs.items())]
            source = "simulated bench" if truth is not None else "runner events"
            text = f"Outputs ({source}): " + ", ".join(parts)
        else:
            text = "Outputs: no sweep has switched anything on in this app."
        if app.simulate:
            text += f"\nSimulated bench: device {app.simulate}, time scale {app.time_scale:g}"
        if self._busy:
            text += f"\n{self._busy}"
        self.query_one("#bench-outputs", Static).update(text)

    def _show_resources(self) -> None:
        if self.scanned is None:
            text = "not listed yet (l lists them)"
        elif not self.scanned:
            text = "none found"
        else:
            text = "\n".join(f"{backend:>6}  {name}" for backend, name in self.scanned)
        text += "\n\n" + socket_note(self.app.plan, self.app.simulate)
        self.query_one("#bench-resources", Static).update(text)
        self.query_one("#bench-point", Static).update(self._point)

    # ------------------------------------------------------------------ actions
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action == "identify":
            return self.app.plan is not None and not self.app.live_active
        return True

    def action_identify(self) -> None:
        app = self.app
        self._busy = "asking each instrument for its identity (*IDN?)..."
        self.notify("Identify: asking each instrument for its identity...", timeout=3)
        self._show_outputs()
        rows = plan_rows(app.plan, app.simulate)

        def work() -> None:
            try:
                found = identify_rows(rows, app.plan, app.simulate)
            except Exception as exc:  # noqa: BLE001 - shown, the app stays up
                app.call_from_thread(self._identified_failed, str(exc))
                return
            app.call_from_thread(self._identified_rows, found)

        self.run_worker(work, thread=True, exclusive=True, group="identify")

    def _identified_rows(self, rows: list[InstrumentRow]) -> None:
        self._identified = True
        self._busy = ""
        self._fill(rows)
        answered = [r for r in rows if r.state == "answered"]
        failed = [f"{r.role.upper()}: {r.state}" for r in rows if r.state.startswith("error")]
        text = (f"Identify: {len(answered)} of {len(rows)} instruments answered"
                + ("; " + "; ".join(failed) if failed else ""))
        self.notify(text, severity="error" if failed else "information", timeout=8)

    def _identified_failed(self, message: str) -> None:
        self._busy = f"identify failed: {message}"
        self.notify(f"Identify failed: {message}", severity="error", timeout=10)

    def action_scan(self) -> None:
        app = self.app
        backends = sorted({inst.backend for inst in app.plan.instruments.values()}
                          if app.plan else set()) or ["@py"]
        self._busy = f"listing resources on {', '.join(backends)}..."

        def work() -> None:
            found = scan_resources(backends)
            app.call_from_thread(self._scanned, found)

        self.run_worker(work, thread=True, exclusive=True, group="scan")

    def _scanned(self, found: list[tuple[str, str]]) -> None:
        self.scanned = found
        self._busy = ""
        self._show_resources()

    def action_measure(self) -> None:
        """One point by hand: ask for level and compliance, check them against the
        plan's limits, source, read, switch off (on a worker)."""
        from pnbench.tui.app.screens.dialogs import PointDialog

        app = self.app
        if app.plan is None or app.live_active:
            self.notify("One point needs a plan (its limits and SMU) and no sweep "
                        "running.", severity="warning")
            return
        lim = app.plan.limits
        limits = (f"{lim.max_voltage_V:g} V forward, {lim.max_reverse_voltage_V:g} V "
                  f"reverse, {lim.max_current_A:g} A, {lim.max_power_W:g} W")

        def chosen(answer) -> None:
            if answer is not None:
                self._measure(*answer)

        app.push_screen(PointDialog(limits), chosen)

    def _measure(self, level: str, compliance: str) -> None:
        from pnbench.errors import PnbenchError
        from pnbench.sweeps.onepoint import measure_one

        app = self.app
        self._point = f"one point: sourcing {level} (compliance {compliance})..."
        self._show_resources()

        def work() -> None:
            try:
                plan = app.plan
                if app.simulate:
                    from pnbench.drivers.sim.backend import backend_for

                    plan = plan.on_simulated_bench(backend_for(app.simulate, 0.0))
                result = measure_one(plan, level, compliance)
                text, error = "one point: " + result.line(), False
            except PnbenchError as exc:
                text, error = f"one point refused or failed: {exc}", True
            app.call_from_thread(self._measured, text, error)

        self.run_worker(work, thread=True, exclusive=True, group="point")

    def _measured(self, text: str, error: bool) -> None:
        self._point = text
        self._show_resources()
        self.notify(text, severity="error" if error else "information", timeout=10)


def socket_note(plan, simulate: str | None) -> str:
    """VISA cannot discover raw-socket instruments: say so, and name the plan's."""
    note = ("Raw-socket instruments (TCPIP0::host::port::SOCKET) cannot be discovered: "
            "VISA lists only what announces itself. Give their resource in the plan.")
    if simulate:
        return note + " The simulated bench serves two such sockets on 127.0.0.1."
    sockets = [f"  {role.upper()}: {inst.resource}" for role, inst in
               sorted((plan.instruments if plan else {}).items())
               if inst.resource.upper().endswith("::SOCKET")]
    if sockets:
        note += " The plan's socket instruments (i asks them):\n" + "\n".join(sockets)
    return note
