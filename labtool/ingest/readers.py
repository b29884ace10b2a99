"""One entry point for every capture file: pick the reader by signature, then by extension.

A reader is ``read_<format>(path, data: bytes, options) -> list[Capture]``; register it in READERS.
After the reader, the conditions the user gave (name pattern, manifest, extra) are layered on top of
the file's own.
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

from labtool.capture import SUPPLY_VALID_KEY, Capture
from labtool.errors import InputError, LabtoolError
from labtool.ingest.conditions import conditions_from_name, manifest_conditions
from labtool.ingest.csv_reader import GZIP_MAGIC, read_csv
from labtool.ingest.options import IngestOptions
from labtool.ingest.pairing import channel_token, join_channels
from labtool.ingest.table import assign_capture_roles
from labtool.ingest.sniff import MAX_FILE_BYTES
from labtool.ingest.xlsx_reader import read_xlsx

ZIP_MAGIC = b"PK\x03\x04"
OLE2_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # legacy .xls (and other compound documents)


@dataclass(frozen=True)
class Reader:
    name: str
    signatures: tuple[bytes, ...]
    extensions: tuple[str, ...]
    read: Callable[[str, bytes, IngestOptions], list[Capture]]


READERS = (
    Reader("xlsx", (ZIP_MAGIC,), (".xlsx", ".xlsm"), read_xlsx),
    Reader("csv", (GZIP_MAGIC,), (".csv", ".tsv", ".txt", ".dat", ".csv.gz", ".tsv.gz", ".txt.gz", ".dat.gz"),
           read_csv),
)
# What a folder walk picks up.
CAPTURE_EXTENSIONS = tuple(ext for r in READERS for ext in r.extensions)


def choose_reader(path: str, data: bytes) -> Reader:
    if not data:
        raise InputError(path, "empty file")
    for reader in READERS:
        if data.startswith(reader.signatures):
            return reader
    if data.startswith(OLE2_MAGIC):
        raise InputError(path, "a legacy .xls workbook (or another binary document): save it as .xlsx or CSV")
    lowered = path.lower()
    for reader in READERS:
        if lowered.endswith(reader.extensions) and reader.name != "csv":
            raise InputError(path, f"named like an {reader.name.upper()} workbook but is not one (no zip signature)")
    return next(r for r in READERS if r.name == "csv")  # any other text: let the sniffer decide


def read_path(path: str | os.PathLike, options: IngestOptions = IngestOptions()) -> list[Capture]:
    """Read one file into its captures (roles assigned, SI units, conditions applied). Raises InputError."""
    source = Path(path).as_posix() if not isinstance(path, str) else path
    return [_finished(c, options) for c in _read_file(source, options)]


def read_group(paths: Sequence[str], options: IngestOptions = IngestOptions()) -> list[Capture]:
    """One file (as :func:`read_path`), or the files of one capture saved one channel per file (see
    :mod:`labtool.ingest.pairing`), joined. Raises InputError; nothing of a bad group is returned."""
    if len(paths) == 1:
        return read_path(paths[0], options)
    alone = dataclasses.replace(options, supply=None, output=None, enable=None, supply_current=None)
    parts = []
    for member in paths:
        captures = _read_file(member, alone)
        if len(captures) != 1:
            raise InputError(member, f"holds {len(captures)} captures; only single-capture files are paired "
                                     f"by channel (--pair-channels off reads them apart)")
        parts.append(captures[0])
    tokens = [channel_token(p, options.pair_channels) for p in paths]
    joined = assign_capture_roles(join_channels(parts, tokens), options)
    return [_finished(joined, options)]


def _read_file(source: str, options: IngestOptions) -> list[Capture]:
    try:
        size = os.stat(source).st_size
        if size > MAX_FILE_BYTES:  # refused from its size: never read into memory
            raise InputError(source, f"{size / 2**20:.0f} MiB; the importers read files of at most "
                                     f"{MAX_FILE_BYTES >> 20} MiB (split the export)")
        data = Path(source).read_bytes()
    except IsADirectoryError:
        raise InputError(source, "is a folder, not a file") from None
    except OSError as exc:
        raise InputError(source, f"cannot read: {exc.strerror or exc}") from None
    reader = choose_reader(source, data)
    try:
        return reader.read(source, data, options)
    except LabtoolError:
        raise
    except MemoryError:
        raise InputError(source, "too large to read into memory") from None
    except Exception as exc:  # an importer library tripped on input we did not foresee: still one line
        raise InputError(source, f"unreadable as {reader.name} ({type(exc).__name__}: {exc})") from None


def _finished(capture: Capture, options: IngestOptions) -> Capture:
    """The user's conditions on top of the file's, and the given supply-valid instant of an output-only capture."""
    capture = dataclasses.replace(capture, conditions=_user_conditions(capture, options))
    if options.supply_valid_at_s is not None and not capture.has_role("supply"):
        metadata = {**capture.provenance.metadata, SUPPLY_VALID_KEY: repr(float(options.supply_valid_at_s))}
        capture = dataclasses.replace(capture, provenance=dataclasses.replace(capture.provenance, metadata=metadata))
    return capture


def _user_conditions(capture: Capture, options: IngestOptions):
    cond = capture.conditions
    prov = capture.provenance
    if options.name_pattern:
        cond = cond.merged(conditions_from_name(prov.source_path, options.name_pattern))
    if options.manifest:
        for source in prov.metadata.get("channel_files", prov.source_path).split(" | "):
            row = manifest_conditions(options.manifest, source, prov.locator)
            if row is not None:  # a joined capture: the first of its files the run sheet names
                cond = cond.merged(row)
                break
    if options.extra_conditions is not None:
        cond = cond.merged(options.extra_conditions)
    return cond
