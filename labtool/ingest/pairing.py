"""One file per channel → one capture: which files belong together, and joining them.

Many scopes save each channel to its own file (``C1_run7.csv`` + ``C2_run7.csv``, ``F0000CH1.CSV`` +
``F0000CH2.CSV``). The rule: files in one folder whose names are the same apart from one channel
token (``C1``, ``CH2``, ``Ch_3``, ``chan4``, ``channel 1``, not preceded by a letter and not
followed by a letter or digit) form one capture, in channel order, when there are at least two
with different channel numbers. ``--pair-channels off`` reads every file alone; ``--pair-channels
REGEX`` uses another token (the first group of the expression, else its whole match). The files'
time bases must agree (same count, start within half an interval, the same interval to 1e-6), or
nothing of the group is stored.
"""

from __future__ import annotations

import hashlib
import os
import re
from collections import defaultdict
from dataclasses import replace
from typing import Sequence

from labtool.capture import Capture, Channel, Provenance
from labtool.errors import InputError, UsageError

CHANNEL_TOKEN = re.compile(r"(?<![a-z])(ch(?:an(?:nel)?)?[ _-]?\d{1,2}|c\d{1,2})(?![a-z0-9])", re.IGNORECASE)
AUTO, OFF = "auto", "off"
START_TOLERANCE = 0.5  # of an interval
INTERVAL_TOLERANCE = 1e-6  # relative


def token_pattern(rule: str | None) -> re.Pattern | None:
    """The channel-token expression of a ``--pair-channels`` value (None: no pairing)."""
    if rule in (None, "", AUTO):
        return CHANNEL_TOKEN
    if rule.lower() == OFF:
        return None
    try:
        return re.compile(rule, re.IGNORECASE)
    except re.error as exc:
        raise UsageError(f"--pair-channels {rule!r}: not a regular expression ({exc})") from None


def _split_name(path: str) -> tuple[str, str, str]:
    folder, name = os.path.split(path)
    lowered = name.lower()
    cut = len(name) - (7 if lowered.endswith((".csv.gz", ".tsv.gz", ".txt.gz", ".dat.gz")) else 4)
    if "." not in name[cut:]:
        cut = len(name)
    return folder, name[:cut], name[cut:].lower()


def _token(stem: str, pattern: re.Pattern) -> tuple[str, int, int] | None:
    """(token as written, start, end) of the one channel token in a file stem, else None."""
    hits = list(pattern.finditer(stem))
    if len(hits) != 1:
        return None
    m = hits[0]
    group = 1 if m.groups() and m.group(1) is not None else 0
    return m.group(group), m.start(group), m.end(group)


def _channel_number(token: str) -> tuple[int, str]:
    digits = re.findall(r"\d+", token)
    return (int(digits[-1]) if digits else 0, token)


def group_files(files: Sequence[str], rule: str | None = AUTO) -> list[list[str]]:
    """Files in reading order, those of one capture together (in channel order)."""
    pattern = token_pattern(rule)
    if pattern is None:
        return [[f] for f in files]
    groups: dict[tuple, list[tuple[tuple[int, str], str]]] = defaultdict(list)
    keys: list[tuple] = []
    for path in files:
        folder, stem, ext = _split_name(path)
        found = _token(stem, pattern)
        key = (folder, stem[:found[1]] + "\0" + stem[found[2]:], ext) if found else ("", path, "")
        if key not in groups:
            keys.append(key)
        groups[key].append((_channel_number(found[0]) if found else (0, ""), path))
    out: list[list[str]] = []
    for key in keys:
        members = groups[key]
        numbers = {number for (number, _), _ in members}
        if len(members) >= 2 and len(numbers) == len(members):
            out.append([path for _, path in sorted(members)])
        else:
            out.extend([path] for _, path in members)
    return out


def channel_token(path: str, rule: str | None = AUTO) -> str:
    pattern = token_pattern(rule) or CHANNEL_TOKEN
    found = _token(_split_name(path)[1], pattern)
    return found[0] if found else os.path.basename(path)


def _check_same_time_base(first: Capture, other: Capture) -> None:
    a, b = first.time, other.time
    problem = None
    if a.n != b.n:
        problem = f"{b.n} samples, {a.n} in"
    elif a.uniform and b.uniform:
        if abs(a.dt_s - b.dt_s) > INTERVAL_TOLERANCE * a.dt_s:
            problem = f"interval {b.dt_s:.9g} s, {a.dt_s:.9g} s in"
        elif abs(a.t0_s - b.t0_s) > START_TOLERANCE * a.dt_s:
            problem = f"start {b.t0_s:.9g} s, {a.t0_s:.9g} s in"
    else:
        ta, tb = a.array(), b.array()
        step = float(min(ta[1] - ta[0], tb[1] - tb[0])) if a.n > 1 else 0.0
        if abs(ta - tb).max() > START_TOLERANCE * step:
            problem = "other sample times than"
    if problem:
        raise InputError(other.provenance.source_path,
                         f"time base differs from its channel partner ({problem} "
                         f"{os.path.basename(first.provenance.source_path)}); --pair-channels off reads them apart")


def join_channels(captures: Sequence[Capture], tokens: Sequence[str]) -> Capture:
    """One capture from one capture per file (roles still to assign): channels renamed by their file's
    channel token when names repeat across files."""
    first = captures[0]
    for other in captures[1:]:
        _check_same_time_base(first, other)
    names = [c.name for cap in captures for c in cap.channels]
    clash = len(set(names)) != len(names)
    channels: list[Channel] = []
    for cap, token in zip(captures, tokens):
        for c in cap.channels:
            name = c.name if not clash else (token if len(cap.channels) == 1 else f"{token} {c.name}")
            channels.append(replace(c, name=name, role="other", role_source=""))
    metadata: dict[str, str] = {}
    for cap in reversed(captures):
        metadata.update(cap.provenance.metadata)
    metadata["channel_files"] = " | ".join(cap.provenance.source_path for cap in captures)
    digest = hashlib.sha256("|".join(cap.provenance.sha256 for cap in captures).encode()).hexdigest()
    conditions = first.conditions
    for cap in captures[1:]:
        conditions = cap.conditions.merged(conditions)
    provenance = Provenance(source_path=first.provenance.source_path, sha256=digest,
                            importer=first.provenance.importer, imported_at=first.provenance.imported_at,
                            locator=first.provenance.locator, metadata=metadata)
    return Capture(time=first.time, channels=tuple(channels), conditions=conditions, provenance=provenance)
