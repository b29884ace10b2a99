"""A SCPI raw-socket server on 127.0.0.1 with fault injection per connection.

One server serves one simulated instrument (a :class:`Device`). Program messages end with NL; a
message may hold several commands separated by ``;`` (IEEE 488.2 §7.3.2), and the replies to the
queries in one message go back as one response message, ``;``-separated (IEEE 488.2 §8.4.1).
The server listens on loopback only: a simulated bench is never reachable from the network.
"""

from __future__ import annotations

import re
import socket
import socketserver
import struct
import threading
import time
from dataclasses import dataclass, field
from typing import Protocol, Sequence

from instruments.scpi import split_unquoted

LOOPBACK = "127.0.0.1"

FAULT_KINDS = ("no_reply", "late_reply", "drop_mid_block", "reset_mid_block", "truncated_block",
               "wrong_length_header", "error_queue", "reset")


class Device(Protocol):
    """A simulated instrument: answers one command (reply text, block bytes, or None)."""

    def handle(self, command: str) -> str | bytes | None: ...

    def push_error(self, code: int, text: str) -> None: ...


@dataclass
class Fault:
    """Misbehave on the ``connection``-th connection (0 first; None every one) when a command matches.

    ``match`` is a regex searched in the program message up to the current command (case-insensitive); ``times`` how often it fires;
    ``delay_s`` for ``late_reply``; ``delta`` bytes added to the length a wrong header announces;
    ``errors`` entries pushed into the error queue for ``error_queue``.
    """

    kind: str
    match: str = ""
    connection: int | None = 0
    times: int = 1
    delay_s: float = 0.5
    delta: int = -2
    errors: Sequence[tuple[int, str]] = ((-222, "Data out of range"),)
    fired: int = field(default=0, compare=False)

    def __post_init__(self):
        if self.kind not in FAULT_KINDS:
            raise ValueError(f"fault kind {self.kind!r} is not one of {', '.join(FAULT_KINDS)}")


class ScpiServer:
    """Serve ``device`` on 127.0.0.1:``port`` (0 = a free port) in a background thread."""

    def __init__(self, device: Device, port: int = 0, faults: Sequence[Fault] = ()):
        self.device = device
        self.faults: list[Fault] = list(faults)
        self.connections = 0
        self._lock = threading.Lock()
        outer = self

        class Handler(socketserver.BaseRequestHandler):
            def handle(self):
                outer._serve(self.request)

        class Server(socketserver.ThreadingTCPServer):
            daemon_threads = True
            allow_reuse_address = True

        self._server = Server((LOOPBACK, port), Handler)
        self.port = self._server.server_address[1]
        self._thread = threading.Thread(target=self._server.serve_forever, args=(0.05,), name=f"scpi-sim-{self.port}",
                                        daemon=True)

    @property
    def resource(self) -> str:
        return f"TCPIP::{LOOPBACK}::{self.port}::SOCKET"

    def start(self) -> "ScpiServer":
        self._thread.start()
        return self

    def stop(self) -> None:
        self._server.shutdown()
        self._server.server_close()

    def __enter__(self) -> "ScpiServer":
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    def add_fault(self, fault: Fault) -> Fault:
        with self._lock:
            self.faults.append(fault)
        return fault

    # -- one connection ------------------------------------------------------------------
    def _serve(self, sock: socket.socket) -> None:
        with self._lock:
            index = self.connections
            self.connections += 1
        buf = b""
        try:
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)  # small replies at once (no Nagle wait)
            while True:
                data = sock.recv(65536)
                if not data:
                    return
                buf += data
                while b"\n" in buf:
                    line, buf = buf.split(b"\n", 1)
                    message = line.decode("ascii", "replace").strip()
                    if message and not self._answer(sock, index, message):
                        return
        except OSError:
            return  # the client went away; a real instrument would just wait for the next one

    def _fault_for(self, index: int, command: str) -> Fault | None:
        with self._lock:
            for f in self.faults:
                if f.fired < f.times and f.connection in (None, index) and re.search(f.match, command, re.I):
                    f.fired += 1
                    return f
        return None

    def _answer(self, sock: socket.socket, index: int, message: str) -> bool:
        """Handle one program message; False when the connection is to be closed."""
        replies: list[str | bytes] = []
        fault = None
        done: list[str] = []
        for command in split_message(message):
            done.append(command)
            # A fault's regex is searched in the message up to this command, so it can name a sequence.
            fault = fault or self._fault_for(index, ";".join(done))
            if fault is not None and fault.kind == "reset":
                _reset(sock)
                return False
            reply = self.device.handle(command)
            if fault is not None and fault.kind == "error_queue":
                for code, text in fault.errors:
                    self.device.push_error(code, text)
                fault = None
            if reply is not None:
                replies.append(reply)
        if not replies:
            return True
        if len(replies) == 1 and isinstance(replies[0], bytes):
            wire = replies[0]
        else:
            wire = (";".join(r if isinstance(r, str) else r.decode("latin-1") for r in replies) + "\n").encode("latin-1")
        return self._send(sock, wire, fault)

    def _send(self, sock: socket.socket, wire: bytes, fault: Fault | None) -> bool:
        kind = fault.kind if fault else None
        if kind == "no_reply":
            return True
        if kind == "late_reply":
            time.sleep(fault.delay_s)
        elif kind in ("drop_mid_block", "reset_mid_block", "truncated_block"):
            sock.sendall(wire[: max(1, len(wire) // 2)])
            if kind == "drop_mid_block":
                sock.shutdown(socket.SHUT_RDWR)
                sock.close()
                return False
            if kind == "reset_mid_block":
                _reset(sock)
                return False
            return True  # truncated: the rest never comes, the link stays up
        elif kind == "wrong_length_header" and wire.startswith(b"#"):
            wire = _rewrite_header(wire, fault.delta)
        sock.sendall(wire)
        return True


def split_message(message: str) -> list[str]:
    """Commands of one program message (IEEE 488.2 §7.3.2: ``;`` separates program message units)."""
    return [p for p in split_unquoted(message, ";") if p]


def _rewrite_header(wire: bytes, delta: int) -> bytes:
    n = int(wire[1:2])
    length = int(wire[2:2 + n])
    new = str(max(0, length + delta)).encode()
    return b"#" + str(len(new)).encode() + new + wire[2 + n:]


def _reset(sock: socket.socket) -> None:
    """Close with RST (SO_LINGER 0): the client sees a connection reset, as when a device reboots."""
    try:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
        sock.close()
    except OSError:
        pass
