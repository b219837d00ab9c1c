"""In-process fake instruments with the roles' interface, for runner tests and the memory
benchmark: no sockets, no sleeping, a diode answered through `pnbench.modeling.junction`
(or a closed form for speed). They record every output change so tests can check that the
runner left everything off, and can be told to misbehave (compliance storms, overshoot,
faults after N readings)."""

from __future__ import annotations

import math
import random
import time
from dataclasses import dataclass, field

from pnbench.drivers.roles import LcrReading, SmuReading
from pnbench.errors import InstrumentError
from pnbench.modeling.params import DiodeParams
from pnbench.modeling.smallsignal import device_admittance


class FakeSession:
    def __init__(self, name: str) -> None:
        self.resource_name = name
        self.errors: list[tuple[int, str]] = []
        self.closed = False

    def drain_errors(self, context: str = "", check: bool = True):
        entries, self.errors = self.errors, []
        if entries and check:
            raise InstrumentError(f"{self.resource_name} reported an error after {context}: "
                                  + "; ".join(f"{c},{t}" for c, t in entries))
        return entries

    def close(self) -> None:
        self.closed = True


class FakeSmu:
    """Shockley diode with series resistance solved by a few Newton steps (fast)."""

    def __init__(self, params: DiodeParams | None = None, identity: str = "fake,SMU,1234,1",
                 fail_after: int | None = None, compliance_from: float | None = None,
                 overshoot: bool = False, noise_rel: float = 0.0,
                 io_delay_s: float = 0.0) -> None:
        self.p = params or DiodeParams(IS=1e-14, N=1.0, RS=0.5, BV=20.0, IBV=1e-6)
        self.identity = identity
        self.session = FakeSession("fake-smu")
        self.on = False
        self.source = None
        self.limit = None
        self.level = 0.0
        self.reads = 0
        self.fail_after = fail_after
        self.compliance_from = compliance_from
        self.overshoot = overshoot
        self.noise_rel = noise_rel
        self.io_delay_s = io_delay_s  # sleep per reading, as I/O would (frees the GIL)
        self._rng = random.Random(7)
        self.log: list[tuple[str, object]] = []
        self.max_abs_level_on = 0.0

    def configure(self, source="voltage", limit=1e-3, nplc=1.0, four_wire=False,
                  range_=None) -> None:
        self.source, self.limit, self.level = source, limit, 0.0
        self.log.append(("configure", source))

    def _current(self, v: float) -> float:
        p, vt = self.p, 0.025865 * self.p.N
        if v < -p.BV:
            return -p.IBV * math.exp(min((-v - p.BV) / vt, 60))
        i = p.IS * (math.exp(min(v / vt, 80)) - 1)
        for _ in range(30):  # Newton on f(i) = IS*(exp((v - i RS)/nvt) - 1) - i
            e = p.IS * math.exp(min((v - i * p.RS) / vt, 80))
            f = e - p.IS - i
            df = -e * p.RS / vt - 1
            step = f / df
            i -= step
            if abs(step) <= 1e-12 * max(abs(i), 1e-15):
                break
        return i

    def apply_and_read(self, level: float) -> SmuReading:
        if self.io_delay_s:
            time.sleep(self.io_delay_s)
        self.reads += 1
        if self.fail_after is not None and self.reads > self.fail_after:
            raise InstrumentError("fake-smu: connection lost")
        self.level = level
        if self.on:
            self.max_abs_level_on = max(self.max_abs_level_on, abs(level))
        if self.source == "voltage":
            i = self._current(level)
            if self.noise_rel:
                i *= 1 + self.noise_rel * self._rng.gauss(0.0, 1.0)
            comp = abs(i) >= self.limit or (self.compliance_from is not None
                                            and level >= self.compliance_from)
            if comp and not self.overshoot:
                i = math.copysign(min(abs(i), self.limit), i)
            return SmuReading(level, i, comp)
        v = self.p.N * 0.025865 * math.log(level / self.p.IS + 1) + level * self.p.RS
        comp = v >= self.limit
        return SmuReading(min(v, self.limit), level, comp)

    def output(self, on: bool) -> None:
        self.on = bool(on)
        self.log.append(("output", self.on))

    def output_is_on(self) -> bool:
        return self.on

    def ramp_to_zero(self, steps: int = 10) -> None:
        self.level = 0.0

    def safe_off(self) -> list[str]:
        self.level = 0.0
        self.on = False
        self.log.append(("safe_off", False))
        return []


class FakeLcr:
    def __init__(self, params: DiodeParams | None = None,
                 identity: str = "fake,LCR,5678,1") -> None:
        self.p = params or DiodeParams(IS=1e-14, N=1.0, RS=0.5, CJO=10e-12, VJ=0.7, M=0.5,
                                       TT=5e-9)
        self.identity = identity
        self.session = FakeSession("fake-lcr")
        self.bias_on = False
        self.ac_level_V = None
        self.log: list[tuple[str, object]] = []
        self.stray_F = 0.3e-12  # the fixture's, as its open correction measures it
        self.measured = {"open": False, "short": False}
        self.applied = {"open": False, "short": False}

    def configure(self, ac_level_V: float) -> None:
        self.ac_level_V = ac_level_V
        self.bias_on = False

    def apply_and_read(self, bias_V: float, frequency_Hz: float) -> LcrReading:
        y = complex(device_admittance(bias_V, frequency_Hz, self.p))
        return LcrReading(frequency_Hz, bias_V, y, 0.0, 0.0)

    def bias(self, on: bool) -> None:
        self.bias_on = bool(on)
        self.log.append(("bias", self.bias_on))

    def bias_is_on(self) -> bool:
        return self.bias_on

    def open_correction(self, timeout_ms: float = 120_000) -> None:
        self.measured["open"] = self.applied["open"] = True
        self.log.append(("correction", "open"))

    def short_correction(self, timeout_ms: float = 120_000) -> None:
        self.measured["short"] = self.applied["short"] = True
        self.log.append(("correction", "short"))

    def correction_data(self, which: str, frequency_Hz: float) -> tuple[float, float] | None:
        if not self.measured[which]:
            return (0.0, 0.0)
        return ((0.0, 2 * math.pi * frequency_Hz * self.stray_F) if which == "open"
                else (0.05, 0.0))

    def correction_state(self, which: str) -> bool | None:
        return self.applied[which]

    def set_correction_state(self, which: str, on: bool) -> bool:
        self.applied[which] = bool(on)
        return True

    def fixture_is(self, state: str) -> None:
        self.log.append(("fixture", state))

    def safe_off(self) -> list[str]:
        self.bias_on = False
        return []


@dataclass
class FakeBench:
    """Satisfies `sweeps.benchtypes.BenchLike`, as the real Bench does
    (tests/sweeps/test_bench_protocol.py checks both)."""

    roles: dict = field(default_factory=dict)
    last_off: dict = field(default_factory=dict)
    identity_changes: list = field(default_factory=list)
    sim: object | None = None
    off_fails: bool = False

    @property
    def smu(self):
        return self.roles.get("smu")

    @property
    def lcr(self):
        return self.roles.get("lcr")

    @property
    def instruments(self) -> dict:
        return {r: {"resource": f"fake-{r}", "backend": "fake", "dialect": None,
                    "identity": x.identity} for r, x in self.roles.items()}

    def safe_off(self) -> dict:
        report = {}
        for role, inst in self.roles.items():
            inst.safe_off()
            report[role] = not self.off_fails
        self.last_off = report
        return report

    def check_errors(self, role: str, context: str) -> None:
        inst = self.roles.get(role)
        if inst is not None:
            inst.session.drain_errors(context=context)

    def outputs_on(self) -> bool:
        smu, lcr = self.smu, self.lcr
        return bool((smu is not None and smu.on) or (lcr is not None and lcr.bias_on))
