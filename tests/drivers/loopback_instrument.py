"""A tiny threaded TCP instrument for socket-level driver tests (not the simulated bench).

It answers IEEE 488.2 style: all response units of one program message on one line,
joined by ';'. Queries listed in `canned` (by header) get that reply. A few test-only
headers misbehave on purpose: SLOW? (replies after `slow_s`), HANG? (never replies),
EMPTY? (an empty line), TWO? (two units for one query), BYE (closes the connection);
LEVel? echoes the last :LEVel setting.
"""

from __future__ import annotations

import socket
import threading
import time

from pnbench.drivers import scpi


class LoopbackInstrument:
    def __init__(self, slow_s: float = 0.15, canned: dict[str, str] | None = None) -> None:
        self.slow_s = slow_s
        self.canned = {k.upper().lstrip(":"): v for k, v in (canned or {}).items()}
        self.received: list[str] = []
        self.level = "0"
        self.nodelay_seen: list[int] = []
        self._server = socket.create_server(("127.0.0.1", 0))
        self.port = self._server.getsockname()[1]
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._accept, daemon=True)
        self._thread.start()

    @property
    def resource(self) -> str:
        return f"TCPIP0::127.0.0.1::{self.port}::SOCKET"

    def _accept(self) -> None:
        self._server.settimeout(0.05)
        while not self._stop.is_set():
            try:
                conn, _ = self._server.accept()
            except (TimeoutError, OSError):
                continue
            threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

    def _serve(self, conn: socket.socket) -> None:
        buffer = b""
        with conn:
            conn.settimeout(0.05)
            while not self._stop.is_set():
                try:
                    chunk = conn.recv(4096)
                except TimeoutError:
                    continue
                except OSError:
                    return
                if not chunk:
                    return
                buffer += chunk
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    if not self._answer(conn, line.decode()):
                        return

    def _answer(self, conn: socket.socket, message: str) -> bool:
        self.received.append(message)
        replies = []
        for unit in scpi.split_units(message):
            cmd = scpi.parse_command(unit)
            head = cmd.header.upper().lstrip(":")
            if head == "BYE":
                return False
            if cmd.query and head in self.canned:
                replies.append(self.canned[head])
                continue
            if not cmd.query:
                if head == "LEVEL":
                    self.level = cmd.args[0]
                continue
            if head == "HANG":
                return True
            if head == "SLOW":
                time.sleep(self.slow_s)
                replies.append("late")
            elif head == "TWO":
                replies.append("1;2")
            elif head == "EMPTY":
                replies.append("")
            elif head == "*IDN":
                replies.append("Harrow Lane Lab,loopback,0,1.0")
            elif head == "LEVEL":
                replies.append(self.level)
            elif head == "*OPC":
                replies.append("1")
            elif head == "SYST:ERR:NEXT":
                replies.append('0,"No error"')
            else:
                replies.append("0")
        if replies:
            conn.sendall((";".join(replies) + "\n").encode())
        return True

    def close(self) -> None:
        self._stop.set()
        self._server.close()
        self._thread.join(timeout=1)
