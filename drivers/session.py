"""One small session interface over any pyvisa resource and backend.

`drivers.opening.open_session` opens a resource and returns a `Session` whose every
failure is an `InstrumentError` that says which instrument, which command and what
happened: a timeout names the command that hung, a resource that is not there lists
the ones that are, an empty or undecodable reply and a lost connection are named as such.

On raw TCP socket resources the session sets TCP_NODELAY: without it a separate write and
query cost tens of milliseconds per pair on loopback (Nagle's algorithm meeting a delayed
acknowledgement). Roles still send one message per bias point where the dialect allows.
"""

from __future__ import annotations

import contextlib
import socket
import time
from collections.abc import Iterator

from pnbench.drivers import scpi
from pnbench.drivers.dialect import Dialect
from pnbench.errors import InstrumentError

#: Most entries read from an error queue before giving up on it emptying.
MAX_ERROR_ENTRIES = 64


def _socket_of(resource) -> socket.socket | None:
    """The TCP socket under a pyvisa-py socket session, if there is one."""
    try:
        backend_session = resource.visalib.sessions[resource.session]
    except (AttributeError, KeyError, TypeError, Exception):  # noqa: BLE001 - other backends
        return None
    sock = getattr(backend_session, "interface", None)
    if isinstance(sock, socket.socket) and sock.type == socket.SOCK_STREAM and sock.family in (
        socket.AF_INET, socket.AF_INET6
    ):
        return sock
    return None


class Session:
    """An open instrument. Roles and the probe command talk through this only.

    Not thread-safe: one thread (the acquisition thread) owns a session at a time.
    """

    def __init__(self, resource, resource_name: str, dialect: Dialect, backend: str) -> None:
        self._resource = resource
        self.resource_name = resource_name
        self.dialect = dialect
        self.backend = backend
        self._socket = _socket_of(resource)
        self.nodelay = self._set_nodelay()
        self._closed = False
        self.on_close = None  # called once after closing (the simulated bench's release)
        self._suspect = False
        self._identity: str | None = None

    # --- plumbing --------------------------------------------------------------------
    def _set_nodelay(self) -> bool:
        sock = self._socket
        if sock is None:
            return False
        try:
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            return sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0
        except OSError:
            return False

    def _peer_gone(self) -> bool:
        """Whether the far end of a socket session has closed it."""
        dontwait = getattr(socket, "MSG_DONTWAIT", 0)  # absent on some platforms
        if self._socket is None or not dontwait:
            return False
        try:
            data = self._socket.recv(1, socket.MSG_PEEK | dontwait)
        except BlockingIOError:
            return False
        except OSError:
            return True
        return data == b""

    def _fail(self, action: str, message: str, exc: BaseException) -> InstrumentError:
        import pyvisa

        name = self.resource_name
        if self._closed:
            return InstrumentError(f"{name}: the session is closed; cannot {action} {message!r}")
        if isinstance(exc, pyvisa.errors.VisaIOError):
            if exc.error_code == pyvisa.constants.StatusCode.error_timeout:
                if self._peer_gone():
                    return InstrumentError(
                        f"{name}: connection lost (the instrument closed it) while waiting "
                        f"for the reply to {message!r}")
                self._flush_input()
                self._suspect = True
                return InstrumentError(
                    f"{name}: no reply within {self._resource.timeout:.0f} ms to {message!r} "
                    "(check the command and the instrument's state; a long measurement "
                    "needs a longer timeout)")
            if exc.error_code == pyvisa.constants.StatusCode.error_connection_lost:
                return InstrumentError(f"{name}: connection lost while trying to {action} "
                                       f"{message!r}")
            return InstrumentError(f"{name}: VISA error while trying to {action} {message!r}: "
                                   f"{exc.description}")
        if isinstance(exc, OSError):
            return InstrumentError(f"{name}: connection lost while trying to {action} "
                                   f"{message!r} ({exc.strerror or exc})")
        if isinstance(exc, UnicodeDecodeError):
            return InstrumentError(f"{name}: the reply to {message!r} is not text ({exc})")
        return InstrumentError(f"{name}: could not {action} {message!r}: {exc}")

    def _flush_input(self, quiet_ms: float = 50.0, cap_s: float = 1.0) -> None:
        """Drop late replies until the line has been quiet for `quiet_ms` (best effort),
        so the next query does not read an answer meant for an earlier one."""
        old = self._resource.timeout
        deadline = time.monotonic() + cap_s
        try:
            self._resource.timeout = quiet_ms
            while time.monotonic() < deadline:
                self._resource.read_raw()
        except Exception:  # noqa: BLE001 - a timeout here means the line is quiet
            pass
        finally:
            with contextlib.suppress(Exception):
                self._resource.timeout = old

    @contextlib.contextmanager
    def timeout(self, timeout_ms: float | None) -> Iterator[None]:
        """Temporarily use another timeout (None keeps the current one)."""
        if timeout_ms is None:
            yield
            return
        old = self._resource.timeout
        self._resource.timeout = timeout_ms
        try:
            yield
        finally:
            with contextlib.suppress(Exception):
                self._resource.timeout = old

    @property
    def timeout_ms(self) -> float:
        return float(self._resource.timeout)

    # --- messages --------------------------------------------------------------------
    def write(self, message: str) -> None:
        """Send one program message (no reply expected)."""
        if self._closed:
            raise InstrumentError(f"{self.resource_name}: the session is closed; cannot send "
                                  f"{message!r}")
        if self._peer_gone():
            raise InstrumentError(f"{self.resource_name}: connection lost (the instrument "
                                  f"closed it); cannot send {message!r}")
        if self._suspect:  # a reply timed out before: get back in step first
            self._resync()
        try:
            self._resource.write(message)
        except Exception as exc:  # noqa: BLE001 - every failure becomes InstrumentError
            raise self._fail("send", message, exc) from exc

    def _resync(self) -> None:
        """After a timeout, skip late replies: ask for the identity and read lines until
        one is it (the cached identity, or an IEEE 488.2 identity of four fields)."""
        self._suspect = False
        query = self.dialect.common.identify
        try:
            self._resource.write(query)
        except Exception as exc:  # noqa: BLE001
            raise self._fail("send", query, exc) from exc
        skipped = []
        for _ in range(16):
            line = self._read_line(query)
            if self._looks_like_identity(line):
                return
            skipped.append(line)
        raise InstrumentError(f"{self.resource_name}: cannot get back in step after a "
                              f"timeout; unexpected replies: {skipped[:3]!r}")

    def _looks_like_identity(self, line: str) -> bool:
        if self._identity is not None:
            return line == self._identity
        fields = scpi.split_args(line)
        if len(fields) < 4:
            return False
        try:
            scpi.parse_numbers(line)
        except ValueError:
            return True
        return False

    def _read_line(self, message: str) -> str:
        try:
            reply = self._resource.read()
        except Exception as exc:  # noqa: BLE001
            raise self._fail("read the reply to", message, exc) from exc
        reply = reply.strip()
        if not reply:
            raise InstrumentError(f"{self.resource_name}: empty reply to {message!r}")
        return reply

    def query(self, message: str) -> str:
        """Send a message with one query in it and return the reply, stripped."""
        self.write(message)
        return self._read_line(message)

    def ask(self, message: str, queries: int | None = None) -> list[str]:
        """Send a message with several queries; return one response unit per query.

        Accepts both IEEE 488.2 replies (all units on one line, joined by the separator)
        and instruments that answer each query on its own line. ``queries`` is how many
        queries the message holds when the caller knows it (`count_queries` of a
        message built from a fixed template: a role counts once, not per point).
        """
        expected = count_queries(message, self.dialect.separator) if queries is None \
            else queries
        if expected == 0:
            self.write(message)
            return []
        self.write(message)
        units: list[str] = []
        while len(units) < expected:
            try:
                line = self._read_line(message)
            except InstrumentError as exc:
                if not units:
                    raise
                raise InstrumentError(
                    f"{self.resource_name}: incomplete reply to {message!r}: {len(units)} of "
                    f"{expected} reply units ({self.dialect.separator.join(units)!r}), then "
                    f"{exc}") from None
            units += scpi.split_units(line, self.dialect.separator)
        if len(units) != expected:
            raise InstrumentError(
                f"{self.resource_name}: {len(units)} reply units to {message!r}, expected "
                f"{expected} (one per query): {self.dialect.separator.join(units)!r}")
        return units

    # --- IEEE 488.2 common commands --------------------------------------------------
    def identify(self) -> str:
        """The instrument's identification string (*IDN? or the dialect's query)."""
        self._identity = self.query(self.dialect.common.identify)
        return self._identity

    def reset(self) -> None:
        """Reset the instrument and wait until it has finished."""
        c = self.dialect.common
        self.expect_complete(self.dialect.join([c.reset, c.operation_complete]))

    def clear(self) -> None:
        """Clear the status registers and the error queue (*CLS)."""
        self.write(self.dialect.common.clear_status)

    def wait_complete(self, timeout_ms: float | None = None) -> None:
        """Wait until pending operations are complete (*OPC?)."""
        with self.timeout(timeout_ms):
            self.expect_complete(self.dialect.common.operation_complete)

    def expect_complete(self, message: str) -> None:
        """Send `message`, which ends in the operation-complete query; expect 1."""
        reply = self.query(message)
        try:
            done = scpi.parse_number(reply) == 1
        except ValueError:
            done = False
        if not done:
            raise InstrumentError(
                f"{self.resource_name}: expected 1 in reply to {message!r}, got {reply!r}")

    def drain_errors(self, context: str = "", check: bool = True) -> list[tuple[int, str]]:
        """Read the error queue until it reports 0.

        With `check`, any entry raises InstrumentError carrying the instrument's own
        messages and `context` (what was sent); otherwise the entries are returned.
        """
        query = self.dialect.common.next_error
        entries: list[tuple[int, str]] = []
        for _ in range(MAX_ERROR_ENTRIES):
            reply = self.query(query)
            try:
                code, text = scpi.parse_error_entry(reply)
            except ValueError:
                raise InstrumentError(
                    f"{self.resource_name}: the reply to {query!r} is not an error entry "
                    f"(expected like -113,\"Undefined header\"): {reply!r}") from None
            if code == 0:
                break
            entries.append((code, text))
        else:
            entries.append((0, f"(the error queue did not empty after {MAX_ERROR_ENTRIES} "
                               "reads)"))
        if entries and check:
            where = f" after {context}" if context else ""
            listed = "; ".join(scpi.format_error_entry(c, t) for c, t in entries)
            raise InstrumentError(f"{self.resource_name} reported an error{where}: {listed}")
        return entries

    # --- life cycle --------------------------------------------------------------------
    @property
    def closed(self) -> bool:
        return self._closed

    def close(self) -> None:
        """Close the resource (idempotent). The resource manager stays: it is shared."""
        if self._closed:
            return
        self._closed = True
        with contextlib.suppress(Exception):
            self._resource.close()
        if self.on_close is not None:
            with contextlib.suppress(Exception):
                self.on_close()

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Session({self.resource_name!r}, backend={self.backend!r})"


def count_queries(message: str, separator: str = ";") -> int:
    """How many response units an instrument owes for `message`: its units whose header
    (the first word) ends in ``?`` (what `scpi.parse_command` reads as a query, without
    parsing the arguments: this runs for every message sent)."""
    return sum(unit.split(None, 1)[0].endswith("?")
               for unit in scpi.split_units(message, separator))
