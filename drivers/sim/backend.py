"""The simulated bench as a VISA backend string, the way pyvisa-sim is ``FILE.yaml@sim``:

    backend  = "lh-vc510@pnsim"                     (time scale 1)
    backend  = "lh-vc510@pnsim:time_scale=0"        (as fast as possible)
    backend  = "my-dut.toml@pnsim:time_scale=0.5,watchdog=off"
    resource = "PNSIM::SMU", "PNSIM::LCR" or "PNSIM::STAGE"

The part before ``@pnsim`` is a bundled device name or a device file; the options after
``:`` are the bench's time scale and whether its connection watchdog switches an output
off when a client disconnects (``watchdog=off`` lets a test see what a client leaves
behind). `open_session` opens such a resource by starting the bench in-process (or
joining the one already running for the same string), so nothing above the drivers
passes simulate or time-scale parameters around: choosing the simulated bench is
choosing a backend, and `--simulate DUT --time-scale X` on the command line only writes
this string into the plan's instruments.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass

from pnbench.errors import BadInput

SUFFIX = "@pnsim"
RESOURCES = {"smu": "PNSIM::SMU", "lcr": "PNSIM::LCR", "stage": "PNSIM::STAGE"}


@dataclass(frozen=True)
class SimSpec:
    device: str
    time_scale: float = 1.0
    watchdog: bool = True

    @property
    def backend(self) -> str:
        options = []
        if self.time_scale != 1.0:
            options.append(f"time_scale={self.time_scale:g}")
        if not self.watchdog:
            options.append("watchdog=off")
        return self.device + SUFFIX + (":" + ",".join(options) if options else "")


def is_sim_backend(backend: str | None) -> bool:
    return isinstance(backend, str) and SUFFIX in backend


def backend_for(device: str, time_scale: float = 1.0, watchdog: bool = True) -> str:
    """The backend string of the simulated bench with ``device``."""
    return SimSpec(str(device), float(time_scale), watchdog).backend


def parse(backend: str) -> SimSpec:
    """The simulated bench a backend string names; BadInput when it names none."""
    device, sep, rest = backend.rpartition(SUFFIX)
    if not sep or not device.strip():
        raise BadInput(f"backend {backend!r}: expected DEVICE{SUFFIX}[:time_scale=X], e.g. "
                       f"lh-vc510{SUFFIX}:time_scale=0")
    time_scale, watchdog = 1.0, True
    options = rest[1:] if rest.startswith(":") else rest
    if rest and not rest.startswith(":"):
        raise BadInput(f"backend {backend!r}: options follow a ':' after {SUFFIX}")
    for item in filter(None, options.split(",")):
        key, _, value = item.partition("=")
        if key == "time_scale":
            try:
                time_scale = float(value)
            except ValueError:
                time_scale = math.nan
            if not (math.isfinite(time_scale) and 0 <= time_scale <= 1000):
                raise BadInput(f"backend {backend!r}: time_scale must be a number from 0 "
                               "to 1000")
        elif key == "watchdog" and value in ("on", "off"):
            watchdog = value == "on"
        else:
            raise BadInput(f"backend {backend!r}: unknown option {item!r} (time_scale=X, "
                           "watchdog=on|off)")
    return SimSpec(device.strip(), time_scale, watchdog)


def role_of(resource: str) -> str:
    for role, name in RESOURCES.items():
        if resource.strip().upper() == name:
            return role
    raise BadInput(f"resource {resource!r}: the simulated bench has "
                   f"{', '.join(RESOURCES.values())}")


class _Registry:
    """Running simulated benches by backend string, shared by every session on them and
    closed when the last user lets go."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._benches: dict[str, list] = {}  # backend -> [SimBench, users]

    def acquire(self, backend: str):
        from pnbench.drivers.sim.bench import SimBench
        from pnbench.drivers.sim.stage import SimClock

        spec = parse(backend)
        key = spec.backend
        with self._lock:
            entry = self._benches.get(key)
            if entry is None:
                # In-process: the runner waits through the bench's clock (a stage's soak
                # at time scale 0 takes no wall time), so the clock is a driven one.
                bench = SimBench.start(spec.device, time_scale=spec.time_scale,
                                       off_on_disconnect=spec.watchdog,
                                       clock=SimClock(spec.time_scale, driven=True))
                entry = self._benches[key] = [bench, 0]
            entry[1] += 1
            return entry[0]

    def release(self, backend: str) -> None:
        key = parse(backend).backend
        with self._lock:
            entry = self._benches.get(key)
            if entry is None:
                return
            entry[1] -= 1
            if entry[1] > 0:
                return
            del self._benches[key]
        entry[0].close()

    def running(self, backend: str):
        """The bench serving ``backend`` right now, or None."""
        with self._lock:
            entry = self._benches.get(parse(backend).backend)
            return entry[0] if entry is not None else None


REGISTRY = _Registry()


def open_sim_session(resource: str, backend: str, timeout_ms: int, dialect):
    """A session on the simulated instrument ``resource`` of the bench ``backend``; the
    bench lives while any session on it (or `acquire` holder) does."""
    from pnbench.drivers.opening import open_session

    role = role_of(resource)
    bench = REGISTRY.acquire(backend)
    try:
        address = getattr(bench, f"{role}_resource")
        session = open_session(address, "@py", timeout_ms, dialect)
    except BaseException:
        REGISTRY.release(backend)
        raise
    session.resource_name = RESOURCES[role]
    session.backend = backend
    session.on_close = lambda: REGISTRY.release(backend)
    return session
