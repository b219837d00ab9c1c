"""The guardian: a small process that switches the outputs off if the run process dies.

A run process that is killed outright (kill -9, the kernel's out-of-memory killer, a
crash in native code) runs no `finally`: its instruments keep sourcing whatever level
they were at, which for an SMU in reverse bias may be a hazardous voltage. So each run
with real instruments starts a guardian:

    python -m pnbench.sweeps.guardian RUN_DIR      (stdin: a pipe from the run process)

It blocks reading its stdin. When the pipe closes it takes the run folder's lock (free
once the run process has gone), reads run.json, and if the run is still marked
``running`` or ``paused`` it connects to each recorded instrument, ramps the source to
zero at the plan's ramp rate (as every other way out does), turns outputs and bias
off, then sends a thermal stage to the plan's standby temperature, confirms, and
records it in run.json (status ``interrupted``, ``guardian``) and run.log. A run that
ended normally is left alone. It ignores SIGINT and SIGHUP so a Ctrl-C or a closed
terminal cannot take it down with the run. Runs on the in-process simulated bench need
none (the bench dies with them).
"""

from __future__ import annotations

import signal
import subprocess
import sys
from pathlib import Path

LIVE = ("running", "paused", "starting")


def start(run_dir: str | Path):
    """Start the guardian of ``run_dir``; returns the Popen (close its stdin to release)."""
    return subprocess.Popen([sys.executable, "-m", "pnbench.sweeps.guardian", str(run_dir)],
                            stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)


def release(proc) -> None:
    """The run ended with its record written: close the pipe. The guardian then waits for
    the run folder to be closed, sees the final status and exits on its own."""
    try:
        proc.stdin.close()
    except OSError:
        pass


def guard(run_dir: Path) -> int:
    for sig in (signal.SIGINT, getattr(signal, "SIGHUP", None)):
        if sig is not None:
            signal.signal(sig, signal.SIG_IGN)
    while sys.stdin.buffer.read(4096):
        pass  # the run process never writes; EOF means it closed the pipe or died
    return rescue(run_dir)


def rescue(run_dir: Path, lock_timeout_s: float = 30.0) -> int:
    """Switch the outputs off if the run in ``run_dir`` was left live; 0 when nothing was
    needed or all went off, 3 when an output could not be confirmed off."""
    import time

    from pnbench.errors import PnbenchError
    from pnbench.sweeps.record import RunFolder, iso, read_run, utc_now

    try:  # a run that ended with its record written needs nothing, and no lock: taking
        # it would make a `resume` started at once find the folder in use
        ended = read_run(run_dir)
        if ended.get("status") not in LIVE or ended.get("simulated"):
            return 0
    except PnbenchError:
        pass  # torn or missing: look again under the lock
    end = time.monotonic() + lock_timeout_s
    while True:
        try:
            folder = RunFolder.reopen(run_dir)
            break
        except PnbenchError:
            if time.monotonic() > end:
                return 0  # someone holds the folder: a live run or a resume owns it
            time.sleep(0.05)
    try:
        run = folder.run
        if run.get("status") not in LIVE or run.get("simulated"):
            return 0
        prime, ramp = _last_level(run_dir)
        instruments = run.get("instruments") or {}
        report = {role: _off(role, info, prime, ramp, run_dir)  # sources first, stage last
                  for role, info in sorted(instruments.items(), key=lambda x: x[0] == "stage")}
        confirmed = bool(report) and all(ok for ok, _ in report.values())
        detail = "; ".join(f"{role}: {text}" for role, (_, text) in report.items())
        folder.update_run(status="interrupted", ended=iso(utc_now()),
                          reason="the run process ended without closing the run (killed "
                          "or crashed); the guardian switched the outputs off",
                          outputs_off_confirmed=confirmed,
                          guardian={"at": iso(utc_now()), "outputs_off_confirmed": confirmed,
                                    "detail": detail})
        folder.log(f"guardian: run process gone while {run.get('status')}; {detail}")
        return 0 if confirmed else 3
    finally:
        folder.close()


def _off(role: str, info: dict, prime: tuple[str, float] | None,
         ramp: tuple[float, float] | None, run_dir: Path | None = None) -> tuple[bool, str]:
    from pnbench.sweeps.bench import Connection, _open_role, prime_source, set_ramp

    try:
        conn = Connection(role, info["resource"], info.get("backend") or "@py",
                          info.get("dialect"), 2000,
                          stage=_stage_settings(run_dir) if role == "stage" else None)
        instrument = _open_role(conn)
    except Exception as exc:  # noqa: BLE001 - reported in run.json
        return False, f"cannot connect ({exc})"
    try:
        if role == "smu" and prime is not None:
            prime_source(instrument, *prime)
            if ramp is not None:  # the plan's rate; from the highest voltage it allows
                set_ramp(instrument, ramp[0])
                if prime[0] == "current":
                    instrument.limit = ramp[1]
        instrument.safe_off()
        if role == "stage":
            return True, f"standby at {instrument.standby_K:.6g} K, set point confirmed"
        return True, "off, confirmed"
    except Exception as exc:  # noqa: BLE001
        return False, f"NOT confirmed off ({exc})"
    finally:
        instrument.session.close()


def _last_level(run_dir: Path) -> tuple[tuple[str, float] | None,
                                         tuple[float, float] | None]:
    """Source and level of the SMU step in progress, so the source ramps down from it,
    and the plan's (ramp rate in V/s, highest voltage of its limits)."""
    try:
        from pnbench.sweeps.launch import plan_of_run
        from pnbench.sweeps.resume import last_smu_level, load_state

        plan = plan_of_run(run_dir)
    except Exception:  # noqa: BLE001 - without it the output still goes off, unramped
        return None, None
    ramp = (plan.limits.ramp_rate_V_per_s, plan.limits.highest_voltage_V())
    try:
        return last_smu_level(plan, load_state(run_dir, plan)), ramp
    except Exception:  # noqa: BLE001
        return None, ramp


def _stage_settings(run_dir: Path | None) -> dict | None:
    """The stage's limits and standby from the run's plan (the defaults without it)."""
    try:
        from pnbench.sweeps.bench import thermal_settings
        from pnbench.sweeps.launch import plan_of_run

        return thermal_settings(plan_of_run(run_dir))
    except Exception:  # noqa: BLE001 - standby at 25 degC still goes out
        return None


if __name__ == "__main__":
    sys.exit(guard(Path(sys.argv[1])))
