"""Conditions of a capture from outside its samples: preamble pairs, file names and run-sheet manifests.

Known fields (lot, wafer, die_x, die_y, part, temperature_c, ramp_s, vdd_v, repeat, and their aliases)
are typed by :meth:`labtool.capture.Conditions.from_mapping`; any other key becomes a free tag. A unit
in the key is applied to a bare number (``ramp [ms]`` = ``1`` → 1 ms).
"""

from __future__ import annotations

import io
import re
import zipfile
from pathlib import Path, PurePosixPath
from typing import Callable, Iterator, Mapping

from labtool.capture import CONDITION_ALIASES, CONDITION_TYPES, Conditions
from labtool.errors import InputError, UsageError
from labtool.ingest.sniff import NUMBER_ANY, decode_line, normalise_encoding, split_name_unit

# Spellings seen in run sheets and preambles, beyond the aliases of the capture model.
_MORE_ALIASES = {"temperature": "temperature_c", "temp_degc": "temperature_c", "chamber": "temperature_c",
                 "ramp_time": "ramp_s", "ramptime": "ramp_s", "rise_time": "ramp_s", "supply_v": "vdd_v",
                 "vsupply": "vdd_v", "lot_id": "lot", "wafer_id": "wafer", "part_id": "part",
                 "repetition": "repeat", "cycle": "repeat"}
_FILE_COLUMNS = ("file", "path", "filename", "file_name", "filepath", "source", "source_path", "capture")
_SHEET_COLUMNS = ("sheet", "locator", "worksheet")
_ZIP = b"PK\x03\x04"

Place = Callable[[str], dict]


def _normal(text: str) -> str:
    return re.sub(r"[^0-9a-z]+", "_", text.lower()).strip("_")


def condition_field(key: str) -> tuple[str, str | None]:
    """The condition field a key stands for (or the key itself, for a tag) and a unit written in it."""
    name, unit = split_name_unit(key)
    norm = _normal(name)
    norm = _MORE_ALIASES.get(norm, CONDITION_ALIASES.get(norm, norm))
    if norm in CONDITION_TYPES:
        return norm, unit
    whole = _normal(key)  # a unit suffix that is part of the field's own spelling ("supply_v")
    whole = _MORE_ALIASES.get(whole, CONDITION_ALIASES.get(whole, whole))
    if whole in CONDITION_TYPES:
        return whole, unit
    return key.strip(), None


# In a preamble, only unmistakable condition keys count: there "VDD: CH1" or "X: 10 div" are
# instrument settings, not conditions.
_PREAMBLE_KEYS = frozenset(CONDITION_TYPES) | {"temperature", "temp", "temp_c", "ramp", "ramp_time",
                                               "lot_id", "wafer_id", "part_id"}


def _unmistakable(key: str, field: str, unit: str | None) -> bool:
    """A preamble key is a condition when its name is one of the unmistakable keys, or when it names
    a condition field and carries a unit (``vdd_v``, ``VDD (V)``); a bare ``VDD`` is a setting."""
    if field not in CONDITION_TYPES:
        return False
    return _normal(split_name_unit(key)[0]) in _PREAMBLE_KEYS or unit is not None


def normalise_pairs(pairs: Mapping[str, object], *, known_only: bool) -> dict[str, tuple[str, str]]:
    """field → (value text, key as written). With ``known_only`` (a preamble) only unmistakable
    condition keys are kept."""
    out: dict[str, tuple[str, str]] = {}
    for key, raw in pairs.items():
        field, unit = condition_field(str(key))
        if known_only and not _unmistakable(str(key), field, unit):
            continue
        value = "" if raw is None else str(raw).strip()
        if unit and NUMBER_ANY.match(value):
            value = f"{value} {unit}"
        out[field] = (value, str(key))
    return out


def typed_conditions(pairs: Mapping[str, object], *, path: str, place: Place = lambda key: {},
                     known_only: bool = False) -> Conditions:
    """Conditions from key/value pairs; a value that does not fit its field is an InputError at ``place(key)``."""
    fields = normalise_pairs(pairs, known_only=known_only)
    try:
        return Conditions.from_mapping({f: v for f, (v, _) in fields.items()})
    except UsageError:
        pass
    for field, (value, key) in fields.items():
        try:
            Conditions.from_mapping({field: value})
        except UsageError:
            kind = CONDITION_TYPES[field].__name__
            raise InputError(path, f"{field} = {value!r} is not a valid {kind}", **place(key)) from None
    raise AssertionError("a pair failed together but not alone")  # pragma: no cover


# -- file-name patterns --------------------------------------------------------------------------
_FIELD = re.compile(r"\{([^{}]*)\}")
_EXTENSIONS = (".csv", ".tsv", ".txt", ".dat", ".xlsx", ".xlsm")


def compile_name_pattern(pattern: str) -> re.Pattern:
    """``"{lot}_{part}_{temp_c}C.csv"`` → a regular expression with one group per field; ``{}`` skips."""
    parts = _FIELD.split(pattern)
    regex, seen = [], set()
    for k, part in enumerate(parts):
        if k % 2 == 0:
            regex.append(re.escape(part))
            continue
        name = part.strip()
        if not name:
            regex.append(r"[^/]*?")
            continue
        if not name.isidentifier():
            raise UsageError(f"--name-pattern {pattern!r}: field {{{part}}} is not a plain name")
        if name in seen:
            raise UsageError(f"--name-pattern {pattern!r}: field {{{name}}} appears twice")
        seen.add(name)
        regex.append(f"(?P<{name}>[^/]+?)")
    if not seen:
        raise UsageError(f"--name-pattern {pattern!r}: no {{field}} in it")
    return re.compile("".join(regex))


def conditions_from_name(path: str, pattern: str) -> Conditions:
    """Fields of the file name (or of the last path parts, if the pattern has slashes)."""
    regex = compile_name_pattern(pattern)
    parts = PurePosixPath(str(path).replace("\\", "/")).parts
    depth = pattern.count("/") + 1
    name = "/".join(parts[-depth:])
    candidates = [name, name.removesuffix(".gz")]
    candidates += [c[: -len(ext)] for c in candidates[1:] for ext in _EXTENSIONS if c.lower().endswith(ext)]
    for candidate in candidates:
        m = regex.fullmatch(candidate)
        if m:
            return typed_conditions(m.groupdict(), path=path,
                                    place=lambda key: {"field": f"--name-pattern {{{key}}}"})
    raise InputError(path, f"file name does not match --name-pattern {pattern!r}")


# -- manifests -----------------------------------------------------------------------------------
def _posix(path: str) -> str:
    p = str(path).replace("\\", "/")
    while p.startswith("./"):
        p = p[2:]
    return re.sub(r"/+", "/", p)


class Manifest(Mapping[str, dict]):
    """A run sheet: file (``name`` or ``folder/name``, with ``#sheet`` for one workbook sheet) →
    condition pairs. Looked up by the longest matching tail of a capture's path."""

    def __init__(self, rows: Mapping[str, dict], source: str = ""):
        self._rows = {_posix(k): dict(v) for k, v in rows.items()}
        self.source = source
        self._by_name: dict[str, list[str]] = {}
        for key in self._rows:
            name = PurePosixPath(key.partition("#")[0]).name
            self._by_name.setdefault(name, []).append(key)

    def __getitem__(self, key: str) -> dict:
        return self._rows[_posix(key)]

    def __iter__(self) -> Iterator[str]:
        return iter(self._rows)

    def __len__(self) -> int:
        return len(self._rows)

    def lookup(self, path: str, locator: str = "") -> dict | None:
        parts = PurePosixPath(_posix(path)).parts
        best, best_score = None, None
        for key in self._by_name.get(parts[-1] if parts else "", []):
            file, _, sheet = key.partition("#")
            if sheet and sheet != locator:
                continue
            kparts = PurePosixPath(file).parts
            if tuple(parts[-len(kparts):]) == kparts:
                score = (len(kparts), bool(sheet))
                if best_score is None or score > best_score:
                    best, best_score = key, score
        return None if best is None else self._rows[best]


def manifest_conditions(manifest: Mapping[str, dict], path: str, locator: str) -> Conditions | None:
    index = manifest if isinstance(manifest, Manifest) else Manifest(manifest)
    row = index.lookup(path, locator)
    return None if row is None else Conditions.from_mapping(row)


def load_manifest(path: str) -> Manifest:
    """Read a run sheet (CSV or XLSX): one row per file, a file column and condition columns."""
    path = str(path)
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(path, f"cannot read manifest: {exc.strerror}") from None
    rows = _xlsx_rows(data, path) if data.startswith(_ZIP) else _csv_rows(data, path)
    rows = [(n, cells) for n, cells in rows if any(c.strip() for c in cells)]
    if not rows:
        raise InputError(path, "empty manifest")
    header_line, header = rows[0]
    header = [c.strip() for c in header]
    lowered = [_normal(c) for c in header]
    file_col = next((lowered.index(c) for c in _FILE_COLUMNS if c in lowered), None)
    if file_col is None:
        raise InputError(path, f"no file column (one named file, path or filename); columns: "
                               f"{', '.join(h for h in header if h)}", line=header_line)
    sheet_col = next((lowered.index(c) for c in _SHEET_COLUMNS if c in lowered), None)
    entries: dict[str, dict] = {}
    first_line: dict[str, int] = {}
    for line, cells in rows[1:]:
        cells = [c.strip() for c in cells] + [""] * (len(header) - len(cells))
        file = _posix(cells[file_col])
        if not file:
            raise InputError(path, "empty file name", line=line, field=header[file_col])
        key = f"{file}#{cells[sheet_col]}" if sheet_col is not None and cells[sheet_col] else file
        if key in entries:
            raise InputError(path, f"{key!r} is listed twice (first on line {first_line[key]})", line=line)
        pairs = {header[k]: cells[k] for k in range(len(header))
                 if k not in (file_col, sheet_col) and header[k] and cells[k]}
        typed_conditions(pairs, path=path, place=lambda key, line=line: {"line": line, "field": key})
        entries[key] = {field: value for field, (value, _) in normalise_pairs(pairs, known_only=False).items()}
        first_line[key] = line
    return Manifest(entries, source=path)


def _csv_rows(data: bytes, path: str) -> list[tuple[int, list[str]]]:
    import csv

    text_lines = [decode_line(raw) for raw in normalise_encoding(data, path).splitlines()]
    numbered = [(k + 1, t) for k, t in enumerate(text_lines) if t.strip() and not t.lstrip().startswith("#")]
    if not numbered:
        return []
    header = numbered[0][1]
    delimiter = max(",;\t", key=header.count)
    reader = csv.reader([t for _, t in numbered], delimiter=delimiter)
    return [(n, cells) for (n, _), cells in zip(numbered, reader)]


def _xlsx_rows(data: bytes, path: str) -> list[tuple[int, list[str]]]:
    from labtool.ingest.xlsx_reader import cell_text, open_workbook

    wb = open_workbook(data, path)
    try:
        ws = wb.worksheets[0]
        return [(k + 1, [cell_text(v) for v in row]) for k, row in enumerate(ws.iter_rows(values_only=True))]
    except (zipfile.BadZipFile, KeyError, ValueError, io.UnsupportedOperation) as exc:
        raise InputError(path, f"unreadable manifest workbook ({exc})") from None
    finally:
        wb.close()
