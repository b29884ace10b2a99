"""One instrument link over one PyVISA resource: write, query, binary blocks, error queue, recovery.

Resource strings are PyVISA's: ``TCPIP::host::port::SOCKET`` (raw SCPI socket),
``TCPIP::host::inst0::INSTR`` (VXI-11), ``TCPIP::host::hislip0::INSTR``, ``USB0::…::INSTR``,
``GPIB0::12::INSTR``, ``ASRL/dev/ttyUSB0::INSTR``. The backend is ``@py`` (pyvisa-py) unless told.

Why the block reader is ours: with a read termination set, every 0x0A byte inside binary data ends
a read, and a short length header that is believed silently returns too few points. So blocks are
read with termination off, by the sans-I/O parser in :mod:`instruments.blocks`, in large chunks under
one overall deadline, and their length is checked against what the caller expects.

After a timeout or a lost link the next reply on a raw socket can be stale, so the session closes
itself and the next command reopens and resynchronises with ``*IDN?``. It never sends a device
clear: on a raw socket whose peer has gone, a clear can loop.
"""

from __future__ import annotations

import re
import socket
import time
from typing import Callable

import pyvisa
from pyvisa import constants as vc

from instruments.blocks import DEFAULT_MAX_BYTES, Block, BlockParser
from instruments.scpi import ErrorEntry, Identity, errors_to_exception, parse_error, parse_idn
from labtool.errors import BlockError, ConnectionLost, InstrumentError, InstrumentTimeout

CHUNK_BYTES = 1 << 20  # body reads of at least 1 MiB: 4 KiB reads make large records crawl
_LOST_CODES = {vc.StatusCode.error_connection_lost, vc.StatusCode.error_io,
               vc.StatusCode.error_resource_not_found, vc.StatusCode.error_invalid_object,
               vc.StatusCode.error_resource_busy}
_RAW_LINK_ERRORS = (ConnectionResetError, BrokenPipeError, ConnectionRefusedError, ConnectionAbortedError)

_managers: dict[str, pyvisa.ResourceManager] = {}


def resource_manager(backend: str = "@py") -> pyvisa.ResourceManager:
    if backend not in _managers:
        try:
            _managers[backend] = pyvisa.ResourceManager(backend)
        except (OSError, ValueError, pyvisa.errors.Error) as exc:
            raise InstrumentError(f"VISA backend {backend!r} cannot be loaded: {exc}") from None
    return _managers[backend]


def _no_delay(res) -> None:
    """TCP_NODELAY on a raw socket: without it a command followed by a query waits ~40 ms each time
    (Nagle's algorithm against the peer's delayed ACK). Only pyvisa-py exposes the socket."""
    sessions = getattr(res.visalib, "sessions", None)
    interface = getattr(sessions.get(res.session), "interface", None) if isinstance(sessions, dict) else None
    if isinstance(interface, socket.socket) and interface.family in (socket.AF_INET, socket.AF_INET6):
        interface.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)


def is_raw_socket(resource: str) -> bool:
    return resource.strip().upper().endswith("::SOCKET")


class Session:
    """A message-based link to one instrument. Open with :meth:`open`; use as a context manager."""

    def __init__(self, resource: str, *, backend: str = "@py", timeout_s: float = 5.0,
                 read_termination: str = "\n", write_termination: str = "\n",
                 error_query: str = "SYSTem:ERRor?", max_error_entries: int = 32,
                 identity_pattern: str = "", name: str = ""):
        self.resource = resource
        self.backend = backend
        self.timeout_s = timeout_s
        self.read_termination = read_termination
        self.write_termination = write_termination
        self.error_query = error_query
        self.max_error_entries = max_error_entries
        self.identity_pattern = identity_pattern
        self.name = name or resource
        self.identity: Identity | None = None
        self.reopen_count = 0
        self._explaining = False
        self._res = None

    # -- lifecycle -------------------------------------------------------------------------
    @property
    def raw_socket(self) -> bool:
        return is_raw_socket(self.resource)

    @property
    def is_open(self) -> bool:
        return self._res is not None

    def open(self) -> Identity:
        """Open the resource and check ``*IDN?`` (4 fields, matching the profile's pattern)."""
        rm = resource_manager(self.backend)
        try:
            res = rm.open_resource(self.resource, open_timeout=int(self.timeout_s * 1000))
        except pyvisa.errors.VisaIOError as exc:
            raise self._mapped(exc, "open") from None
        except _RAW_LINK_ERRORS + (OSError,) as exc:
            raise ConnectionLost(f"{self.name}: cannot connect: {exc}") from None
        except ValueError as exc:  # pyvisa-py: this interface needs a package (PyUSB, PySerial, linux-gpib)
            text = " ".join(str(exc).split())
            raise InstrumentError(f"{self.resource!r}: cannot open this kind of resource here: {text}") from None
        res.timeout = self.timeout_s * 1000
        res.read_termination = self.read_termination
        res.write_termination = self.write_termination
        self._res = res
        _no_delay(res)
        try:
            reply = self.query("*IDN?")
        except ConnectionLost as exc:  # pyvisa-py connects lazily: a refusal shows up here
            raise ConnectionLost(f"{self.name}: cannot connect: {exc.message.split(': ', 2)[-1]}") from None
        self.identity = parse_idn(reply)
        if self.identity_pattern and not re.search(self.identity_pattern, str(self.identity)):
            self.close()
            raise InstrumentError(f"{self.name}: *IDN? says {str(self.identity)!r}, which does not match the "
                                  f"profile's identity pattern {self.identity_pattern!r}")
        return self.identity

    def close(self) -> None:
        res, self._res = self._res, None
        if res is not None:
            try:
                res.close()
            except (pyvisa.errors.Error, OSError):
                pass  # the link is already gone; nothing left to release

    def recover(self) -> Identity:
        """Close, reopen and resynchronise with ``*IDN?`` (never a device clear)."""
        self.close()
        self.reopen_count += 1
        return self.open()

    def __enter__(self) -> "Session":
        if not self.is_open:
            self.open()
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- messages --------------------------------------------------------------------------
    def write(self, command: str) -> None:
        self._call(command, lambda res: res.write(command))

    def query(self, command: str, *, timeout_s: float | None = None) -> str:
        """Send a query and read its text reply; ``timeout_s`` overrides the timeout for this reply."""
        def ask(res):
            if timeout_s is None:
                return res.query(command)
            res.timeout = timeout_s * 1000
            try:
                return res.query(command)
            finally:
                if self._res is res:
                    res.timeout = self.timeout_s * 1000

        try:
            return self._call(command, ask)
        except InstrumentTimeout as exc:
            raise self._explained(exc, command) from None

    def _explained(self, exc: InstrumentTimeout, command: str) -> InstrumentTimeout:
        """A query the instrument rejects gets no reply at all; its error queue says why."""
        if self._explaining or command == self.error_query:
            return exc
        self._explaining = True
        try:
            err = errors_to_exception(self.drain_errors(), command)
        except InstrumentError:
            return exc  # the link is gone too: the timeout is the whole story
        finally:
            self._explaining = False
        if err is None:
            return exc
        return InstrumentTimeout(f"{exc.message}; its error queue then held {err.code},\"{err.text}\"")

    def read_block(self, command: str, *, expected_bytes: int | None = None, max_bytes: int = DEFAULT_MAX_BYTES,
                   deadline_s: float | None = None, trailer: bytes = b"\n") -> Block:
        """Send ``command`` and read one IEEE 488.2 block reply ourselves (termination off)."""
        deadline = time.monotonic() + (deadline_s if deadline_s is not None else max(self.timeout_s, 10.0))
        parser = BlockParser(expected_bytes=expected_bytes, max_bytes=max_bytes,
                             allow_indefinite=not self.raw_socket, trailer=trailer)
        self.write(command)

        def read(res):
            res.read_termination = None
            try:
                with res.ignore_warning(vc.StatusCode.success_max_count_read):
                    return self._read_block_body(res, command, parser, deadline)
            finally:
                if self._res is res:
                    res.read_termination = self.read_termination
                    res.timeout = self.timeout_s * 1000

        return self._call(command, read)

    def _read_block_body(self, res, command: str, parser: BlockParser, deadline: float) -> Block:
        """Read exactly what the parser asks for (never more, so no read waits for bytes that are not
        coming), in chunks of at most CHUNK_BYTES, until the block is complete or the deadline passes."""
        event = parser.feed(b"")
        while not isinstance(event, Block):
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                raise InstrumentTimeout(self._truncation_text(command, parser, "the overall deadline passed"))
            res.timeout = max(1.0, min(self.timeout_s, remaining) * 1000)
            try:
                chunk, status = res.visalib.read(res.session, min(event.n_bytes, CHUNK_BYTES))
            except pyvisa.errors.VisaIOError as exc:
                if exc.error_code == vc.StatusCode.error_timeout and parser.announced_bytes is not None:
                    raise BlockError(self._truncation_text(command, parser, "the instrument stopped sending")) from None
                raise
            event = parser.feed(chunk)
            if not isinstance(event, Block) and status == vc.StatusCode.success and not self.raw_socket:
                event = parser.end_of_message()  # END asserted by VXI-11 / HiSLIP / USB / GPIB
        return event

    # -- error queue -----------------------------------------------------------------------
    def drain_errors(self) -> list[ErrorEntry]:
        """Read ``SYSTem:ERRor?`` until it says no error (at most ``max_error_entries`` entries)."""
        entries: list[ErrorEntry] = []
        for _ in range(self.max_error_entries):
            entry = parse_error(self.query(self.error_query))
            if not entry.is_error:
                return entries
            entries.append(entry)
        raise InstrumentError(f"{self.name}: error queue still not empty after {self.max_error_entries} reads "
                              f"(last {entries[-1].code},\"{entries[-1].text}\")")

    def check_errors(self, command: str) -> None:
        """Drain the queue after a command group; raise the first entry as ScpiError naming ``command``."""
        err = errors_to_exception(self.drain_errors(), command)
        if err is not None:
            err.message = f"{self.name}: {err.message}"
            err.args = (err.message,)
            raise err

    # -- internals -------------------------------------------------------------------------
    def _call(self, command: str, action: Callable):
        if self._res is None:
            self.recover() if self.identity is not None else self.open()
        res = self._res
        try:
            return action(res)
        except (InstrumentTimeout, ConnectionLost, BlockError):
            self.close()  # what follows on this link may be stale: reopen before the next command
            raise
        except pyvisa.errors.VisaIOError as exc:
            self.close()
            raise self._mapped(exc, command) from None
        except _RAW_LINK_ERRORS + (OSError,) as exc:
            self.close()
            raise ConnectionLost(f"{self.name}: link lost during {command!r}: {exc}") from None
        except UnicodeDecodeError:
            self.close()
            raise InstrumentError(f"{self.name}: reply to {command!r} is not text (binary data where a "
                                  f"text reply was expected)") from None

    def _mapped(self, exc: pyvisa.errors.VisaIOError, command: str) -> InstrumentError:
        if exc.error_code == vc.StatusCode.error_timeout:
            return InstrumentTimeout(f"{self.name}: no reply to {command!r} within {self.timeout_s:g} s")
        if exc.error_code in _LOST_CODES:
            return ConnectionLost(f"{self.name}: link lost during {command!r}: {exc.abbreviation}")
        return InstrumentError(f"{self.name}: {command!r} failed: {exc.abbreviation} {exc.description}")

    def _truncation_text(self, command: str, parser: BlockParser, why: str) -> str:
        want = parser.announced_bytes
        got = parser.received_bytes
        of = f" of {want}" if want is not None else ""
        return f"{self.name}: block reply to {command!r} truncated ({why}): received {got}{of} data bytes"
