"""Ingest many files and folders into a campaign: parse in workers, store in this process.

SQLite wants one writer, so workers only read and parse (through :func:`labtool.execute.run_batch`);
the parent adds each complete capture to the store. A failed file is listed and the batch goes on.
"""

from __future__ import annotations

import functools
import os
from dataclasses import dataclass, field
from typing import Iterable, Sequence

from labtool.capture import Capture
from labtool.errors import StoreError
from labtool.execute import Scheduler, run_batch
from labtool.ingest.options import IngestOptions
from labtool.ingest.pairing import group_files
from labtool.ingest.readers import CAPTURE_EXTENSIONS, read_group
from labtool.store import Campaign


@dataclass(frozen=True)
class IngestReport:
    added: list[str] = field(default_factory=list)  # capture ids (new versions included)
    skipped: list[str] = field(default_factory=list)  # already in the store
    failed: list[tuple[str, str]] = field(default_factory=list)  # (path, one-line message)
    files: int = 0  # files read
    updated: list[str] = field(default_factory=list)  # stored captures whose conditions were updated
    roles: list[tuple[str, str]] = field(default_factory=list)  # (path, "supply=CH1 (shape), …") per capture
    warnings: list[str] = field(default_factory=list)  # "path: what", one line each
    versions: list[str] = field(default_factory=list)  # "path: …" for sources stored again under new conditions


def role_summary(capture: Capture) -> str:
    """``supply=CH1 (shape), output=CH2 (shape)``: which channel got which role, and how."""
    return ", ".join(f"{c.role}={c.name} ({c.role_source})" for c in capture.channels if c.role != "other")


def _is_capture_name(name: str) -> bool:
    """A capture file by its name; run sheets called ``manifest.*`` are never captures."""
    lowered = name.lower()
    return (not lowered.startswith(".") and lowered.endswith(CAPTURE_EXTENSIONS)
            and lowered.split(".")[0] != "manifest")


def find_files(paths: Iterable[str], *, exclude: Iterable[str] = ()) -> tuple[list[str], list[tuple[str, str]]]:
    """Files named directly, and capture files found in folders (recursive, sorted; hidden files and
    ``manifest.*`` run sheets skipped)."""
    skip = {os.path.realpath(p) for p in exclude}
    files: list[str] = []
    problems: list[tuple[str, str]] = []
    seen: set[str] = set()

    def keep(p: str) -> None:
        real = os.path.realpath(p)
        if real not in seen and real not in skip:
            seen.add(real)
            files.append(p)

    for raw in paths:
        path = os.fspath(raw)
        if os.path.isdir(path):
            found = 0
            for root, dirs, names in os.walk(path):
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                for name in sorted(names):
                    if _is_capture_name(name):
                        keep(os.path.join(root, name))
                        found += 1
            if not found:
                problems.append((path, f"{path}: no capture files in this folder "
                                       f"({', '.join(sorted(set(CAPTURE_EXTENSIONS)))})"))
        elif os.path.exists(path):
            keep(path)
        else:
            problems.append((path, f"{path}: no such file or folder"))
    return files, problems


def ingest_paths(paths: Sequence[str], campaign: Campaign, options: IngestOptions = IngestOptions(),
                 scheduler: Scheduler | None = None, *, exclude: Iterable[str] = ()) -> IngestReport:
    """Read every file (``exclude``: paths never to read, e.g. the manifest) and store its captures.

    Files saved one channel per file are joined into one capture first (``options.pair_channels``).
    """
    files, failed = find_files(paths, exclude=exclude)
    groups = group_files(files, options.pair_channels)
    report = IngestReport(failed=failed, files=len(files))
    reader = functools.partial(read_group, options=options)
    for outcome in run_batch(reader, groups, scheduler, what="ingest", unit="capture"):
        if not outcome.ok:
            report.failed.append((outcome.item[0], outcome.error))
            continue
        for capture in outcome.value:
            path = capture.provenance.source_path
            try:
                result = campaign.add_capture(capture, update_conditions=options.update_conditions)
            except StoreError as exc:
                report.failed.append((path, str(exc)))
                continue
            if result.status == "skipped":
                report.skipped.append(result.capture_id)
                continue
            (report.updated if result.status == "updated" else report.added).append(result.capture_id)
            report.roles.append((path, role_summary(capture)))
            report.warnings.extend(f"{path}: {w}" for w in capture.provenance.warnings)
            if result.status == "added" and result.capture_id != capture.capture_id:
                report.versions.append(f"{path}: stored before under other conditions; the new ones are version "
                                       f"{result.version} (--update-conditions changes the stored capture instead)")
    return report
