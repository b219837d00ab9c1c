"""Connecting the instruments a plan needs, and always leaving them off.

    with open_bench(plan.on_simulated_bench("lh-qt16@pnsim:time_scale=0")) as bench:
        bench.smu, bench.lcr, bench.instruments    # roles and their identities
        bench.safe_off()                           # {role: confirmed off}

`open_bench` connects the roles the plan's steps use (from the plan's [instruments], which
may name the simulated bench as their backend), asks each for its identity,
optionally compares serial numbers with a previous run's, and turns every output off
before handing the bench over. Leaving the `with` block, by any path, turns every output
off again and confirms it. When a session has died (the connection dropped mid-step),
`safe_off` opens a fresh one to the same instrument to turn it off: an instrument whose
controller went away keeps its output on unless someone tells it otherwise.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from dataclasses import dataclass, field

from pnbench.errors import BadInput, InstrumentError, PnbenchError
from pnbench.sweeps.plan import Plan


def serial_of(identity: str) -> str:
    """The serial-number field of an IEEE 488.2 identification (the third field)."""
    parts = [p.strip() for p in identity.split(",")]
    return parts[2] if len(parts) >= 3 else identity.strip()


def model_of(identity: str) -> str:
    parts = [p.strip() for p in identity.split(",")]
    return ",".join(parts[:2]) if len(parts) >= 2 else identity.strip()


@dataclass
class Connection:
    """How one role is reached, and the identity it gave."""

    role: str
    resource: str
    backend: str
    dialect_path: str | None
    timeout_ms: int
    identity: str = ""
    stage: dict | None = None  # the stage role's limits and standby (thermal_settings)

    def to_json_dict(self) -> dict:
        return {"resource": self.resource, "backend": self.backend,
                "dialect": self.dialect_path, "identity": self.identity}


@dataclass
class Bench:
    """The connected roles of one run; satisfies `sweeps.benchtypes.BenchLike`."""

    connections: dict = field(default_factory=dict)  # role -> Connection
    roles: dict = field(default_factory=dict)  # role -> Smu | LcrMeter
    sim: object | None = None
    simulated: str | None = None
    last_off: dict = field(default_factory=dict)
    identity_changes: list = field(default_factory=list)
    clock: object | None = None  # the stage's time: WallClock, or the simulated bench's

    @property
    def stage(self):
        return self.roles.get("stage")

    @property
    def smu(self):
        return self.roles.get("smu")

    @property
    def lcr(self):
        return self.roles.get("lcr")

    @property
    def instruments(self) -> dict:
        return {role: c.to_json_dict() for role, c in self.connections.items()}

    def safe_off(self) -> dict[str, bool]:
        """Ramp to zero and turn off every role's output, then send a thermal stage to
        its standby temperature (sources first); {role: confirmed}."""
        report = {role: self._off(role) for role in sorted(self.roles,
                                                           key=lambda r: r == "stage")}
        self.last_off = report
        return report

    def _off(self, role: str) -> bool:
        for attempt in range(2):
            try:
                self.roles[role].safe_off()
                return True
            except KeyboardInterrupt:
                continue  # a second Ctrl-C must not leave the output on: try again
            except Exception:  # noqa: BLE001 - reconnect once and try again
                if attempt == 0:
                    try:
                        self._reconnect(role)
                    except Exception:  # noqa: BLE001
                        return False
        return False

    def _reconnect(self, role: str) -> None:
        old = self.roles[role]
        with contextlib.suppress(Exception):
            old.session.close()
        fresh = _open_role(self.connections[role])
        if role == "smu":  # carry the source state so ramp_to_zero knows where it is
            fresh.source, fresh.limit, fresh.level = old.source, old.limit, old.level
            fresh.last_voltage_V = old.last_voltage_V
            set_ramp(fresh, old.ramp_rate_V_per_s, old.ramp_time_scale)
        self.roles[role] = fresh

    def check_errors(self, role: str, context: str) -> None:
        """Raise InstrumentError if the role's instrument has queued an error."""
        instrument = self.roles.get(role)
        if instrument is not None:
            instrument.session.drain_errors(context=context)

    @property
    def time_scale(self) -> float:
        """How instrument time passes: 1 for real instruments, the simulated bench's
        own time scale for it (0: nothing waits)."""
        return float(self.sim.time_scale) if self.sim is not None else 1.0

    def close(self) -> None:
        for instrument in self.roles.values():
            with contextlib.suppress(Exception):
                instrument.session.close()


def set_ramp(smu, rate_V_per_s: float, time_scale: float = 1.0) -> None:
    """The rate of the SMU's ramp to zero (the plan's [limits] ramp_rate), and the time
    scale of its dwells: 1 for real instruments; the simulated bench's own time scale
    for it (so a bench at time scale 0 ramps in as many steps, without waiting)."""
    smu.ramp_rate_V_per_s = float(rate_V_per_s)
    smu.ramp_time_scale = float(time_scale)


def prime_source(smu, source: str, level: float) -> None:
    """Tell a freshly opened SMU role what it is sourcing (after a crash), so that
    `safe_off` ramps down from that level instead of switching off at once."""
    smu.source, smu.level = source, float(level)
    if smu.limit is None:
        smu.limit = 1e-3


def _open_role(conn: Connection):
    from pnbench.drivers.dialect import load_dialect
    from pnbench.drivers.opening import open_session
    from pnbench.drivers.roles import LcrMeter, Smu

    dialect = load_dialect(conn.dialect_path)
    session = open_session(conn.resource, backend=conn.backend, timeout_ms=conn.timeout_ms,
                           dialect=dialect)
    try:
        if conn.role == "stage":
            from pnbench.drivers.stage import ThermalStage

            stage = ThermalStage(session, dialect, (conn.stage or {}).get("limits"))
            stage.standby_K = (conn.stage or {}).get("standby_K", stage.standby_K)
            return stage
        return Smu(session, dialect) if conn.role == "smu" else LcrMeter(session, dialect)
    except Exception:
        session.close()
        raise


def connections_for(plan: Plan, roles: set[str]) -> dict[str, Connection]:
    """Where each needed role is: the plan's table (the simulated bench's resources when
    ``--simulate`` rewrote it)."""
    found = {}
    for role in sorted(roles):
        spec = plan.instruments.get(role)
        if spec is None:
            raise BadInput(f"plan {plan.path}: its steps need the {role.upper()} but "
                           f"[instruments] has no {role!r} entry; add one (resource, "
                           "backend, dialect) or rehearse with --simulate DEVICE")
        found[role] = Connection(role, spec.resource, spec.backend, spec.dialect,
                                 spec.timeout_ms,
                                 stage=thermal_settings(plan) if role == "stage" else None)
    return found


def thermal_settings(plan: Plan) -> dict:
    """The stage role's limits (the plan's lowest/highest, the stage's ramp rating) and
    standby temperature."""
    from pnbench.drivers.stage import StageLimits

    t = plan.temperature
    if t is None:
        return {}
    spec = plan.instruments.get("stage")
    fastest = (spec.ratings if spec else {}).get("max_ramp_rate", float("inf"))
    return {"limits": StageLimits(t.lowest_K, t.highest_K, fastest), "standby_K": t.standby_K}


@contextlib.contextmanager
def open_bench(plan: Plan, *, expected: dict | None = None, force_identity: bool = False,
               prime: tuple[str, float] | None = None) -> Iterator[Bench]:
    """Connect, identify, switch everything off; on leaving, switch off and confirm.

    A plan whose instruments are on the simulated bench (backend ``DEVICE@pnsim``) gets
    it started in-process for as long as the bench is open. ``expected`` maps role ->
    identity string of a previous run (resume): a different serial number raises
    InstrumentError unless ``force_identity``. ``prime`` is the (source, level) an
    interrupted run left the SMU at, so the first switch-off ramps.
    """
    spec = plan.simulated
    bench = Bench(simulated=spec.device if spec is not None else None)
    held = None
    try:
        if spec is not None:
            from pnbench.drivers.sim.backend import REGISTRY

            held = spec.backend
            bench.sim = REGISTRY.acquire(held)  # one bench for both roles, for the run
            bench.clock = bench.sim.clock  # the stage's time: the runner drives it
        else:
            from pnbench.sweeps.thermal import WallClock

            bench.clock = WallClock()
        bench.connections = connections_for(plan, plan.roles_needed)
        for role, conn in bench.connections.items():
            bench.roles[role] = _open_role(conn)
            conn.identity = bench.roles[role].identity
        if bench.smu is not None:
            set_ramp(bench.smu, plan.limits.ramp_rate_V_per_s, bench.time_scale)
        _check_identities(bench, expected or {}, force_identity)
        if prime is not None and bench.smu is not None:
            prime_source(bench.smu, *prime)
        off = bench.safe_off()
        if not all(off.values()):
            bad = ", ".join(r for r, ok in off.items() if not ok)
            raise InstrumentError(f"the {bad} output could not be confirmed off before "
                                  "the run; check the instrument")
        yield bench
    finally:
        try:
            if bench.roles:
                bench.safe_off()
        finally:
            bench.close()
            if held is not None:
                from pnbench.drivers.sim.backend import REGISTRY

                REGISTRY.release(held)


def identify_roles(plan: Plan, roles) -> dict[str, str | PnbenchError]:
    """Each role's identity (IEEE 488.2 *IDN?), asked through the connections a run of
    ``plan`` opens (same resources, backends, dialects and sessions), each closed again;
    nothing is switched. A role that cannot be reached gets its error instead. A plan on
    the simulated bench has the bench held for the whole question, as a run holds it."""
    spec = plan.simulated
    held = None
    out: dict[str, str | PnbenchError] = {}
    try:
        if spec is not None:
            from pnbench.drivers.sim.backend import REGISTRY

            REGISTRY.acquire(spec.backend)
            held = spec.backend
        for role in sorted(roles):
            try:
                instrument = _open_role(connections_for(plan, {role})[role])
                try:
                    out[role] = instrument.identity
                finally:
                    instrument.session.close()
            except PnbenchError as exc:
                out[role] = exc
    finally:
        if held is not None:
            from pnbench.drivers.sim.backend import REGISTRY

            REGISTRY.release(held)
    return out


def _check_identities(bench: Bench, expected: dict, force: bool) -> None:
    for role, identity in expected.items():
        conn = bench.connections.get(role)
        if conn is None or not identity:
            continue
        if serial_of(conn.identity) != serial_of(identity) or (
                model_of(conn.identity) != model_of(identity)):
            message = (f"the {role.upper()} at {conn.resource} is not the one this run "
                       f"started with: it answers {conn.identity!r}, the run recorded "
                       f"{identity!r}")
            if not force:
                raise InstrumentError(message + "; connect the same instrument, or pass "
                                      "--force-identity to continue on this one")
            bench.identity_changes.append(message)
