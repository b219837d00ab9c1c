"""What the bench screen shows: the plan's instruments, the resources the VISA backends
see, and the identity each instrument gives. The blocking calls here run on worker
threads; the rows are plain values."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from pnbench.errors import PnbenchError

#: Readable names of output switches (event roles and the simulated bench's keys).
OUTPUT_NAMES = {"smu": "SMU output", "smu_output": "SMU output", "lcr": "LCR DC bias",
                "lcr_bias": "LCR DC bias"}


def output_name(key: str) -> str:
    return OUTPUT_NAMES.get(key, key)


@dataclass(frozen=True)
class InstrumentRow:
    role: str
    resource: str
    backend: str
    dialect: str
    identity: str = ""
    state: str = "not connected"


def plan_rows(plan, simulate: str | None = None) -> list[InstrumentRow]:
    """One row per role the plan names (or needs, when --simulate stands in)."""
    rows = []
    roles = sorted(set(plan.instruments) | set(plan.roles_needed)) if plan else []
    for role in roles:
        inst = plan.instruments.get(role)
        dialect = Path(inst.dialect).name if inst and inst.dialect else "default"
        if simulate:
            rows.append(InstrumentRow(role, f"simulated ({Path(simulate).name})", "@py",
                                      dialect, state="simulated bench"))
        elif inst is None:
            rows.append(InstrumentRow(role, "(not in the plan)", "", "", state="missing"))
        else:
            rows.append(InstrumentRow(role, inst.resource, inst.backend, dialect))
    return rows


def with_run_identities(rows: list[InstrumentRow], run_doc: dict,
                        state: str) -> list[InstrumentRow]:
    """Rows updated with what run.json says about each role's instrument."""
    instruments = run_doc.get("instruments") or {}
    out = []
    for row in rows:
        entry = instruments.get(row.role) or {}
        identity = str(entry.get("identity") or row.identity)
        resource = str(entry.get("resource") or row.resource)
        out.append(replace(row, identity=identity, resource=resource, state=state))
    return out


def scan_resources(backends: list[str]) -> list[tuple[str, str]]:
    """(backend, resource) for everything each backend lists; raw sockets are never
    listed by VISA, so a socket instrument appears only through the plan."""
    from pnbench.drivers.opening import list_visible, open_manager

    found = []
    for backend in backends:
        try:
            manager = open_manager(backend)
            found += [(backend, name) for name in list_visible(manager)]
        except PnbenchError as exc:
            found.append((backend, f"(cannot list: {exc})"))
        except Exception as exc:  # noqa: BLE001 - a backend failing must not end the app
            found.append((backend, f"(cannot list: {exc!r})"))
    return found


def identify_rows(rows: list[InstrumentRow], plan,
                  simulate: str | None = None) -> list[InstrumentRow]:
    """Ask each instrument for its identity (IEEE 488.2 *IDN?) and close again, through
    the bench layer a run opens its instruments with (`sweeps.bench.identify_roles`), so
    a real backend and the simulated bench (``DEVICE@pnsim``, in the plan or from
    ``simulate``) are asked the same way. Outputs are never switched."""
    from pnbench.drivers.sim.backend import backend_for
    from pnbench.sweeps.bench import identify_roles

    if plan is None:
        return list(rows)
    if simulate:  # as a run with --simulate: the plan's instruments on the simulated bench
        plan = plan.on_simulated_bench(backend_for(simulate, 0.0))
    asked = identify_roles(plan, [r.role for r in rows if r.role in plan.instruments])
    out = []
    for row in rows:
        answer = asked.get(row.role)
        if answer is None:
            out.append(row)
        elif isinstance(answer, str):
            out.append(replace(row, identity=answer, state="answered"))
        else:
            out.append(replace(row, identity="", state=f"error: {answer}"))
    return out
