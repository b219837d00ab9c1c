"""`pnbench probe`: find instruments, identify one, check it understands a dialect.

Without RESOURCE it lists the VISA resources the backend can see, each with its reply to
the identification query (short timeout each). With RESOURCE it identifies that
instrument; with --role it also sends the dialect's configuration commands for that role
and checks the instrument's error queue stays empty, without turning any output on. An
instrument whose output (or DC bias) is already on is left untouched. A thermal stage
(--role stage) is read and sent back the set point it already holds, so nothing moves.
"""

from __future__ import annotations

import argparse
import contextlib
import json

from pnbench.errors import BadInput, InstrumentError, SafetyStop
from pnbench.tui.commands.options import TIME_SCALE_MAX, integer, number

HELP = "list visible instruments, or identify one and check it accepts a dialect"

#: Per-resource timeout when listing: a silent port must not hold the list up.
LIST_TIMEOUT_MS = 500


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("resource", nargs="?", metavar="RESOURCE",
                        help="VISA resource to probe, e.g. TCPIP0::192.0.2.20::5025::SOCKET "
                             "(default: list every visible resource)")
    parser.add_argument("--role", choices=("smu", "lcr", "stage"),
                        help="also check the dialect's configuration commands for this role")
    parser.add_argument("--dialect", metavar="FILE",
                        help="dialect file (TOML) to check (default: the built-in SCPI dialect)")
    parser.add_argument("--backend", default="@py", metavar="B",
                        help="VISA backend: @py (default), the path of a VISA library, or "
                             "FILE.yaml@sim for pyvisa-sim")
    parser.add_argument("--timeout-ms", type=integer(1, 3_600_000), default=2000, metavar="MS",
                        help="reply timeout for RESOURCE (default 2000)")
    parser.add_argument("--simulate", metavar="DUT.toml",
                        help="probe the simulated bench with this device instead (RESOURCE "
                             "is then the role's simulated instrument)")
    parser.add_argument("--time-scale", type=number(0.0, TIME_SCALE_MAX), default=0.0, metavar="X",
                        help="with --simulate: instrument time factor (default 0)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


def _list(backend: str, dialect) -> dict:
    from pnbench.drivers.opening import list_visible, open_manager, open_session

    rows = []
    for name in list_visible(open_manager(backend)):
        row = {"resource": name}
        try:
            with open_session(name, backend, LIST_TIMEOUT_MS, dialect) as session:
                row["identity"] = session.identify()
        except InstrumentError as exc:
            row["error"] = str(exc)
        rows.append(row)
    return {"backend": backend, "resources": rows}


@contextlib.contextmanager
def _left_off(role, report: dict):
    """Leave ``role`` off on every way out of the checks: after a fault (the fault is the
    error that matters, not one from switching off an output that was off) and after the
    checks, whose safe-off notes go into the report."""
    try:
        yield
    except BaseException:
        with contextlib.suppress(InstrumentError):
            role.safe_off()
        raise
    report["safe_off_notes"] = role.safe_off()


def _check_smu(session, dialect, report: dict) -> None:
    from pnbench.drivers.roles import Smu

    smu = Smu(session, dialect)
    if smu.output_is_on():
        raise SafetyStop(f"{session.resource_name}: the SMU output is ON; probe changes no "
                         "settings of an instrument that is sourcing. Turn it off first.")
    with _left_off(smu, report):
        smu.configure("current", limit=1.0)
        smu.configure("voltage", limit=1e-4)
        c = smu.commands
        for key in ("tripped_sourcing_voltage", "tripped_sourcing_current"):
            query = getattr(c, key)
            if query:
                report["checks"][key] = session.query(query)
        session.drain_errors(context="the compliance status queries")
    report["checks"]["configuration"] = "accepted (voltage and current sourcing)"
    report["checks"]["output"] = "off"


def _check_lcr(session, dialect, report: dict) -> None:
    from pnbench.drivers.roles import LcrMeter

    lcr = LcrMeter(session, dialect)
    if lcr.bias_is_on():
        raise SafetyStop(f"{session.resource_name}: the LCR meter's DC bias is ON; probe "
                         "changes no settings of an instrument that is biasing a device.")
    with _left_off(lcr, report):
        lcr.configure(0.02)
        reading = lcr.apply_and_read(0.0, 1000.0)  # bias level 0 with the bias off
        session.drain_errors(context="a reading at 1 kHz")
    report["checks"]["configuration"] = f"accepted (form {lcr.form}, AC level 20 mV)"
    report["checks"]["reading_1kHz"] = {"form": lcr.form, "primary": reading.primary,
                                        "secondary": reading.secondary}
    report["checks"]["bias"] = "off"


def _check_stage(session, dialect, report: dict) -> None:
    """Read the stage and send back the set point it already holds: nothing moves."""
    from pnbench.drivers.stage import StageLimits, ThermalStage

    stage = ThermalStage(session, dialect, StageLimits(0.001, 1e6))
    before = stage.read()
    stage.set_point(before.set_point_K)
    after = stage.read()
    report["checks"]["set_point_K"] = after.set_point_K
    report["checks"]["temperature_K"] = after.temperature_K
    if after.regulating is not None:
        report["checks"]["regulating"] = "on" if after.regulating else "off"
    report["checks"]["configuration"] = ("accepted (its own set point sent back; nothing "
                                         "changed)")


def _probe_one(resource: str, backend: str, timeout_ms: int, dialect, role: str | None) -> dict:
    from pnbench.drivers.opening import open_session

    report: dict = {"resource": resource, "backend": backend, "dialect": dialect.source,
                    "role": role, "checks": {}}
    with open_session(resource, backend, timeout_ms, dialect) as session:
        report["identity"] = session.identify()
        report["nodelay"] = session.nodelay
        leftover = session.drain_errors(check=False)
        if leftover:
            report["errors_before_probe"] = [list(e) for e in leftover]
        if role == "smu":
            _check_smu(session, dialect, report)
        elif role == "lcr":
            _check_lcr(session, dialect, report)
        elif role == "stage":
            _check_stage(session, dialect, report)
    return report


#: The reading forms' two quantities, with their units, for the probe's lines.
FORM_QUANTITIES = {
    "parallel": (("Cp", "F"), ("Gp", "S")), "parallel_r": (("Cp", "F"), ("Rp", "ohm")),
    "parallel_d": (("Cp", "F"), ("D", "")), "series": (("Cs", "F"), ("Rs", "ohm")),
    "series_d": (("Cs", "F"), ("D", "")), "admittance": (("G", "S"), ("B", "S")),
    "impedance": (("R", "ohm"), ("X", "ohm")),
}


def check_text(key: str, value) -> str:
    """One check as a line a person reads (a reading as quantities with units)."""
    from pnbench.sweeps.quantities import format_quantity

    if key == "reading_1kHz" and isinstance(value, dict):
        form = str(value.get("form", ""))
        names = FORM_QUANTITIES.get(form.lower(), (("primary", ""), ("secondary", "")))
        parts = [f"{name} = {format_quantity(float(value[field]), unit, 4)}"
                 for (name, unit), field in zip(names, ("primary", "secondary"), strict=True)]
        return f"{', '.join(parts)} at 1 kHz, 0 V bias (form {form})"
    return str(value)


def _print(report: dict) -> None:
    if "resources" in report:
        rows = report["resources"]
        if not rows:
            print(f"no VISA resources visible through backend {report['backend']}. Raw TCP "
                  "socket instruments are never listed; probe one by name, e.g.\n"
                  "  pnbench probe TCPIP0::192.0.2.20::5025::SOCKET --role smu")
        for row in rows:
            print(f"{row['resource']}  {row.get('identity') or '(no answer)'}")
        return
    print(f"{report['resource']}  {report['identity']}")
    for code, message in report.get("errors_before_probe", []):
        print(f"  note: error queue held {code},\"{message}\" before the probe")
    for key, value in report["checks"].items():
        print(f"  {key}: {check_text(key, value)}")
    for note in report.get("safe_off_notes", []):
        print(f"  note: {note}")
    if report["role"]:
        print(f"  dialect {report['dialect']} works for the {report['role'].upper()} role")


def run(args: argparse.Namespace) -> int:
    from pnbench.drivers.dialect import load_dialect

    if args.role and not (args.resource or args.simulate):
        raise BadInput("--role needs a RESOURCE (or --simulate) to check; "
                       "without one probe only lists the visible instruments")
    if args.resource and args.simulate:
        raise BadInput("give RESOURCE or --simulate, not both (with "
                       "--simulate the role's simulated instrument is probed)")
    dialect = load_dialect(args.dialect)
    if args.role:
        dialect.require(args.role)
    if args.simulate:
        from pnbench.drivers.sim.bench import SimBench

        with SimBench.start(args.simulate, time_scale=args.time_scale) as bench:
            roles = [args.role] if args.role else ["smu", "lcr", "stage"]
            reports = [_probe_one(getattr(bench, f"{r}_resource"), "@py", args.timeout_ms,
                                  dialect, r if args.role else None) for r in roles]
        report = reports[0] if args.role else {
            "backend": "simulated bench",
            "resources": [{"resource": r["resource"], "identity": r["identity"]}
                          for r in reports]}
    elif args.resource:
        report = _probe_one(args.resource, args.backend, args.timeout_ms, dialect, args.role)
    else:
        report = _list(args.backend, dialect)
    if args.json:
        print(json.dumps(report))
    else:
        _print(report)
    return 0
