"""The simulated bench: an SMU, an LCR meter and a thermal stage served over loopback TCP.

Each instrument listens on its own port (chosen by the OS unless given) as a raw-socket
resource ``TCPIP0::127.0.0.1::PORT::SOCKET``: newline-terminated program messages in, one
newline-terminated reply out per message that holds queries (the units' responses joined
by ``;``). Nothing listens beyond loopback unless the caller names another address.

Clients may connect one after another; each instrument serves one client at a time (a
second connection waits until the first one leaves). When a client disconnects, or the
connection drops for any reason, the instrument turns its output off, as an instrument
with a connection watchdog would; `output_log()` tells who turned an output off
("command", "reset", "disconnect" or "close"), so a test can tell a client that switched
off properly from one the watchdog had to rescue (start with off_on_disconnect=False to
see what a client leaves behind).

Instrument time (settling, integration, parsing) is slept times `time_scale`: 0 answers
as fast as the CPU allows, 1 takes as long as the simulated instruments would.

Faults (`inject`, or [[fault]] tables of the device file) fire once the instrument has
handled `after` more command units, `repeat` times (0 = for ever), each time re-armed with
the same `after` counted from the firing:
  drop      close the connection instead of handling the next unit
  stall     hold the next reply back `seconds` (then send it late, if still connected)
  garbage   send `text` instead of the next reply
  error     push (`code`, `message`) into the error queue
  overflow  the next reading answers the overflow marker 9.9E+37
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import threading
from dataclasses import dataclass, field
from pathlib import Path

from pnbench.drivers import scpi
from pnbench.drivers.sim.device import (
    INSTRUMENTS,
    FaultSpec,
    SimDevice,
    bundled_device,
    parse_fault,
    resolve_device,
)
from pnbench.drivers.sim.instruments import SimInstrumentWithOutput, SimLcr, SimSmu
from pnbench.drivers.sim.stage import SimClock, SimStage, ThermalModel
from pnbench.errors import BadInput, InstrumentError

__all__ = ["SimBench", "bundled_device"]

#: A program message longer than this without a newline is discarded (-223).
MAX_MESSAGE_BYTES = 1 << 20
_START_TIMEOUT_S = 10.0


@dataclass
class _Armed:
    spec: FaultSpec
    handled: int = 0
    fired: int = 0


@dataclass
class _Port:
    """One instrument on one listening socket."""

    instrument: SimInstrumentWithOutput
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    faults: list[_Armed] = field(default_factory=list)
    tasks: set[asyncio.Task] = field(default_factory=set)
    server: asyncio.base_events.Server | None = None
    port: int = 0
    stall_s: float = 0.0
    garbage: str | None = None

    def due(self) -> list[FaultSpec]:
        """Faults that fire before the next unit; re-arms or retires them."""
        fired = []
        for armed in list(self.faults):
            if armed.handled >= armed.spec.after:
                fired.append(armed.spec)
                armed.fired += 1
                armed.handled = 0
                if armed.spec.repeat and armed.fired >= armed.spec.repeat:
                    self.faults.remove(armed)
        return fired

    def count_unit(self) -> None:
        for armed in self.faults:
            armed.handled += 1


class SimBench:
    """The simulated instruments, served from an asyncio loop in a daemon thread.

    Start with `SimBench.start(...)`; use as a context manager or call `close()`. The
    device follows the thermal stage's temperature (drivers/sim/stage.py), on `clock`.
    """

    def __init__(self, device: SimDevice, time_scale: float, host: str,
                 off_on_disconnect: bool, clock: SimClock | None = None) -> None:
        self.device = device
        self.time_scale = time_scale
        self.clock = clock or SimClock(time_scale)
        stage = device.stage
        self.thermal = ThermalModel(self.clock, device.temperature_K,
                                    stage["time_constant_s"],
                                    (stage["reach_low_K"], stage["reach_high_K"]))
        self.host = host
        self.off_on_disconnect = off_on_disconnect
        self._log: list[tuple[str, bool, str]] = []
        self._closing = False
        self._ports: dict[str, _Port] = {}
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None

    # --- starting and stopping ---------------------------------------------------------
    @classmethod
    def start(cls, device: str | Path | SimDevice, *, time_scale: float = 0.0,
              smu_port: int = 0, lcr_port: int = 0, host: str = "127.0.0.1",
              off_on_disconnect: bool = True, stage_port: int = 0,
              clock: SimClock | None = None) -> SimBench:
        """Load the device (a SimDevice, a file, or a bundled name) and start serving.

        ``clock``: simulated time for the thermal stage; a caller that waits through
        it passes ``SimClock(time_scale, driven=True)`` (see drivers/sim/stage.py)."""
        if not (isinstance(time_scale, (int, float)) and math.isfinite(time_scale)
                and time_scale >= 0):
            raise BadInput(f"time scale {time_scale!r}: expected a number >= 0 "
                           "(0 = as fast as possible, 1 = real instrument time)")
        for name, port in (("SMU", smu_port), ("LCR", lcr_port), ("stage", stage_port)):
            if not (isinstance(port, int) and 0 <= port <= 65535):
                raise BadInput(f"{name} port {port!r}: expected 0 (any free port) to 65535")
        bench = cls(resolve_device(device), float(time_scale), host, off_on_disconnect, clock)
        bench._run_thread(smu_port, lcr_port, stage_port)
        return bench

    def _run_thread(self, smu_port: int, lcr_port: int, stage_port: int = 0) -> None:
        ready = threading.Event()
        failure: list[BaseException] = []

        def main() -> None:
            loop = asyncio.new_event_loop()
            self._loop = loop
            try:
                loop.run_until_complete(self._open(smu_port, lcr_port, stage_port))
            except BaseException as exc:  # noqa: BLE001 - reported to the starting thread
                failure.append(exc)
                ready.set()
                loop.run_until_complete(self._shutdown())
                loop.close()
                return
            ready.set()
            loop.run_forever()
            loop.close()

        self._thread = threading.Thread(target=main, name="pnbench-simbench", daemon=True)
        self._thread.start()
        if not ready.wait(_START_TIMEOUT_S):
            raise InstrumentError("the simulated bench did not start within "
                                  f"{_START_TIMEOUT_S:g} s")
        if failure:
            self._thread.join()
            exc = failure[0]
            if isinstance(exc, OSError):
                raise InstrumentError(f"simulated bench cannot listen on {self.host} "
                                      f"(SMU port {smu_port}, LCR port {lcr_port}, "
                                      f"stage port {stage_port}): "
                                      f"{exc.strerror or exc}") from None
            raise exc

    async def _open(self, smu_port: int, lcr_port: int, stage_port: int) -> None:
        hook, thermal = self._record_output, self.thermal
        self._ports = {"smu": _Port(SimSmu(self.device, hook, thermal)),
                       "lcr": _Port(SimLcr(self.device, hook, thermal)),
                       "stage": _Port(SimStage(self.device, thermal))}
        for spec in self.device.faults:
            self._ports[spec.instrument].faults.append(_Armed(spec))
        for name, wanted in (("smu", smu_port), ("lcr", lcr_port), ("stage", stage_port)):
            port = self._ports[name]

            async def client(reader, writer, port=port):
                await self._client(port, reader, writer)

            port.server = await asyncio.start_server(client, self.host, wanted)
            port.port = port.server.sockets[0].getsockname()[1]

    def close(self) -> None:
        """Turn both outputs off, drop every client, stop serving. Safe to call twice."""
        loop, thread = self._loop, self._thread
        if loop is None or thread is None or not thread.is_alive():
            return
        with contextlib.suppress(RuntimeError):
            future = asyncio.run_coroutine_threadsafe(self._shutdown(), loop)
            with contextlib.suppress(Exception):
                future.result(_START_TIMEOUT_S)
            loop.call_soon_threadsafe(loop.stop)
        thread.join(_START_TIMEOUT_S)

    async def _shutdown(self) -> None:
        self._closing = True
        for port in self._ports.values():
            if port.server is not None:
                port.server.close()
            for task in list(port.tasks):
                task.cancel()
            if port.tasks:
                await asyncio.gather(*port.tasks, return_exceptions=True)
            port.instrument.set_output(False, "close")
        for port in self._ports.values():
            if port.server is not None:
                with contextlib.suppress(Exception):
                    await port.server.wait_closed()

    def __enter__(self) -> SimBench:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    # --- what tests and commands ask --------------------------------------------------
    def _resource(self, name: str) -> str:
        host = "127.0.0.1" if self.host in ("", "0.0.0.0", "::") else self.host
        return f"TCPIP0::{host}::{self._ports[name].port}::SOCKET"

    @property
    def smu_resource(self) -> str:
        """VISA resource string of the simulated SMU (raw socket)."""
        return self._resource("smu")

    @property
    def lcr_resource(self) -> str:
        """VISA resource string of the simulated LCR meter (raw socket)."""
        return self._resource("lcr")

    @property
    def stage_resource(self) -> str:
        """VISA resource string of the simulated thermal stage (raw socket)."""
        return self._resource("stage")

    def device_temperature_K(self) -> float:
        """The simulated device's temperature now (no reading noise)."""
        return self.thermal.temperature_K()

    def outputs(self) -> dict[str, bool]:
        """Whether the SMU output and the LCR bias are on right now."""
        return {"smu_output": self._ports["smu"].instrument.output,
                "lcr_bias": self._ports["lcr"].instrument.output}

    def output_log(self) -> list[tuple[str, bool, str]]:
        """Every output change so far as (instrument, state, cause), oldest first."""
        return list(self._log)

    def _record_output(self, instrument: str, state: bool, cause: str) -> None:
        self._log.append((instrument, state, cause))

    def inject(self, instrument: str, fault: str, **options: object) -> None:
        """Arm a fault: drop, stall, garbage, error or overflow (see the module doc).

        Options: after, repeat (all kinds), seconds (stall), text (garbage), code and
        message (error). Bad names or values raise DeviceFileError naming them.
        """
        spec = parse_fault({"instrument": instrument, "kind": fault, **options},
                           where="SimBench.inject")
        self._in_loop(lambda: self._ports[spec.instrument].faults.append(_Armed(spec)))

    def clear_faults(self, instrument: str | None = None) -> None:
        """Disarm every fault not fired yet (on one instrument, or both)."""
        names = INSTRUMENTS if instrument is None else (instrument,)
        self._in_loop(lambda: [self._ports[n].faults.clear() for n in names])

    def _in_loop(self, action) -> None:
        if self._loop is None or self._thread is None or not self._thread.is_alive():
            raise InstrumentError("the simulated bench is closed")

        async def call() -> None:
            action()

        asyncio.run_coroutine_threadsafe(call(), self._loop).result(_START_TIMEOUT_S)

    # --- serving ----------------------------------------------------------------------
    async def _client(self, port: _Port, reader: asyncio.StreamReader,
                      writer: asyncio.StreamWriter) -> None:
        task = asyncio.current_task()
        port.tasks.add(task)
        try:
            async with port.lock:
                await self._serve(port, reader, writer)
        except asyncio.CancelledError:
            pass
        finally:
            port.tasks.discard(task)
            if self.off_on_disconnect or self._closing:
                port.instrument.set_output(False, "close" if self._closing else "disconnect")
            writer.close()
            with contextlib.suppress(Exception):
                await writer.wait_closed()

    async def _serve(self, port: _Port, reader: asyncio.StreamReader,
                     writer: asyncio.StreamWriter) -> None:
        lines: asyncio.Queue[str | None] = asyncio.Queue()
        gone = asyncio.Event()
        pump = asyncio.create_task(self._pump(reader, lines, gone, port))
        try:
            while True:
                line = await lines.get()
                if line is None:
                    return
                responses, busy_s, drop = self._message(port, line)
                if busy_s > 0 and self.time_scale > 0:
                    if await self._wait(busy_s * self.time_scale, gone):
                        return
                if drop:
                    return
                if not responses:
                    continue
                reply = ";".join(responses)
                if port.garbage is not None:
                    reply, port.garbage = port.garbage, None
                if port.stall_s > 0:
                    stall, port.stall_s = port.stall_s, 0.0
                    if await self._wait(stall, gone):
                        return
                try:
                    writer.write((reply + "\n").encode("latin-1", errors="replace"))
                    await writer.drain()
                except (ConnectionError, OSError):
                    return
        finally:
            pump.cancel()
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await pump

    @staticmethod
    async def _wait(seconds: float, gone: asyncio.Event) -> bool:
        """Sleep, waking early if the client goes; True when it went."""
        with contextlib.suppress(asyncio.TimeoutError):
            await asyncio.wait_for(gone.wait(), seconds)
        return gone.is_set()

    @staticmethod
    async def _pump(reader: asyncio.StreamReader, lines: asyncio.Queue, gone: asyncio.Event,
                    port: _Port) -> None:
        """Split the byte stream into lines; None (and `gone`) when the client leaves."""
        buffer = b""
        overlong = False
        try:
            while True:
                data = await reader.read(65536)
                if not data:
                    break
                buffer += data
                *complete, buffer = buffer.split(b"\n")
                for raw in complete:
                    if overlong:
                        overlong = False
                        continue
                    await lines.put(raw.decode("ascii", errors="replace").rstrip("\r"))
                if len(buffer) > MAX_MESSAGE_BYTES:
                    buffer, overlong = b"", True
                    port.instrument.push_error(-223, "message longer than "
                                               f"{MAX_MESSAGE_BYTES} bytes discarded")
        except (ConnectionError, OSError):
            pass
        finally:
            gone.set()
            await lines.put(None)

    def _message(self, port: _Port, message: str) -> tuple[list[str], float, bool]:
        """Run one program message: (responses, instrument time, drop the connection)."""
        instrument = port.instrument
        instrument.begin_message()
        try:
            units = scpi.split_units(message, ";")
        except ValueError as exc:
            instrument.push_error(-102, str(exc))
            units = []
        responses: list[str] = []
        busy_s = 0.0
        for unit in units:
            for spec in port.due():
                if spec.kind == "drop":
                    return responses, busy_s, True
                if spec.kind == "error":
                    instrument.push_entry(int(spec.option("code")), str(spec.option("message")))
                elif spec.kind == "overflow":
                    instrument.overflow_pending += 1
                elif spec.kind == "stall":
                    port.stall_s = float(spec.option("seconds"))
                elif spec.kind == "garbage":
                    port.garbage = str(spec.option("text"))
            result = instrument.execute(unit)
            port.count_unit()
            busy_s += result.busy_s
            if result.response is not None:
                responses.append(result.response)
            if result.abort:
                break
        return responses, busy_s, False
