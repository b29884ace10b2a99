"""One instrument link over one PyVISA resource: write, query, binary blocks, error queue, recovery.

Resource strings are PyVISA's: ``TCPIP::host::port::SOCKET`` (raw SCPI socket),
``TCPIP::host::inst0::INSTR`` (VXI-11), ``TCPIP::host::hislip0::INSTR``, ``USB0::…::INSTR``,
``GPIB0::12::INSTR``, ``ASRL/dev/ttyUSB0::INSTR``. The backend is ``@py`` (pyvisa-py) unless told.

Why the block reader is ours: with a read termination set, every 0x0A byte inside binary data ends
a read, and a short length header that is believed silently returns too few points. So blocks are
read with termination off, by the sans-I/O parser in :mod:`instruments.blocks`, in large chunks under
one overall deadline, and their length is checked against what the caller expects.

Why replies on a raw socket are read here too: pyvisa-py's socket read keeps polling a connection
whose peer has closed (``recv`` returning nothing) until its timeout, at full CPU, and then drops the
bytes it had. Reading the socket ourselves, waiting in the kernel, a closed peer is seen at once and
the message gives the bytes that really arrived.

After a timeout or a lost link the next reply on a raw socket can be stale, so the session closes
itself and the next command reopens and resynchronises with ``*IDN?``. It never sends a device
clear: on a raw socket whose peer has gone, a clear can loop. Whenever a session opens or reopens it
drains the instrument's error queue and logs what it held: an old entry is not the next command's fault.
"""

from __future__ import annotations

import re
import socket
import time
from typing import Callable

import pyvisa
from pyvisa import constants as vc

from instruments.blocks import DEFAULT_MAX_BYTES, Block, BlockParser
from instruments.scpi import ErrorEntry, Identity, describe_errors, errors_to_exception, parse_error, parse_idn
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


def _raw_socket_of(res) -> socket.socket | None:
    """The TCP socket under a pyvisa-py raw-socket resource (None for other backends and interfaces)."""
    sessions = getattr(res.visalib, "sessions", None)
    interface = getattr(sessions.get(res.session), "interface", None) if isinstance(sessions, dict) else None
    if isinstance(interface, socket.socket) and interface.family in (socket.AF_INET, socket.AF_INET6):
        return interface
    return None


def is_raw_socket(resource: str) -> bool:
    return resource.strip().upper().endswith("::SOCKET")


class _Stalled(Exception):
    """Nothing arrived before the deadline."""


class _PeerClosed(Exception):
    """The peer closed (recv returned no bytes) or reset the connection; the text says which."""


def _recv(sock: socket.socket, max_bytes: int, deadline: float) -> bytes:
    """Up to ``max_bytes``, waiting in the kernel until ``deadline`` (no polling loop)."""
    remaining = deadline - time.monotonic()
    if remaining <= 0:
        raise _Stalled
    sock.settimeout(remaining)
    try:
        data = sock.recv(max_bytes)
    except (socket.timeout, TimeoutError):
        raise _Stalled from None
    except OSError as exc:
        raise _PeerClosed(f"the connection broke: {exc.strerror or exc}") from None
    finally:
        sock.settimeout(None)  # pyvisa-py writes on a blocking socket
    if not data:
        raise _PeerClosed("the instrument closed the connection")
    return data


def _no_logging(event: str, **fields) -> None:
    pass


class Session:
    """A message-based link to one instrument. Open with :meth:`open`; use as a context manager.

    ``log(event, **fields)`` receives what the session found and did not raise (entries left in the
    error queue at open); the acquisition journal records them.
    """

    def __init__(self, resource: str, *, backend: str = "@py", timeout_s: float = 5.0,
                 read_termination: str = "\n", write_termination: str = "\n",
                 error_query: str = "SYSTem:ERRor?", max_error_entries: int = 32,
                 identity_pattern: str = "", name: str = "", log: Callable | None = None):
        self.resource = resource
        self.backend = backend
        self.timeout_s = timeout_s
        self.read_termination = read_termination
        self.write_termination = write_termination
        self.error_query = error_query
        self.max_error_entries = max_error_entries
        self.identity_pattern = identity_pattern
        self.name = name or resource
        self.log = log or _no_logging
        self.identity: Identity | None = None
        self.reopen_count = 0
        self.left_over_errors: list[ErrorEntry] = []  # drained at the last open, not raised
        self._last_failure = ""  # why the session last closed itself (for the log at reopen)
        self._explaining = False
        self._res = None
        self._sock: socket.socket | None = None

    # -- lifecycle -------------------------------------------------------------------------
    @property
    def raw_socket(self) -> bool:
        return is_raw_socket(self.resource)

    @property
    def is_open(self) -> bool:
        return self._res is not None

    def open(self) -> Identity:
        """Open the resource, check ``*IDN?`` (4 fields, matching the profile's pattern), then drain
        and log the error queue."""
        rm = resource_manager(self.backend)
        try:
            res = rm.open_resource(self.resource, open_timeout=int(self.timeout_s * 1000))
        except pyvisa.errors.VisaIOError as exc:
            raise self._mapped(exc, "open", self.timeout_s) from None
        except _RAW_LINK_ERRORS + (OSError,) as exc:
            raise ConnectionLost(f"{self.name}: cannot connect: {exc}", instrument=self.name) from None
        except ValueError as exc:  # pyvisa-py: this interface needs a package (PyUSB, PySerial, linux-gpib)
            text = " ".join(str(exc).split())
            raise InstrumentError(f"{self.resource!r}: cannot open this kind of resource here: {text}") from None
        res.timeout = self.timeout_s * 1000
        res.read_termination = self.read_termination
        res.write_termination = self.write_termination
        self._res = res
        self._sock = _raw_socket_of(res) if self.raw_socket and self.read_termination else None
        if self._sock is not None:
            # TCP_NODELAY: without it a command followed by a query waits ~40 ms each time (Nagle's
            # algorithm against the peer's delayed ACK).
            self._sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        try:
            reply = self.query("*IDN?")
        except ConnectionLost as exc:  # pyvisa-py connects lazily: a refusal shows up here
            raise ConnectionLost(f"{self.name}: cannot connect: {exc.message.split(': ', 2)[-1]}",
                                 instrument=self.name) from None
        self.identity = parse_idn(reply)
        if self.identity_pattern and not re.search(self.identity_pattern, str(self.identity)):
            self.close()
            raise InstrumentError(f"{self.name}: *IDN? says {str(self.identity)!r}, which does not match the "
                                  f"profile's identity pattern {self.identity_pattern!r}", instrument=self.name)
        self._drain_at_open()
        return self.identity

    def _drain_at_open(self) -> None:
        try:
            entries = self.drain_errors()
        except InstrumentTimeout as exc:
            raise InstrumentError(f"{self.name}: the error query {self.error_query!r} ([transport] error_query) "
                                  f"got no answer: {exc.message}", instrument=self.name,
                                  command=self.error_query) from None
        self.left_over_errors = [e for e in entries if e.is_error]
        if self.left_over_errors:
            why = f"reopened after: {self._last_failure}" if self.reopen_count and self._last_failure else "opened"
            self.log("error_queue_at_open", instrument=self.name, entries=describe_errors(self.left_over_errors),
                     session=why)

    def close(self) -> None:
        res, self._res, self._sock = self._res, None, None
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
        limit = self.timeout_s if timeout_s is None else timeout_s

        def ask(res):
            if self._sock is not None:
                res.write(command)
                return self._read_line(res, command, limit)
            res.timeout = limit * 1000
            try:
                return res.query(command)
            finally:
                if self._res is res:
                    res.timeout = self.timeout_s * 1000

        try:
            return self._call(command, ask, limit)
        except InstrumentTimeout as exc:
            raise self._explained(exc, command) from None

    def _read_line(self, res, command: str, limit_s: float) -> str:
        """One reply up to the read termination, off the raw socket."""
        term = self.read_termination.encode()
        deadline = time.monotonic() + limit_s
        buf = bytearray()
        while (end := buf.find(term)) < 0:
            try:
                buf += _recv(self._sock, 65536, deadline)
            except _Stalled:
                partial = f" (an unfinished reply of {len(buf)} bytes came)" if buf else ""
                raise InstrumentTimeout(f"{self.name}: no reply to {command!r} within {limit_s:g} s{partial}",
                                        instrument=self.name, command=command) from None
            except _PeerClosed as exc:
                raise ConnectionLost(f"{self.name}: {exc} while {command!r} waited for its reply ({len(buf)} "
                                     f"bytes of it had come)", instrument=self.name, command=command) from None
        if end + len(term) < len(buf):  # more than one reply: what follows is stale, so is the link
            raise InstrumentError(f"{self.name}: {len(buf) - end - len(term)} unexpected byte(s) after the reply "
                                  f"to {command!r} (a late answer to an earlier query?)",
                                  instrument=self.name, command=command)
        return bytes(buf[:end]).decode(res.encoding)

    def _explained(self, exc: InstrumentTimeout, command: str) -> InstrumentTimeout:
        """A query the instrument rejects gets no reply at all; its error queue says why."""
        if self._explaining or command in (self.error_query, "*IDN?"):
            return exc
        self._explaining = True
        try:
            self.recover()  # the timeout closed the link; reopening drains the queue
        except InstrumentError:
            return exc  # the link is gone too: the timeout is the whole story
        finally:
            self._explaining = False
        err = errors_to_exception(self.left_over_errors, command)
        if err is None:
            return exc
        return InstrumentTimeout(f"{exc.message}; its error queue then held {err.code},\"{err.text}\"",
                                 instrument=self.name, command=command)

    def read_block(self, command: str, *, expected_bytes: int | None = None, max_bytes: int = DEFAULT_MAX_BYTES,
                   deadline_s: float | None = None, trailer: bytes = b"\n") -> Block:
        """Send ``command`` and read one IEEE 488.2 block reply ourselves (termination off).

        ``deadline_s`` bounds the whole block; between two pieces at most the transport timeout may
        pass. After a bad block the session reopens at once and logs what the error queue held."""
        limit = deadline_s if deadline_s is not None else max(self.timeout_s, 10.0)
        parser = BlockParser(expected_bytes=expected_bytes, max_bytes=max_bytes,
                             allow_indefinite=not self.raw_socket, trailer=trailer)
        self.write(command)

        def read(res):
            if self._sock is not None:
                return self._read_block_socket(command, parser, limit)
            res.read_termination = None
            try:
                with res.ignore_warning(vc.StatusCode.success_max_count_read):
                    return self._read_block_visa(res, command, parser, limit)
            finally:
                if self._res is res:
                    res.read_termination = self.read_termination
                    res.timeout = self.timeout_s * 1000

        try:
            return self._call(command, read, limit)
        except BlockError as exc:
            raise self._with_queue_after(exc, command) from None

    def _read_block_socket(self, command: str, parser: BlockParser, limit_s: float) -> Block:
        """Exactly what the parser asks for (never more, so no read waits for bytes that are not coming)."""
        start = time.monotonic()
        deadline = start + limit_s
        event = parser.feed(b"")
        while not isinstance(event, Block):
            try:
                chunk = _recv(self._sock, min(event.n_bytes, CHUNK_BYTES),
                              min(deadline, time.monotonic() + self.timeout_s))
            except _Stalled:
                raise self._stalled(command, parser, limit_s, time.monotonic() >= deadline) from None
            except _PeerClosed as exc:
                raise ConnectionLost(self._block_text(command, parser, str(exc)), instrument=self.name,
                                     command=command) from None
            event = parser.feed(chunk)
        return event

    def _read_block_visa(self, res, command: str, parser: BlockParser, limit_s: float) -> Block:
        """The same through the VISA library (VXI-11, HiSLIP, USB, GPIB: END marks the end of a message)."""
        deadline = time.monotonic() + limit_s
        event = parser.feed(b"")
        while not isinstance(event, Block):
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                raise self._stalled(command, parser, limit_s, True)
            res.timeout = max(1.0, min(self.timeout_s, remaining) * 1000)
            try:
                chunk, status = res.visalib.read(res.session, min(event.n_bytes, CHUNK_BYTES))
            except pyvisa.errors.VisaIOError as exc:
                if exc.error_code == vc.StatusCode.error_timeout:
                    raise self._stalled(command, parser, limit_s, time.monotonic() >= deadline) from None
                raise
            event = parser.feed(chunk)
            if not isinstance(event, Block) and status == vc.StatusCode.success:
                event = parser.end_of_message()  # END asserted by VXI-11 / HiSLIP / USB / GPIB
        return event

    def _stalled(self, command: str, parser: BlockParser, limit_s: float, deadline_passed: bool) -> InstrumentError:
        if deadline_passed:
            return InstrumentTimeout(self._block_text(command, parser, f"its deadline of {limit_s:g} s passed"),
                                     instrument=self.name, command=command)
        if parser.announced_bytes is None and parser.received_bytes == 0:
            return InstrumentTimeout(f"{self.name}: no reply to {command!r} within {self.timeout_s:g} s",
                                     instrument=self.name, command=command)
        return BlockError(self._block_text(command, parser, f"the instrument sent nothing for {self.timeout_s:g} s"),
                          instrument=self.name, command=command)

    def _block_text(self, command: str, parser: BlockParser, why: str) -> str:
        want = parser.announced_bytes
        of = f" of {want}" if want is not None else ""
        return (f"{self.name}: block reply to {command!r} cut short ({why}): received {parser.received_bytes}{of} "
                f"data bytes")

    def _with_queue_after(self, exc: BlockError, command: str) -> BlockError:
        """Reopen after a bad block (the link is alive, the rest of it is stale) and log the queue."""
        try:
            self.recover()
        except InstrumentError:
            return exc  # it will be reopened, and its queue drained, by the next command
        if not self.left_over_errors:
            return exc
        return BlockError(f"{exc.message}; its error queue then held {describe_errors(self.left_over_errors)}",
                          instrument=self.name, command=command)

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
                              f"(last {entries[-1].code},\"{entries[-1].text}\")", instrument=self.name,
                              command=self.error_query)

    def check_errors(self, command: str) -> None:
        """Drain the queue after a command group; raise the first entry as ScpiError naming ``command``."""
        err = errors_to_exception(self.drain_errors(), command, self.name)
        if err is not None:
            raise err

    # -- internals -------------------------------------------------------------------------
    def _call(self, command: str, action: Callable, limit_s: float | None = None):
        if self._res is None:
            self.recover() if self.identity is not None else self.open()
        res = self._res
        try:
            return action(res)
        except (InstrumentTimeout, ConnectionLost, BlockError) as exc:
            self._closed_after(exc.message)  # what follows on this link may be stale: reopen first
            raise
        except InstrumentError:
            self._closed_after(f"a bad reply to {command!r}")
            raise
        except pyvisa.errors.VisaIOError as exc:
            mapped = self._mapped(exc, command, self.timeout_s if limit_s is None else limit_s)
            self._closed_after(mapped.message)
            raise mapped from None
        except _RAW_LINK_ERRORS + (OSError,) as exc:
            self._closed_after(f"link lost during {command!r}")
            raise ConnectionLost(f"{self.name}: link lost during {command!r}: {exc}", instrument=self.name,
                                 command=command) from None
        except UnicodeDecodeError:
            self._closed_after(f"a binary reply to {command!r}")
            raise InstrumentError(f"{self.name}: reply to {command!r} is not text (binary data where a "
                                  f"text reply was expected)", instrument=self.name, command=command) from None
        except BaseException:  # Ctrl-C or a signal mid-exchange: the reply may still be coming
            self._closed_after(f"an interruption during {command!r}")
            raise

    def _closed_after(self, why: str) -> None:
        self._last_failure = why
        self.close()

    def _mapped(self, exc: pyvisa.errors.VisaIOError, command: str, limit_s: float) -> InstrumentError:
        if exc.error_code == vc.StatusCode.error_timeout:
            return InstrumentTimeout(f"{self.name}: no reply to {command!r} within {limit_s:g} s",
                                     instrument=self.name, command=command)
        if exc.error_code in _LOST_CODES:
            return ConnectionLost(f"{self.name}: link lost during {command!r}: {exc.abbreviation}",
                                  instrument=self.name, command=command)
        return InstrumentError(f"{self.name}: {command!r} failed: {exc.abbreviation} {exc.description}",
                               instrument=self.name, command=command)
