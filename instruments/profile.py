"""Command profiles: what to send an instrument for each operation a driver needs (TOML, versioned).

An operation is a command template, a reply parser and a synchronisation strategy. The schema is
documented in ``instruments/profiles/README.md``; ``generic-scpi.toml`` there is the shipped example.
Everything that can be checked without an instrument (templates, format specs, expressions, the
scaling record) is checked when the profile loads.
"""

from __future__ import annotations

import hashlib
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from instruments import scpi
from instruments.expression import Expression, parse_expression
from instruments.schema import build
from instruments.session import Session
from instruments.template import Template, parse_template
from instruments.waveform import BLOCK_FORMATS, SCALING_FIELDS, Scaling
from labtool.errors import InstrumentError, InstrumentTimeout, ProfileError

SCHEMA = "labtool-instrument-profile"
SCHEMA_VERSION = 1
PROFILE_DIR = Path(__file__).parent / "profiles"

REPLIES = ("none", "number", "numbers", "int", "bool", "text", "idn", "scaling", "block")
SYNCS = ("none", "opc", "poll", "wait")
DEFAULT_WAIT_S = 10.0

# Operations each role driver needs; a profile without them is refused for that role.
ROLE_OPERATIONS: dict[str, tuple[str, ...]] = {
    "scope": ("configure_channel", "configure_format", "configure_timebase", "configure_trigger",
              "arm_single", "wait_complete", "read_scaling", "read_data"),
    "supply": ("set_voltage", "set_current_limit", "set_ovp", "set_ramp_time", "output_on", "output_off"),
    "smu": ("read_current_scaling", "read_current_data"),
    "chamber": ("set_point", "read_temperature"),
}
OPTIONAL_OPERATIONS: dict[str, tuple[str, ...]] = {
    "supply": ("select_part", "output_state", "measure_current"),
    "scope": ("force_trigger",), "smu": (), "chamber": (),
}
# The smu operations live in the supply table: an SMU is a supply that also measures its current.
ROLE_TABLE = {"scope": "scope", "supply": "supply", "smu": "supply", "chamber": "chamber"}

# The values each operation's template may use (what the driver gives it).
SCOPE_SETUP = ("record_s", "points", "pretrigger_s", "level_v", "trigger_channel", "ramp_s")
SUPPLY_SETUP = ("channel", "voltage_v", "current_a", "ovp_v", "ramp_s")
OPERATION_FIELDS: dict[str, dict[str, tuple[str, ...]]] = {
    "scope": {
        "configure_channel": ("channel", "span_v", "offset_v", *SCOPE_SETUP),
        "configure_format": SCOPE_SETUP, "configure_timebase": SCOPE_SETUP,
        "configure_trigger": ("channel", *SCOPE_SETUP), "arm_single": SCOPE_SETUP, "force_trigger": SCOPE_SETUP,
        "wait_complete": ("timeout_s", *SCOPE_SETUP), "read_scaling": ("channel",), "read_data": ("channel",),
    },
    "supply": {
        "set_voltage": SUPPLY_SETUP, "set_current_limit": SUPPLY_SETUP, "set_ovp": SUPPLY_SETUP,
        "set_ramp_time": SUPPLY_SETUP, "output_on": ("channel",), "output_off": ("channel",),
        "output_state": ("channel",), "measure_current": ("channel",), "select_part": ("slot", "channel"),
        "read_current_scaling": ("channel",), "read_current_data": ("channel",),
    },
    "chamber": {"set_point": ("temperature_c",), "read_temperature": ()},
}
# Plan values that must reach the instrument, by the operation meant to send them. A profile in
# which no operation of the table sends one gets a warning when a plan loads it (channel: that very
# operation must use it, or every channel gets the same settings).
PLAN_VALUES: dict[str, dict[str, tuple[str, ...]]] = {
    "scope": {"configure_channel": ("channel", "span_v", "offset_v"),
              "configure_timebase": ("record_s", "points", "pretrigger_s"),
              "configure_trigger": ("channel", "level_v"), "read_scaling": ("channel",), "read_data": ("channel",)},
    "supply": {"set_voltage": ("channel", "voltage_v"), "set_current_limit": ("channel", "current_a"),
               "set_ovp": ("channel", "ovp_v"), "set_ramp_time": ("channel", "ramp_s"), "select_part": ("slot",),
               "output_on": ("channel",), "output_off": ("channel",), "output_state": ("channel",)},
    "chamber": {"set_point": ("temperature_c",)},
}


@dataclass(frozen=True)
class WaitOutcome:
    """What a wait said: ``done`` True, False (not done / timed out), None (it cannot tell)."""

    done: bool | None
    reply: str
    command: str
    limit_s: float


@dataclass(frozen=True)
class Operation:
    """One operation: ``command`` template, reply parser, synchronisation."""

    name: str
    command: str
    reply: str = "none"
    sync: str = "none"
    timeout_s: float | None = None  # opc / poll / a waiting reply: how long; for a query: its reply timeout
    wait_s: float = 0.0  # for sync = "wait"
    poll_query: str = ""
    poll_mask: int = 0  # > 0: the poll reply is a number, these bits tell; 0: the reply text is compared with done
    poll_done: str = "clear"  # done when (value & mask) is "clear" (== 0) or "set" (!= 0)
    poll_interval_s: float = 0.05
    done: tuple[str, ...] = ()  # replies (wait reply or status poll) that mean "done"
    not_done: tuple[str, ...] = ()  # replies that mean "not done / timed out"; others are errors
    fields: tuple[str, ...] = ()  # reply = "scaling": names of the reply's values, in order
    record: Mapping[str, Any] = field(default_factory=dict)  # scaling record field → expression or constant
    expect: Mapping[str, str] = field(default_factory=dict)  # text field → the text it must be (a template)
    format: str = ""  # reply = "block": sample encoding, one of BLOCK_FORMATS
    template: Template = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "template", parse_template(self.command, where=f"[{self.name}] command"))

    @property
    def parameters(self) -> tuple[str, ...]:
        """Names the command uses, in the order of its fields."""
        return self.template.field_names

    def render(self, params: Mapping[str, Any]) -> str:
        try:
            return self.template.render(params)
        except ProfileError as exc:
            raise ProfileError(f"operation {self.name}: {exc}") from None

    def run(self, session: Session, **params) -> Any:
        """Send, parse the reply, synchronise, then drain the error queue naming this command."""
        if self.reply == "block":
            raise ProfileError(f"operation {self.name}: a block reply is read by the driver, not run()")
        text = self.render(params)
        value = None
        if self.reply == "none":
            if self.sync == "opc":
                self._opc(session, text, self.timeout_s)
            elif text:
                session.write(text)
        else:
            value = self.parse(session.query(text, timeout_s=self.timeout_s), what=f"{session.name}: reply to {text!r}")
        if self.sync == "wait" and self.wait_s > 0:
            time.sleep(self.wait_s)
        elif self.sync == "poll":
            done, reply, limit = self._poll(session, self.timeout_s or DEFAULT_WAIT_S)
            if not done:
                raise InstrumentTimeout(f"{session.name}: {self.name} not complete after {limit:g} s "
                                        f"({self.poll_query} = {reply})", instrument=session.name,
                                        command=self.poll_query)
        session.check_errors(text or self.name)
        return value

    def wait(self, session: Session, *, timeout_s: float | None = None, **params) -> WaitOutcome:
        """Wait for an acquisition and say whether it happened. ``timeout_s`` overrides the profile's
        (``bench check`` waits briefly on purpose); the template may send it as ``{timeout_s}``."""
        limit = timeout_s if timeout_s is not None else (self.timeout_s or DEFAULT_WAIT_S)
        text = self.render({**params, "timeout_s": limit})
        shown = self.poll_query if self.sync == "poll" else (text or ("*OPC?" if self.sync == "opc" else self.name))
        try:
            if self.reply != "none":  # a blocking query: the instrument answers done or timed out
                deadline = limit + session.timeout_s  # its own limit, then time for the answer to come
                reply = session.query(text, timeout_s=deadline)
                done = self._judge(reply, session, text)
            elif self.sync == "opc":
                reply, done = self._opc(session, text, limit), True
            elif self.sync == "poll":
                if text:
                    session.write(text)
                done, reply, _ = self._poll(session, limit)
            else:
                if text:
                    session.write(text)
                if self.sync == "wait" and self.wait_s > 0:
                    time.sleep(self.wait_s)
                reply, done = "", None
        except InstrumentTimeout as exc:  # no answer at all: nothing was acquired in that time
            return WaitOutcome(False, f"no answer ({exc.message})", shown, limit)
        session.check_errors(shown)
        return WaitOutcome(done, reply.strip(), shown, limit)

    def parse(self, reply: str, *, what: str | None = None) -> Any:
        what = what or f"reply to {self.name}"
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
        if self.reply == "scaling":
            return self.scaling(reply, {}, what=what)
        return reply.strip()

    def scaling(self, reply: str, params: Mapping[str, Any], *, what: str) -> Scaling:
        """The reply mapped onto labtool's scaling record (reply values by ``fields``, then ``record``)."""
        raw = scpi.split_reply(reply)
        if len(raw) != len(self.fields):
            raise InstrumentError(f"{what}: {len(raw)} values, the profile names {len(self.fields)} "
                                  f"({', '.join(self.fields)}): {reply.strip()[:120]!r}")
        items = {name: scpi.parse_item(text) for name, text in zip(self.fields, raw)}
        for name, expected_template in self.expect.items():
            expected = parse_template(expected_template, where=f"[{self.name}] expect {name}").render(params)
            got = scpi.unquote(raw[self.fields.index(name)])
            if got.upper() != expected.upper():
                raise InstrumentError(f"{what}: {name} is {got!r}, expected {expected!r} (the scaling of another "
                                      f"trace?): {reply.strip()[:120]!r}")
        values = {}
        for key in SCALING_FIELDS:
            source = self.record.get(key, key)
            try:
                values[key] = (source if isinstance(source, (int, float)) else
                               _record_expression(source, self.name, key).evaluate(items))
            except ProfileError as exc:
                raise InstrumentError(f"{what}: record {key} = {source!r}: {exc}: {reply.strip()[:120]!r}") from None
        return Scaling.from_values(values, what=what)

    # -- internals -------------------------------------------------------------------------
    def _opc(self, session: Session, text: str, timeout_s: float | None) -> str:
        # *OPC? answers 1 once the preceding commands are done (IEEE 488.2 §10.19).
        message = f"{text};*OPC?" if text else "*OPC?"
        reply = session.query(message, timeout_s=timeout_s)
        if reply.strip().split(";")[-1] not in ("1", "+1"):
            raise InstrumentError(f"{session.name}: {message!r}: *OPC? answered {reply.strip()!r}, expected 1",
                                  instrument=session.name, command=message)
        return reply

    def _judge(self, reply: str, session: Session, command: str) -> bool:
        word = reply.strip().upper()
        if word in (d.upper() for d in self.done):
            return True
        if not self.not_done or word in (d.upper() for d in self.not_done):
            return False
        raise InstrumentError(f"{session.name}: {command!r} answered {reply.strip()!r}, which the profile names "
                              f"neither done ({', '.join(self.done)}) nor not done ({', '.join(self.not_done)})",
                              instrument=session.name, command=command)

    def _poll(self, session: Session, limit_s: float) -> tuple[bool, str, float]:
        deadline = time.monotonic() + limit_s
        while True:
            reply = session.query(self.poll_query)
            if self.poll_mask > 0:
                value = scpi.parse_int(reply, what=f"{session.name}: {self.name} poll {self.poll_query!r}")
                done = ((value & self.poll_mask) == 0) == (self.poll_done == "clear")
            else:
                done = self._judge(reply, session, self.poll_query)
            if done or time.monotonic() > deadline:
                return done, reply.strip(), limit_s
            time.sleep(self.poll_interval_s)


_EXPRESSIONS: dict[tuple[str, str, str], Expression] = {}


def _record_expression(text: str, op: str, key: str) -> Expression:
    if (op, key, text) not in _EXPRESSIONS:
        _EXPRESSIONS[(op, key, text)] = parse_expression(text, where=f"[{op}] record {key}")
    return _EXPRESSIONS[(op, key, text)]


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

    def unused_plan_values(self, role: str, *, ignore: tuple[str, ...] = ()) -> list[str]:
        """Plan values this profile never sends for ``role``, as ``[table.operation] name`` lines."""
        table_name = ROLE_TABLE[role]
        table = self.tables.get(table_name, {})
        used = frozenset().union(*(op.template.names for op in table.values()))
        out = []
        for op_name, names in PLAN_VALUES.get(table_name, {}).items():
            op = table.get(op_name)
            if op is None:
                continue
            for name in names:
                if name in ignore:
                    continue
                if name not in op.template.names and (name == "channel" or name not in used):
                    out.append(f"[{table_name}.{op_name}] does not send {name}")
        return out

    def session(self, resource: str, *, backend: str = "@py", name: str = "", log=None) -> Session:
        t = self.transport
        return Session(resource, backend=backend, timeout_s=t.timeout_s, read_termination=t.read_termination,
                       write_termination=t.write_termination, error_query=t.error_query,
                       max_error_entries=t.max_error_entries, identity_pattern=self.identity_pattern, name=name,
                       log=log)


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
    for table, known in OPERATION_FIELDS.items():
        section = doc.get(table)
        if section is None:
            continue
        if not isinstance(section, dict):
            raise ProfileError(f"{where} [{table}]: must be a table")
        ops = {}
        for key, value in section.items():
            if key not in known or not isinstance(value, dict):
                raise ProfileError(f"{where} [{table}.{key}]: not an operation of a {table} "
                                   f"(known: {', '.join(known)})")
            ops[key] = _operation(key, value, f"{where} [{table}.{key}]", frozenset(known[key]))
        tables[table] = ops
    identity = doc.get("identity", {})
    return Profile(name=str(doc.get("name", path.stem)), path=where, sha256=hashlib.sha256(raw).hexdigest(),
                   description=str(doc.get("description", "")), identity_pattern=str(identity.get("pattern", "")),
                   transport=transport, tables=tables)


def _build(cls, values: dict, where: str):
    return build(cls, values, where, ProfileError)


def _operation(name: str, values: dict, where: str, given: frozenset[str]) -> Operation:
    if "command" not in values:
        raise ProfileError(f"{where}: no command")
    values = {k: ([v] if k in ("done", "not_done") and isinstance(v, str) else v) for k, v in values.items()}
    try:
        op = _build(Operation, {"name": name, **values}, where)
    except ProfileError as exc:  # a bad template, found while the operation was built
        prefix = f"[{name}] command"
        if exc.message.startswith(prefix):
            raise ProfileError(f"{where} command{exc.message[len(prefix):]}") from None
        raise
    unknown = sorted(op.template.names - given)
    if unknown:
        raise ProfileError(f"{where} command: {op.command!r} uses {', '.join(unknown)}, which this operation is "
                           f"not given (it is given: {', '.join(sorted(given)) or 'nothing'})")
    if op.reply not in REPLIES:
        raise ProfileError(f"{where} reply: {op.reply!r} is not one of {', '.join(REPLIES)}")
    if op.sync not in SYNCS:
        raise ProfileError(f"{where} sync: {op.sync!r} is not one of {', '.join(SYNCS)}")
    if op.sync == "opc" and op.reply != "none":
        raise ProfileError(f"{where}: sync = \"opc\" only for commands without a reply")
    if op.sync == "poll" and (not op.poll_query or (op.poll_mask <= 0 and not op.done)):
        raise ProfileError(f"{where}: sync = \"poll\" needs poll_query and either a positive poll_mask or the "
                           f"done text of the status reply")
    if op.poll_done not in ("clear", "set"):
        raise ProfileError(f"{where} poll_done: {op.poll_done!r} is not clear or set")
    text_judged = (op.sync == "poll" and op.poll_mask <= 0) or (name == "wait_complete" and op.reply == "text")
    if (op.done or op.not_done) and not text_judged:
        raise ProfileError(f"{where}: done / not_done are for a wait_complete with reply = \"text\" or a "
                           f"status poll without poll_mask")
    if name == "wait_complete" and op.reply not in ("none", "text"):
        raise ProfileError(f"{where} reply: a wait answers text (with done / not_done) or nothing, not {op.reply!r}")
    if name == "wait_complete" and op.reply == "text" and not op.done:
        raise ProfileError(f"{where}: a wait that answers needs done (the reply meaning the acquisition is "
                           f"complete), and should name not_done (its timed-out reply)")
    if any(not isinstance(d, str) for d in (*op.done, *op.not_done)):
        raise ProfileError(f"{where}: done / not_done must be text")
    if op.reply == "scaling":
        _check_scaling(op, where, given)
    elif op.fields or op.record or op.expect:
        raise ProfileError(f"{where}: fields / record / expect are for reply = \"scaling\"")
    if op.reply == "block" and op.format not in BLOCK_FORMATS:
        raise ProfileError(f"{where} format: {op.format!r} is not one of {', '.join(BLOCK_FORMATS)}")
    return op


def _check_scaling(op: Operation, where: str, given: frozenset[str]) -> None:
    if not op.fields or any(not isinstance(f, str) or not f.isidentifier() for f in op.fields):
        raise ProfileError(f"{where} fields: name every value of the reply, in order, with plain names")
    if len(set(op.fields)) != len(op.fields):
        raise ProfileError(f"{where} fields: a name is used twice")
    unknown = sorted(set(op.record) - set(SCALING_FIELDS))
    if unknown:
        raise ProfileError(f"{where} record: {', '.join(unknown)} is not in labtool's scaling record "
                           f"({', '.join(SCALING_FIELDS)})")
    for key in SCALING_FIELDS:
        source = op.record.get(key)
        if source is None:
            if key not in op.fields:
                raise ProfileError(f"{where}: the scaling record's {key} is neither a reply field nor given in "
                                   f"record (a constant or an expression of the fields)")
            continue
        if isinstance(source, bool) or not isinstance(source, (int, float, str)):
            raise ProfileError(f"{where} record {key}: {source!r} is neither a number nor an expression")
        if isinstance(source, str):
            missing = sorted(_record_expression(source, op.name, key).names - set(op.fields))
            if missing:
                raise ProfileError(f"{where} record {key} = {source!r}: {', '.join(missing)} is not a reply field "
                                   f"({', '.join(op.fields)})")
    for name, text in op.expect.items():
        if name not in op.fields or not isinstance(text, str):
            raise ProfileError(f"{where} expect: {name!r} must be a reply field with the text it must read")
        parse_template(text, where=f"{where} expect {name}", allowed=given)
