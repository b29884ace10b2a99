"""Command profiles: what to send an instrument for each operation a driver needs (TOML, versioned).

An operation is a command template, a reply parser and a synchronisation strategy. The schema is
documented in ``instruments/profiles/README.md``; ``generic-scpi.toml`` there is the shipped example.
"""

from __future__ import annotations

import hashlib
import math
import string
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from instruments import scpi
from instruments.schema import build
from instruments.session import Session
from labtool.errors import InstrumentTimeout, ProfileError

SCHEMA = "labtool-instrument-profile"
SCHEMA_VERSION = 1
PROFILE_DIR = Path(__file__).parent / "profiles"

REPLIES = ("none", "number", "numbers", "int", "bool", "text", "idn", "preamble", "block")
SYNCS = ("none", "opc", "poll", "wait")
BLOCK_FORMATS = {"int8": "i1", "uint8": "u1", "int16be": ">i2", "int16le": "<i2", "uint16be": ">u2",
                 "uint16le": "<u2", "float32be": ">f4", "float32le": "<f4"}
PREAMBLE_FIELDS = ("points", "x_increment_s", "x_origin_s", "x_reference", "y_increment", "y_origin",
                   "y_reference")

# Operations each role driver needs; a profile without them is refused for that role.
ROLE_OPERATIONS: dict[str, tuple[str, ...]] = {
    "scope": ("configure_channel", "configure_format", "configure_timebase", "configure_trigger",
              "arm_single", "wait_complete", "read_preamble", "read_data"),
    "supply": ("set_voltage", "set_current_limit", "set_ovp", "set_ramp_time", "output_on", "output_off"),
    "smu": ("read_current_preamble", "read_current_data"),
    "chamber": ("set_point", "read_temperature"),
}
OPTIONAL_OPERATIONS: dict[str, tuple[str, ...]] = {
    "supply": ("select_part", "output_state", "measure_current"),
    "scope": ("force_trigger",), "smu": (), "chamber": (),
}
# The smu operations live in the supply table: an SMU is a supply that also measures its current.
ROLE_TABLE = {"scope": "scope", "supply": "supply", "smu": "supply", "chamber": "chamber"}


@dataclass(frozen=True)
class Operation:
    """One operation: ``command`` template (``{name}`` fields), reply parser, synchronisation."""

    name: str
    command: str
    reply: str = "none"
    sync: str = "none"
    timeout_s: float | None = None  # for opc / poll (and a slow query)
    wait_s: float = 0.0  # for sync = "wait"
    poll_query: str = ""
    poll_mask: int = 0
    poll_done: str = "clear"  # done when (value & mask) is "clear" (== 0) or "set" (!= 0)
    poll_interval_s: float = 0.05
    fields: tuple[str, ...] = ()  # reply = "preamble": names of the comma-separated values
    format: str = ""  # reply = "block": sample encoding, one of BLOCK_FORMATS

    @property
    def parameters(self) -> tuple[str, ...]:
        return tuple(f for _, f, _, _ in string.Formatter().parse(self.command) if f)

    def render(self, params: Mapping[str, Any]) -> str:
        missing = [p for p in self.parameters if p not in params]
        if missing:
            raise ProfileError(f"operation {self.name}: no value for {', '.join(missing)}")
        return self.command.format(**{k: _scpi_value(v) for k, v in params.items()})

    def run(self, session: Session, **params) -> Any:
        """Send, parse the reply, synchronise, then drain the error queue naming this command."""
        if self.reply == "block":
            raise ProfileError(f"operation {self.name}: a block reply is read by the driver, not run()")
        text = self.render(params)
        value = None
        if self.reply == "none":
            if self.sync == "opc":
                # *OPC? answers 1 once the preceding commands are done (IEEE 488.2 §10.19).
                message = f"{text};*OPC?" if text else "*OPC?"
                reply = session.query(message, timeout_s=self.timeout_s)
                if reply.strip().split(";")[-1] not in ("1", "+1"):
                    raise ProfileError(f"operation {self.name}: *OPC? answered {reply.strip()!r}, expected 1")
            elif text:
                session.write(text)
        else:
            value = self.parse(session.query(text, timeout_s=self.timeout_s))
        if self.sync == "wait" and self.wait_s > 0:
            time.sleep(self.wait_s)
        elif self.sync == "poll":
            self._poll(session)
        session.check_errors(text or self.name)
        return value

    def parse(self, reply: str) -> Any:
        what = f"reply to {self.name}"
        if self.reply == "number":
            return scpi.parse_number(reply, what=what)
        if self.reply == "numbers":
            return scpi.parse_numbers(reply, what=what)
        if self.reply == "int":
            return scpi.parse_int(reply, what=what)
        if self.reply == "bool":
            return scpi.parse_bool(reply, what=what)
        if self.reply == "idn":
            return scpi.parse_idn(reply)
        if self.reply == "preamble":
            values = scpi.parse_numbers(reply, what=what)
            if len(values) != len(self.fields):
                raise ProfileError(f"{what}: {len(values)} values, the profile names {len(self.fields)} "
                                   f"({', '.join(self.fields)}): {reply.strip()[:80]!r}")
            return dict(zip(self.fields, values))
        return reply.strip()

    def _poll(self, session: Session) -> None:
        deadline = time.monotonic() + (self.timeout_s or 10.0)
        while True:
            value = scpi.parse_int(session.query(self.poll_query), what=f"{self.name} poll")
            flag = value & self.poll_mask
            if (flag == 0) == (self.poll_done == "clear"):
                return
            if time.monotonic() > deadline:
                raise InstrumentTimeout(f"{session.name}: {self.name} not complete after {self.timeout_s:g} s "
                                        f"({self.poll_query} = {value})")
            time.sleep(self.poll_interval_s)


def _scpi_value(value: Any) -> str:
    if isinstance(value, bool):
        return "ON" if value else "OFF"
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ProfileError(f"cannot send the non-finite value {value!r} to an instrument")
        return format(value, ".9g")
    return str(value)


@dataclass(frozen=True)
class Transport:
    timeout_s: float = 5.0
    read_termination: str = "\n"
    write_termination: str = "\n"
    error_query: str = ":SYSTem:ERRor?"
    max_error_entries: int = 32
    block_max_bytes: int = 256 * 1024 * 1024
    block_trailer: str = "\n"


@dataclass(frozen=True)
class Profile:
    name: str
    path: str
    sha256: str
    description: str
    identity_pattern: str
    transport: Transport
    tables: Mapping[str, Mapping[str, Operation]] = field(repr=False)
    settings: Mapping[str, Mapping[str, Any]] = field(repr=False, default_factory=dict)

    def roles(self) -> list[str]:
        """Roles this profile can serve (every required operation present)."""
        return [r for r, ops in ROLE_OPERATIONS.items()
                if all(o in self.tables.get(ROLE_TABLE[r], {}) for o in ops)]

    def require(self, role: str) -> Mapping[str, Operation]:
        table = self.tables.get(ROLE_TABLE[role], {})
        missing = [o for o in ROLE_OPERATIONS[role] if o not in table]
        if missing:
            raise ProfileError(f"{self.path}: profile {self.name!r} cannot drive a {role}: no operation "
                               f"{', '.join(f'[{ROLE_TABLE[role]}.{m}]' for m in missing)}")
        return table

    def operation(self, role: str, name: str) -> Operation | None:
        return self.tables.get(ROLE_TABLE[role], {}).get(name)

    def session(self, resource: str, *, backend: str = "@py", name: str = "") -> Session:
        t = self.transport
        return Session(resource, backend=backend, timeout_s=t.timeout_s, read_termination=t.read_termination,
                       write_termination=t.write_termination, error_query=t.error_query,
                       max_error_entries=t.max_error_entries, identity_pattern=self.identity_pattern, name=name)


def resolve_profile_path(name_or_path: str | Path, base: Path | None = None) -> Path:
    """A path (relative to ``base``), or the name of a shipped profile (``generic-scpi``)."""
    p = Path(name_or_path)
    if base is not None and not p.is_absolute() and (base / p).exists():
        return base / p
    if p.exists():
        return p
    shipped = PROFILE_DIR / (p.name if p.suffix == ".toml" else f"{p.name}.toml")
    if shipped.exists():
        return shipped
    raise ProfileError(f"{name_or_path}: no such profile file (and no shipped profile of that name)")


def load_profile(name_or_path: str | Path, base: Path | None = None) -> Profile:
    path = resolve_profile_path(name_or_path, base)
    raw = path.read_bytes()
    try:
        doc = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ProfileError(f"{path}: not valid TOML: {exc}") from None
    where = str(path)
    if doc.get("schema") != SCHEMA:
        raise ProfileError(f"{where} [schema]: expected {SCHEMA!r}, got {doc.get('schema')!r}")
    if doc.get("version") != SCHEMA_VERSION:
        raise ProfileError(f"{where} [version]: this labtool reads profile version {SCHEMA_VERSION}, "
                           f"got {doc.get('version')!r}")
    transport = _build(Transport, doc.get("transport", {}), f"{where} [transport]")
    tables: dict[str, dict[str, Operation]] = {}
    settings: dict[str, dict[str, Any]] = {}
    for table in ("scope", "supply", "chamber"):
        section = doc.get(table)
        if section is None:
            continue
        if not isinstance(section, dict):
            raise ProfileError(f"{where} [{table}]: must be a table")
        ops = {}
        for key, value in section.items():
            if isinstance(value, dict):
                ops[key] = _operation(key, value, f"{where} [{table}.{key}]")
            else:
                settings.setdefault(table, {})[key] = value
        tables[table] = ops
    identity = doc.get("identity", {})
    return Profile(name=str(doc.get("name", path.stem)), path=where, sha256=hashlib.sha256(raw).hexdigest(),
                   description=str(doc.get("description", "")), identity_pattern=str(identity.get("pattern", "")),
                   transport=transport, tables=tables, settings=settings)


def _build(cls, values: dict, where: str):
    return build(cls, values, where, ProfileError)


def _operation(name: str, values: dict, where: str) -> Operation:
    if "command" not in values:
        raise ProfileError(f"{where}: no command")
    op = _build(Operation, {"name": name, **values}, where)
    if op.reply not in REPLIES:
        raise ProfileError(f"{where} reply: {op.reply!r} is not one of {', '.join(REPLIES)}")
    if op.sync not in SYNCS:
        raise ProfileError(f"{where} sync: {op.sync!r} is not one of {', '.join(SYNCS)}")
    if op.sync == "opc" and op.reply != "none":
        raise ProfileError(f"{where}: sync = \"opc\" only for commands without a reply")
    if op.sync == "poll" and (not op.poll_query or op.poll_mask <= 0):
        raise ProfileError(f"{where}: sync = \"poll\" needs poll_query and a positive poll_mask")
    if op.reply == "preamble":
        missing = [f for f in PREAMBLE_FIELDS if f not in op.fields]
        if missing:
            raise ProfileError(f"{where} fields: missing {', '.join(missing)}")
    if op.reply == "block" and op.format not in BLOCK_FORMATS:
        raise ProfileError(f"{where} format: {op.format!r} is not one of {', '.join(BLOCK_FORMATS)}")
    try:
        op.parameters
    except ValueError as exc:
        raise ProfileError(f"{where} command: bad template {op.command!r}: {exc}") from None
    return op
