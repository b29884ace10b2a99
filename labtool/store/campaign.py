"""Campaign store: SQLite catalog of captures and measurements, waveforms as Parquet files.

Layout of a campaign directory::

    catalog.sqlite              captures, conditions, provenance, measurements (one row per capture and
                                limits; a capture with supply dips has one row per dip: ``row_index``)
    waveforms/<lot>/<id>.parquet one file per capture, grouped by lot so workers read what they need
    tmp/                        files being written; renamed into place when complete

Writes are atomic: under the catalog's write lock a waveform is written to ``tmp/``, renamed into
place and its row inserted, all in one transaction. A writer killed half-way leaves only files in
``tmp/``, which the next opening of the campaign cleans up (see ``Campaign._recover``).
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import sqlite3
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Iterable, Iterator, Sequence

import pandas as pd

from labtool.capture import CONDITION_TYPES, Capture, Conditions, Provenance
from labtool.errors import StoreError
from labtool.store.waveforms import waveform_from_parquet, waveform_to_parquet

SCHEMA_VERSION = 2  # 2: measurements keyed by (capture, limits, row_index)
CATALOG_NAME = "catalog.sqlite"

_MEASUREMENT_COLUMNS = "capture_id, limits_key, row_index, limits_json, measured_at, verdict, result_json"
_MEASUREMENTS = """CREATE TABLE IF NOT EXISTS measurements (
    capture_id TEXT NOT NULL REFERENCES captures (capture_id),
    limits_key TEXT NOT NULL,
    row_index INTEGER NOT NULL,
    limits_json TEXT NOT NULL,
    measured_at TEXT NOT NULL,
    verdict TEXT NOT NULL,
    result_json TEXT NOT NULL,
    PRIMARY KEY (capture_id, limits_key, row_index)
)"""
_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS captures (
    capture_id TEXT PRIMARY KEY,
    source_path TEXT NOT NULL,
    locator TEXT NOT NULL,
    version INTEGER NOT NULL,
    source_sha256 TEXT NOT NULL,
    importer TEXT NOT NULL,
    imported_at TEXT NOT NULL,
    n_samples INTEGER NOT NULL,
    t0_s REAL NOT NULL,
    dt_s REAL,
    lot TEXT, wafer TEXT, die_x INTEGER, die_y INTEGER, part TEXT,
    temperature_c REAL, ramp_s REAL, vdd_v REAL, repeat INTEGER,
    tags_json TEXT NOT NULL,
    metadata_json TEXT NOT NULL,
    channels_json TEXT NOT NULL,
    n_clipped INTEGER NOT NULL,
    waveform_path TEXT NOT NULL,
    waveform_sha256 TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS captures_source ON captures (source_path, locator, version);
CREATE INDEX IF NOT EXISTS captures_lot ON captures (lot, part);
{measurements};
CREATE INDEX IF NOT EXISTS measurements_limits ON measurements (limits_key);
""".format(measurements=_MEASUREMENTS)
# Version 1 kept one measurement row per (capture, limits); its rows become row_index 0.
_MIGRATE_FROM_1 = """
DROP INDEX IF EXISTS measurements_limits;
ALTER TABLE measurements RENAME TO measurements_v1;
{measurements};
INSERT INTO measurements ({columns})
    SELECT capture_id, limits_key, 0, limits_json, measured_at, verdict, result_json FROM measurements_v1;
DROP TABLE measurements_v1;
CREATE INDEX measurements_limits ON measurements (limits_key);
UPDATE meta SET value = '2' WHERE key = 'schema_version'
""".format(measurements=_MEASUREMENTS, columns=_MEASUREMENT_COLUMNS)

CONDITION_COLUMNS = tuple(CONDITION_TYPES)
REVISION_KEY = "conditions_revision"  # metadata of a source stored again under new conditions


@dataclass(frozen=True)
class AddResult:
    capture_id: str
    status: str  # "added", "skipped" (already in the store) or "updated" (its conditions)
    version: int


def _slug(text: str | None) -> str:
    """A file-system-safe folder name that can never leave the campaign directory."""
    if not text:
        return "_nolot"
    clean = re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._") or "_"
    if clean != text or len(clean) > 48:
        clean = clean[:40] + "-" + hashlib.sha256(text.encode()).hexdigest()[:6]
    return clean


class Campaign:
    """One campaign directory. Use :meth:`open` or :meth:`create`; close with :meth:`close` or ``with``."""

    def __init__(self, root: Path, conn: sqlite3.Connection):
        self.root = root
        self._conn = conn

    # -- opening --------------------------------------------------------------------------
    @classmethod
    def open(cls, path: str | os.PathLike, *, create: bool = False) -> "Campaign":
        root = Path(path)
        catalog = root / CATALOG_NAME
        if not catalog.exists():
            if not create:
                raise StoreError(f"{root}: not a campaign (no {CATALOG_NAME}); ingest into it first")
            if root.exists() and not root.is_dir():
                raise StoreError(f"{root}: exists and is not a directory")
            root.mkdir(parents=True, exist_ok=True)
        try:
            conn = sqlite3.connect(str(catalog), timeout=60.0, isolation_level=None)
            conn.execute("PRAGMA busy_timeout = 60000")
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = NORMAL")
            conn.execute("PRAGMA foreign_keys = ON")
            with _transaction(conn):
                for stmt in filter(None, (s.strip() for s in _SCHEMA.split(";"))):
                    conn.execute(stmt)
                row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
                if row is None:
                    conn.execute("INSERT INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
                elif int(row[0]) == 1:
                    for stmt in filter(None, (s.strip() for s in _MIGRATE_FROM_1.split(";"))):
                        conn.execute(stmt)
                elif int(row[0]) != SCHEMA_VERSION:
                    raise StoreError(f"{root}: schema version {row[0]}, this labtool reads {SCHEMA_VERSION}")
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{catalog}: cannot open catalog: {exc}") from None
        (root / "waveforms").mkdir(exist_ok=True)
        (root / "tmp").mkdir(exist_ok=True)
        campaign = cls(root, conn)
        campaign._recover()
        return campaign

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> "Campaign":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- captures -------------------------------------------------------------------------
    def add_capture(self, capture: Capture, *, update_conditions: bool = False) -> AddResult:
        """Store one capture atomically; the same capture again is skipped, not duplicated.

        The same source again under conditions that set a field to a new value (a new run-sheet value)
        becomes a new catalog version with the stored conditions updated by the new ones, or, with
        ``update_conditions``, changes the stored row's conditions in place (status "updated").
        File work happens while this process holds the catalog's write lock, and an intent file in
        ``tmp/`` names the waveform until the row is committed; so after a kill at any moment,
        :meth:`_recover` (under the same lock) knows exactly which file to remove.
        """
        cid = capture.capture_id
        row = self._conn.execute("SELECT version FROM captures WHERE capture_id = ?", (cid,)).fetchone()
        if row is not None:
            revised = self._revised(capture, update_conditions)
            if isinstance(revised, AddResult):
                return revised
            capture, cid = revised, revised.capture_id
        payload = waveform_to_parquet(capture.time, capture.channels)
        rel = Path("waveforms") / _slug(capture.conditions.lot) / f"{cid}.parquet"
        prov, cond = capture.provenance, capture.conditions
        intent = self.root / "tmp" / f"{cid}.intent"
        try:
            with _transaction(self._conn):
                again = self._conn.execute("SELECT version FROM captures WHERE capture_id = ?", (cid,)).fetchone()
                if again is not None:  # another process stored it meanwhile
                    return AddResult(cid, "skipped", int(again[0]))
                (last,) = self._conn.execute(
                    "SELECT COALESCE(MAX(version), 0) FROM captures WHERE source_path = ? AND locator = ?",
                    (prov.source_path, prov.locator)).fetchone()
                version = int(last) + 1
                values = (
                    cid, prov.source_path, prov.locator, version, prov.sha256, prov.importer, prov.imported_at,
                    capture.time.n, capture.time.t0_s, capture.time.dt_s,
                    *(getattr(cond, k) for k in CONDITION_COLUMNS),
                    json.dumps(dict(cond.tags), sort_keys=True), json.dumps(dict(prov.metadata), sort_keys=True),
                    json.dumps([{"name": c.name, "unit": c.unit, "role": c.role, "role_source": c.role_source}
                                for c in capture.channels]),
                    sum(c.n_clipped for c in capture.channels), rel.as_posix(), hashlib.sha256(payload).hexdigest())
                self._conn.execute(f"INSERT INTO captures VALUES ({','.join('?' * len(values))})", values)
                intent.write_text(rel.as_posix())
                self._write_atomic(rel, payload)
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{self.root}: cannot record capture {cid}: {exc}") from None
        except OSError as exc:
            raise StoreError(f"{self.root}: cannot write waveform of {cid}: {exc.strerror}") from None
        intent.unlink(missing_ok=True)
        return AddResult(cid, "added", version)

    def _revised(self, capture: Capture, update_conditions: bool) -> "Capture | AddResult":
        """A stored source seen again: skipped, its conditions updated, or the capture as a new revision."""
        prov = capture.provenance
        names = [d[0] for d in self._conn.execute("SELECT * FROM captures LIMIT 0").description]
        newest = dict(zip(names, self._conn.execute(
            "SELECT * FROM captures WHERE source_sha256 = ? AND locator = ? ORDER BY rowid DESC LIMIT 1",
            (prov.sha256, prov.locator)).fetchone()))
        stored = _record_conditions(newest)
        wanted = stored.merged(capture.conditions)  # what the new ingest leaves unset stays as stored
        if wanted == stored:
            return AddResult(newest["capture_id"], "skipped", int(newest["version"]))
        if update_conditions:
            try:
                with _transaction(self._conn):
                    self._conn.execute(
                        f"UPDATE captures SET {', '.join(f'{k} = ?' for k in CONDITION_COLUMNS)}, tags_json = ? "
                        f"WHERE capture_id = ?", (*(getattr(wanted, k) for k in CONDITION_COLUMNS),
                                                  json.dumps(dict(wanted.tags), sort_keys=True), newest["capture_id"]))
            except sqlite3.DatabaseError as exc:
                raise StoreError(f"{self.root}: cannot update capture {newest['capture_id']}: {exc}") from None
            return AddResult(newest["capture_id"], "updated", int(newest["version"]))
        (count,) = self._conn.execute("SELECT COUNT(*) FROM captures WHERE source_sha256 = ? AND locator = ?",
                                      (prov.sha256, prov.locator)).fetchone()
        revision = int(count)
        while self.has_capture(replace(capture, provenance=replace(prov, revision=revision)).capture_id):
            revision += 1
        metadata = {**prov.metadata, REVISION_KEY: str(revision)}
        return replace(capture, conditions=wanted, provenance=replace(prov, revision=revision, metadata=metadata))

    def _write_atomic(self, rel: Path, payload: bytes) -> None:
        final = self.root / rel
        final.parent.mkdir(parents=True, exist_ok=True)
        tmp = self.root / "tmp" / f"{final.name}.{os.getpid()}.part"
        with open(tmp, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, final)

    def _recover(self) -> None:
        """Undo what a killed writer left: partial files and waveforms whose row never committed.

        Runs under the write lock, so no live writer can be between its rename and its commit.
        """
        tmp = self.root / "tmp"
        if not any(tmp.iterdir()):
            return
        with _transaction(self._conn):
            for path in tmp.iterdir():
                if path.suffix == ".intent":
                    cid = path.stem
                    target = (self.root / path.read_text().strip()).resolve()
                    inside = target.is_relative_to((self.root / "waveforms").resolve())
                    if inside and not self.has_capture(cid):
                        target.unlink(missing_ok=True)
                path.unlink(missing_ok=True)

    def has_capture(self, capture_id: str) -> bool:
        return self._conn.execute("SELECT 1 FROM captures WHERE capture_id = ?", (capture_id,)).fetchone() is not None

    def captures(self, *, current_only: bool = True, capture_ids: Sequence[str] | None = None) -> pd.DataFrame:
        """The catalog as a DataFrame: one row per capture, conditions and tags as columns.

        ``current_only`` keeps the newest version of each (source path, locator).
        """
        sql, params = _catalog_query(current_only, capture_ids)
        df = pd.read_sql_query(sql, self._conn, params=params)
        return _expand_tags(df)

    def records(self, capture_ids: Sequence[str] | None = None) -> list[dict]:
        """Catalog rows as plain dicts (current versions unless ids are given), for shipping to workers.

        A worker turns a record into a Capture with :func:`load_capture_record` and needs no catalog.
        """
        if capture_ids is None:  # one query for the whole current catalog
            cur = self._conn.execute(*_catalog_query(True, None))
            names = [d[0] for d in cur.description]
            return [dict(zip(names, row)) for row in cur]
        names = [d[0] for d in self._conn.execute("SELECT * FROM captures LIMIT 0").description]
        out = []
        for cid in capture_ids:
            row = self._conn.execute("SELECT * FROM captures WHERE capture_id = ?", (cid,)).fetchone()
            if row is None:
                raise StoreError(f"{self.root}: no capture {cid}")
            out.append(dict(zip(names, row)))
        return out

    def load_capture(self, capture_id: str) -> Capture:
        (rec,) = self.records([capture_id])
        return load_capture_record(str(self.root), rec)

    def iter_captures(self, capture_ids: Iterable[str] | None = None) -> Iterator[Capture]:
        """Stream captures one at a time (never all waveforms in memory at once)."""
        ids = list(capture_ids) if capture_ids is not None else list(self.captures()["capture_id"])
        for cid in ids:
            yield self.load_capture(cid)

    # -- measurements ---------------------------------------------------------------------
    def save_measurements(self, rows: Iterable[dict], *, limits_key: str, limits_json: str) -> int:
        """Replace the results for these limits of the captures in ``rows`` (each has capture_id, verdict).

        A capture's rows are stored in the order given (``row_index`` 0, 1, …: one per supply dip); all
        of its earlier rows under these limits go, so a capture measured again with fewer dips keeps none
        of the old ones.
        """
        now = _now()
        records, seen = [], {}
        for r in rows:
            index = seen[r["capture_id"]] = seen.get(r["capture_id"], -1) + 1
            records.append((r["capture_id"], limits_key, index, limits_json, now, r["verdict"],
                            json.dumps(r, default=_json_default)))
        try:
            with _transaction(self._conn):
                self._conn.executemany("DELETE FROM measurements WHERE capture_id = ? AND limits_key = ?",
                                       [(cid, limits_key) for cid in seen])
                self._conn.executemany(f"INSERT INTO measurements ({_MEASUREMENT_COLUMNS}) VALUES (?,?,?,?,?,?,?)",
                                       records)
        except sqlite3.DatabaseError as exc:
            raise StoreError(f"{self.root}: cannot save measurements: {exc}") from None
        return len(records)

    def measurements(self, *, limits_key: str | None = None) -> pd.DataFrame:
        """Measurement rows joined with the capture's conditions, for the current version of each
        (source path, locator) only: a changed file's earlier versions never count, measured or not.
        One row per capture, or per supply dip (``dip_index``) of a capture with dips.
        Under ``limits_key``, or the limits of the newest measurement of a current capture."""
        if limits_key is None:
            row = self._conn.execute(
                f"SELECT m.limits_key FROM measurements m JOIN captures c USING (capture_id) WHERE {_CURRENT} "
                "ORDER BY m.measured_at DESC LIMIT 1").fetchone()
            if row is None:
                return pd.DataFrame()
            limits_key = row[0]
        df = pd.read_sql_query(
            "SELECT m.result_json, m.limits_key, m.measured_at, c.* FROM measurements m "
            f"JOIN captures c USING (capture_id) WHERE m.limits_key = ? AND {_CURRENT} "
            "ORDER BY c.source_path, c.locator, m.row_index",
            self._conn, params=(limits_key,))
        if df.empty:
            return df
        # one result per catalog row, in the same order (a capture with dips has several rows)
        results = pd.DataFrame.from_records([json.loads(s) for s in df.pop("result_json")], index=df.index)
        results = results.drop(columns=[c for c in results.columns if c in df.columns])
        return _expand_tags(pd.concat([df, results], axis=1))

    def limits(self, limits_key: str) -> dict:
        """The limits a set of measurements was made with ({} when none are stored under that key)."""
        row = self._conn.execute("SELECT limits_json FROM measurements WHERE limits_key = ? LIMIT 1",
                                 (limits_key,)).fetchone()
        return json.loads(row[0]) if row else {}

    def limits_keys(self) -> list[str]:
        return [r[0] for r in self._conn.execute("SELECT DISTINCT limits_key FROM measurements")]

    # -- integrity ------------------------------------------------------------------------
    def verify(self) -> list[str]:
        """Problems found: missing or altered waveforms, orphan files, dangling measurements."""
        problems: list[str] = []
        check = self._conn.execute("PRAGMA integrity_check").fetchone()[0]
        if check != "ok":
            problems.append(f"catalog integrity: {check}")
        known = set()
        for cid, rel, digest in self._conn.execute("SELECT capture_id, waveform_path, waveform_sha256 FROM captures"):
            known.add(rel)
            path = self.root / rel
            if not path.exists():
                problems.append(f"{cid}: waveform {rel} is missing")
            elif hashlib.sha256(path.read_bytes()).hexdigest() != digest:
                problems.append(f"{cid}: waveform {rel} does not match its recorded hash")
        for path in sorted((self.root / "waveforms").rglob("*.parquet")):
            rel = path.relative_to(self.root).as_posix()
            if rel not in known:
                problems.append(f"orphan waveform {rel} (no catalog row)")
        for (cid,) in self._conn.execute(
                "SELECT capture_id FROM measurements WHERE capture_id NOT IN (SELECT capture_id FROM captures)"):
            problems.append(f"measurement for unknown capture {cid}")
        return problems

    def summary(self) -> dict:
        """Counts for ``labtool show``."""
        df = self.captures()
        (total,) = self._conn.execute("SELECT COUNT(*) FROM captures").fetchone()
        (n_meas,) = self._conn.execute("SELECT COUNT(*) FROM measurements").fetchone()
        return {"captures": len(df), "versions": int(total), "measurements": int(n_meas), "table": df}


# The newest version of each (source path, locator): the only one that counts.
_CURRENT = ("c.version = (SELECT MAX(d.version) FROM captures d WHERE d.source_path = c.source_path"
            " AND d.locator = c.locator)")


def _catalog_query(current_only: bool, capture_ids: Sequence[str] | None) -> tuple[str, list]:
    """SELECT of catalog rows in catalog order: newest versions only, and/or these ids."""
    where, params = [], []
    if current_only:
        where.append(_CURRENT)
    if capture_ids is not None:
        where.append(f"capture_id IN ({','.join('?' * len(capture_ids))})")
        params.extend(capture_ids)
    sql = "SELECT * FROM captures c" + (" WHERE " + " AND ".join(where) if where else "")
    return sql + " ORDER BY source_path, locator, version", params


def load_capture_record(root: str, rec: dict) -> Capture:
    """Read one capture given its catalog record; ``root`` is a directory or an fsspec URL.

    Workers on other machines read waveforms from a shared path this way (``file://``, ``s3://`` …).
    """
    location = f"{root.rstrip('/')}/{rec['waveform_path']}"
    try:
        if "://" in root:
            import fsspec

            with fsspec.open(location, "rb") as fh:
                data = fh.read()
        else:
            data = Path(location).read_bytes()
    except (OSError, ValueError) as exc:
        raise StoreError(f"{location}: waveform missing: {getattr(exc, 'strerror', None) or exc}") from None
    time_base, channels = waveform_from_parquet(io.BytesIO(data))
    cond = _record_conditions(rec)
    metadata = json.loads(rec["metadata_json"])
    prov = Provenance(source_path=rec["source_path"], sha256=rec["source_sha256"], importer=rec["importer"],
                      imported_at=rec["imported_at"], locator=rec["locator"], metadata=metadata,
                      revision=int(metadata.get(REVISION_KEY, 0)))
    return Capture(time=time_base, channels=channels, conditions=cond, provenance=prov)


def _record_conditions(rec: dict) -> Conditions:
    return Conditions(**{k: rec[k] for k in CONDITION_COLUMNS}, tags=json.loads(rec["tags_json"]))


class _transaction:
    """BEGIN IMMEDIATE … COMMIT on an autocommit connection; ROLLBACK on any exception."""

    def __init__(self, conn: sqlite3.Connection):
        self.conn = conn

    def __enter__(self):
        self.conn.execute("BEGIN IMMEDIATE")
        return self.conn

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.conn.execute("COMMIT")
        else:
            self.conn.execute("ROLLBACK")
        return False


def _expand_tags(df: pd.DataFrame) -> pd.DataFrame:
    if df.empty or "tags_json" not in df:
        return df
    tags = pd.DataFrame.from_records([json.loads(s) for s in df["tags_json"]], index=df.index)
    tags = tags[[c for c in tags.columns if c not in df.columns]]
    return pd.concat([df, tags], axis=1) if not tags.empty else df


def _json_default(obj):
    import numpy as np

    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def _now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
