"""What a bias point costs on the wire: the Smu role on the simulated bench against the bare
one-message round trip, and the separate write + query trap, all on loopback sockets.

    python tests/benchmarks/transport.py

Figures (each a ratio against the bare one-message query round trip measured here, on
the same socket and in the same run):

(a) role_point: one point through ``Smu.apply_and_read`` (set level, read, compliance
    query in one message) at a fixed level, so the bench's physics is cached: what the
    role and the three-unit message add to a round trip.
(b) write_then_query: the level in one write, the reading in a second message, on a plain
    pyvisa-py socket (Nagle's algorithm on, as pyvisa-py leaves it) and on the session's
    socket (TCP_NODELAY on). The first is the Nagle/delayed-ACK trap the README warns
    about (tens of ms a pair).
(c) sweep: points per second of a 200-point forward and reverse sweep through the Smu
    role at time scale 0 (every point a new level, so the physics is solved each time),
    against bare round trips per second.

Also reported: the instrument's own work per point (parsing, physics, noise), without
any socket. Last line: one JSON object with the figures.
"""

from __future__ import annotations

import json
import statistics
import time
import warnings

import numpy as np
import pyvisa

from pnbench.drivers.opening import open_session
from pnbench.drivers.roles import Smu
from pnbench.drivers.sim.bench import SimBench
from pnbench.drivers.sim.smu import SimSmu

DEVICE = "lh-qt16"


def _median_s(action, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def _instrument_only_s(bench: SimBench, repeats: int = 2000) -> float:
    smu = SimSmu(bench.device)
    for unit in (":SOUR:CURR:PROT 0.01", ":SENS:REM ON", ":OUTP ON"):
        smu.execute(unit)
    levels = np.linspace(0.3, 0.8, repeats)
    start = time.perf_counter()
    for level in levels:
        smu.begin_message()
        for unit in (f":SOUR:VOLT:LEV {float(level)!r}", ":READ?", ":SOUR:CURR:PROT:TRIP?"):
            smu.execute(unit)
    return (time.perf_counter() - start) / repeats


def main() -> dict:
    figures: dict[str, float] = {}
    with SimBench.start(DEVICE, time_scale=0.0) as bench:
        with open_session(bench.smu_resource, timeout_ms=5000) as session:
            raw = session._resource  # the same socket the role uses
            for _ in range(50):
                raw.query("*OPC?")
            bare = _median_s(lambda: raw.query("*OPC?"), 1000)
            smu = Smu(session)
            smu.configure("voltage", limit=1e-2, four_wire=True)
            smu.output(True)
            smu.apply_and_read(0.6)
            role_point = _median_s(lambda: smu.apply_and_read(0.6), 1000)

            levels = np.concatenate([np.linspace(0.0, 0.85, 150), np.linspace(-0.5, -50, 50)])
            start = time.perf_counter()
            for level in levels:
                smu.apply_and_read(float(level))
            sweep_s = time.perf_counter() - start
            write_nodelay = _median_s(
                lambda: (session.write(":SOUR:VOLT:LEV 0.6"), session.query(":READ?")), 100)
            smu.safe_off()

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            manager = pyvisa.ResourceManager("@py")
        plain = manager.open_resource(bench.smu_resource, read_termination="\n",
                                      write_termination="\n", timeout=5000)
        try:
            plain.write(":SENS:REM ON;:SOUR:CURR:PROT 0.01;:OUTP ON")
            plain.query("*OPC?")
            bare_plain = _median_s(lambda: plain.query("*OPC?"), 300)
            write_nagle = _median_s(
                lambda: (plain.write(":SOUR:VOLT:LEV 0.6"), plain.query(":READ?")), 12)
            one_message_plain = _median_s(lambda: plain.query(":SOUR:VOLT:LEV 0.6;:READ?"), 300)
            plain.write(":OUTP OFF")
            plain.query("*OPC?")
        finally:
            plain.close()
        instrument_only = _instrument_only_s(bench)

    figures = {
        "bare_round_trip_ms": bare * 1e3,
        "role_point_ms": role_point * 1e3,
        "role_point_over_bare": role_point / bare,
        "write_then_query_nodelay_ms": write_nodelay * 1e3,
        "write_then_query_nodelay_over_bare": write_nodelay / bare,
        "bare_round_trip_nagle_socket_ms": bare_plain * 1e3,
        "one_message_nagle_socket_ms": one_message_plain * 1e3,
        "write_then_query_nagle_ms": write_nagle * 1e3,
        "write_then_query_nagle_over_one_message": write_nagle / one_message_plain,
        "write_then_query_nagle_over_bare": write_nagle / bare_plain,
        "sweep_points": float(levels.size),
        "sweep_points_per_s": levels.size / sweep_s,
        "bare_round_trips_per_s": 1.0 / bare,
        "sweep_points_per_s_over_bare": (levels.size / sweep_s) * bare,
        "instrument_only_point_us": instrument_only * 1e6,
    }
    print(f"bare one-message round trip (*OPC?):          {bare * 1e3:8.3f} ms")
    print(f"(a) point through Smu role (fixed level):     {role_point * 1e3:8.3f} ms "
          f"= {role_point / bare:.2f} x bare")
    print(f"(b) write + query, TCP_NODELAY (session):     {write_nodelay * 1e3:8.3f} ms "
          f"= {write_nodelay / bare:.2f} x bare")
    print(f"    write + query, Nagle on (plain pyvisa-py): {write_nagle * 1e3:8.3f} ms "
          f"= {write_nagle / one_message_plain:.0f} x the same as one message "
          f"({one_message_plain * 1e3:.3f} ms)")
    print(f"(c) sweep through Smu role, time scale 0:     {levels.size / sweep_s:8.0f} points/s "
          f"= {(levels.size / sweep_s) * bare:.2f} x bare round trips/s ({1 / bare:.0f}/s)")
    print(f"    instrument work per point (no socket):    {instrument_only * 1e6:8.1f} us")
    print(json.dumps({k: round(v, 6) for k, v in figures.items()}))
    return figures


if __name__ == "__main__":
    main()
