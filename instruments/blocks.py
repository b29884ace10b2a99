"""Sans-I/O parser of IEEE 488.2 binary blocks (arbitrary block response data, IEEE 488.2 §8.7.9).

A definite-length block is ``#<n><n digits: length><length data bytes>``; the indefinite form
``#0<data>`` ends only at NL with END, which a raw TCP socket cannot signal, so it is refused there.
The parser owns no socket: feed it bytes, ask it what it needs, take the block when complete. The
session (``instruments.session``) does the reading; tests feed byte strings directly.
"""

from __future__ import annotations

from dataclasses import dataclass

from labtool.errors import BlockError

DEFAULT_MAX_BYTES = 256 * 1024 * 1024  # a cap so a corrupt header cannot make us wait for gigabytes


@dataclass(frozen=True)
class NeedData:
    """The parser needs at least ``n_bytes`` more bytes before it can say more."""

    n_bytes: int


@dataclass(frozen=True)
class Block:
    """A complete block: its data bytes and the trailer that followed (the response terminator)."""

    data: bytes
    trailer: bytes
    header: bytes


class BlockParser:
    """Incremental parser of one block.

    ``expected_bytes``: the length the caller knows from elsewhere (scaling points × sample width);
    a header announcing another length is an error, so a wrong header is never believed.
    ``allow_indefinite``: accept ``#0`` (only where the transport marks the end of a message; then
    call :meth:`end_of_message` when it does). ``trailer``: the bytes expected after the data
    (the NL response terminator, IEEE 488.2 §8.5); ``b""`` when the instrument sends none.
    """

    def __init__(self, *, expected_bytes: int | None = None, max_bytes: int = DEFAULT_MAX_BYTES,
                 allow_indefinite: bool = False, trailer: bytes = b"\n"):
        self.expected_bytes = expected_bytes
        self.max_bytes = max_bytes
        self.allow_indefinite = allow_indefinite
        self.trailer = trailer
        self._buf = bytearray()
        self._header_len: int | None = None  # bytes of '#', n and the length digits
        self._length: int | None = None  # None until the header is parsed; -1 for indefinite
        self._done: Block | None = None

    # -- feeding -----------------------------------------------------------------------------
    def feed(self, data: bytes) -> NeedData | Block:
        """Add bytes; returns what is still needed or the finished block. Raises BlockError."""
        if self._done is not None:
            if data:
                raise BlockError(f"{len(data)} unexpected byte(s) after the end of the block")
            return self._done
        self._buf += data
        return self._advance()

    def end_of_message(self) -> Block:
        """The transport signalled END: finishes an indefinite block, or reports truncation."""
        if self._done is not None:
            return self._done
        if self._length == -1:
            body = bytes(self._buf[self._header_len:])
            if body.endswith(b"\n"):  # NL^END closes the indefinite form (IEEE 488.2 §8.7.9)
                body = body[:-1]
            self._check_expected(len(body))
            self._done = Block(body, b"\n", bytes(self._buf[:self._header_len]))
            return self._done
        raise self._truncated()

    @property
    def received_bytes(self) -> int:
        """Data bytes received so far (for messages about truncation)."""
        if self._header_len is None:
            return 0
        return max(0, len(self._buf) - self._header_len)

    @property
    def announced_bytes(self) -> int | None:
        return None if self._length in (None, -1) else self._length

    # -- internals ---------------------------------------------------------------------------
    def _advance(self) -> NeedData | Block:
        if self._length is None:
            need = self._parse_header()
            if need:
                return NeedData(need)
        if self._length == -1:
            if len(self._buf) - self._header_len > self.max_bytes:
                raise BlockError(f"indefinite block longer than the cap of {self.max_bytes} bytes")
            return NeedData(1)
        end_data = self._header_len + self._length
        end_all = end_data + len(self.trailer)
        if len(self._buf) < end_data:
            return NeedData(end_all - len(self._buf))
        got_trailer = bytes(self._buf[end_data:end_all])
        if got_trailer != self.trailer[:len(got_trailer)]:
            raise BlockError(
                f"block of {self._length} bytes announced, but more data follows it "
                f"(expected the terminator {self.trailer!r}, got {got_trailer!r}): the length header is too short")
        if len(self._buf) < end_all:
            return NeedData(end_all - len(self._buf))
        if len(self._buf) > end_all:
            raise BlockError(f"{len(self._buf) - end_all} unexpected byte(s) after the block terminator")
        self._done = Block(bytes(self._buf[self._header_len:end_data]), got_trailer,
                           bytes(self._buf[:self._header_len]))
        return self._done

    def _parse_header(self) -> int:
        """Parse ``#<n><digits>``; returns bytes still needed for the header (0 when parsed)."""
        buf = self._buf
        if not buf:
            return 2
        if buf[0:1] != b"#":
            raise BlockError(f"a block starts with '#', got {bytes(buf[:16])!r}")
        if len(buf) < 2:
            return 1
        n_char = buf[1:2]
        if not n_char.isdigit():
            raise BlockError(f"block header: '#' must be followed by a digit 0-9, got {bytes(n_char)!r}")
        n = int(n_char)
        if n == 0:
            if not self.allow_indefinite:
                raise BlockError("indefinite-length block (#0) refused: this transport cannot mark the end "
                                 "of a message; set the instrument to definite-length blocks")
            self._header_len, self._length = 2, -1
            return 0
        if len(buf) < 2 + n:
            return 2 + n - len(buf)
        digits = bytes(buf[2:2 + n])
        if not digits.isdigit():
            raise BlockError(f"block header: length field {digits!r} is not {n} decimal digits")
        length = int(digits)
        if length > self.max_bytes:
            raise BlockError(f"block header announces {length} bytes, above the cap of {self.max_bytes}")
        self._check_expected(length, announced=True)
        self._header_len, self._length = 2 + n, length
        return 0

    def _check_expected(self, length: int, *, announced: bool = False) -> None:
        if self.expected_bytes is not None and length != self.expected_bytes:
            what = "header announces" if announced else "block holds"
            raise BlockError(f"block {what} {length} bytes, but the scaling reply implies {self.expected_bytes}")

    def _truncated(self) -> BlockError:
        if self._length is None:
            return BlockError(f"block truncated inside its header ({bytes(self._buf[:16])!r})")
        return BlockError(f"block truncated: received {self.received_bytes} of {self._length} data bytes")


def parse_block(data: bytes, **options) -> bytes:
    """Parse one complete message holding a block; the data bytes. Raises BlockError."""
    parser = BlockParser(**options)
    event = parser.feed(data)
    if isinstance(event, Block):
        return event.data
    if parser.trailer and parser.announced_bytes is not None and parser.received_bytes == parser.announced_bytes:
        raise BlockError("block has no terminator after its data")
    return parser.end_of_message().data


def make_block(data: bytes, trailer: bytes = b"\n") -> bytes:
    """Encode a definite-length block (IEEE 488.2 §8.7.9) with the smallest digit count."""
    length = str(len(data)).encode()
    if len(length) > 9:
        raise BlockError("a definite-length block holds at most 999,999,999 bytes")
    return b"#" + str(len(length)).encode() + length + data + trailer
