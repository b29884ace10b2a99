"""Ingest many files and folders into a campaign: parse in workers, store in this process.

SQLite wants one writer, so workers only read and parse (through :func:`labtool.execute.run_batch`);
the parent adds each complete capture to the store. A failed file is listed and the batch goes on.
"""

from __future__ import annotations

import functools
import os
from dataclasses import dataclass, field
from typing import Iterable, Sequence

from labtool.errors import StoreError
from labtool.execute import Scheduler, run_batch
from labtool.ingest.options import IngestOptions
from labtool.ingest.readers import CAPTURE_EXTENSIONS, read_path
from labtool.store import Campaign


@dataclass(frozen=True)
class IngestReport:
    added: list[str] = field(default_factory=list)  # capture ids
    skipped: list[str] = field(default_factory=list)  # already in the store
    failed: list[tuple[str, str]] = field(default_factory=list)  # (path, one-line message)
    files: int = 0  # files read


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
    """Read every file (``exclude``: paths never to read, e.g. the manifest) and store its captures."""
    files, failed = find_files(paths, exclude=exclude)
    added: list[str] = []
    skipped: list[str] = []
    reader = functools.partial(read_path, options=options)
    for outcome in run_batch(reader, files, scheduler, what="ingest", unit="file"):
        if not outcome.ok:
            failed.append((outcome.item, outcome.error))
            continue
        for capture in outcome.value:
            try:
                result = campaign.add_capture(capture)
            except StoreError as exc:
                failed.append((outcome.item, str(exc)))
                continue
            (added if result.status == "added" else skipped).append(result.capture_id)
    return IngestReport(added=added, skipped=skipped, failed=failed, files=len(files))
