"""Every class of broken file, for every importer, through ``labtool ingest``: one clear line naming the
file (and line or cell), exit status 1, no traceback, no hang, and the campaign exactly as before.

Each command runs in a forked child with a hang guard (a safety net, not a speed assertion), and the
store is snapshotted after each. Wall time and peak memory of every case are recorded in
docs/reliability.md (``python -m tests.hardening.catalogue_figures``), never asserted here.
"""

import functools
import os

import pytest

from labtool.errors import printable

from tests.hardening.catalogue import GOOD, ODD_DATA, ODD_NAMES, ODD_TAIL, TEXT, gzip_cases, xlsx_cases
from tests.hardening.cli_runs import run_cli, run_many, store_snapshot, verify_problems

IMPORTERS = {"csv": lambda: TEXT, "csv.gz": functools.cache(gzip_cases), "xlsx": functools.cache(xlsx_cases)}
_BATCHES: dict = {}


def ingest_args(*names):
    return ["ingest", "--into", "camp", "--scheduler", "local:1", "--", *names]


def run_catalogue(importer, folder):
    """Every case of one importer, one command each, into a campaign that already holds one good capture."""
    cases = IMPORTERS[importer]()
    for case in cases:
        (folder / case.name).write_bytes(case.data)
    (folder / "good.csv").write_bytes(GOOD)
    results = run_many([ingest_args("good.csv"), *[ingest_args(c.name) for c in cases]], cwd=folder,
                       campaign=folder / "camp")
    assert results[0]["rc"] == 0, results[0]["stderr"]
    return {"folder": folder, "baseline": results[0]["store"],
            "by_kind": {c.kind: (c, r) for c, r in zip(cases, results[1:])}}


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    def get(importer):
        if importer not in _BATCHES:
            _BATCHES[importer] = run_catalogue(importer, tmp_path_factory.mktemp(importer.replace(".", "_")))
        return _BATCHES[importer]
    return get


def check_one_clear_failure(case, result, baseline):
    assert result["rc"] is not None, f"{case.name}: still running after the hang guard"
    assert "Traceback" not in result["stderr"]
    lines = result["stderr"].splitlines()
    assert len(lines) == 1, lines
    if case.tail.endswith(": "):  # the compression library's own words follow
        assert lines[0].startswith(case.message) and len(lines[0]) > len(case.message)
    else:
        assert lines[0] == case.message
    assert result["rc"] == 1
    assert result["stdout"] == "camp: 0 added, 0 skipped, 1 failed (1 file read)\n"
    assert result["store"] == baseline  # nothing half-written, catalog unchanged


@pytest.mark.parametrize("importer,kind", [(i, c.kind) for i in IMPORTERS for c in IMPORTERS[i]()])
def test_broken_file_gives_one_clear_error_and_leaves_the_store_alone(batch, importer, kind):
    got = batch(importer)
    case, result = got["by_kind"][kind]
    check_one_clear_failure(case, result, got["baseline"])


@pytest.mark.parametrize("importer", list(IMPORTERS))
def test_after_the_whole_catalogue_the_store_verifies_clean(batch, importer):
    assert verify_problems(batch(importer)["folder"] / "camp") == []


def test_one_batch_of_every_broken_file_goes_on_and_lists_each_failure_once(tmp_path):
    """The real console command, all importers' broken files and two good ones in one call."""
    cases = [c for make in IMPORTERS.values() for c in make()]
    for case in cases:
        (tmp_path / case.name).write_bytes(case.data)
    (tmp_path / "good.csv").write_bytes(GOOD)
    (tmp_path / "good2.csv").write_bytes(GOOD.replace(b"1.2\n", b"1.25\n"))
    names = [c.name for c in cases]
    done = run_cli(ingest_args("good.csv", *names, "good2.csv"), cwd=tmp_path)
    assert done.returncode == 1
    assert "Traceback" not in done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == len(cases)
    for case, line in zip(cases, lines):  # in input order, one line each
        assert line.startswith(case.message) if case.tail.endswith(": ") else line == case.message
    assert done.stdout == f"camp: 2 added, 0 skipped, {len(cases)} failed ({len(cases) + 2} files read)\n"
    assert verify_problems(tmp_path / "camp") == []
    assert [row[1] for row in store_snapshot(tmp_path / "camp")["captures"]].count("good.csv") == 1


def test_odd_file_names_are_read_and_named_exactly(tmp_path):
    """Spaces, non-ASCII, a leading dash, a name like an option, 200 characters, quotes, delimiters, a tab."""
    for k, name in enumerate(ODD_NAMES):
        (tmp_path / name).write_bytes(ODD_DATA)
        (tmp_path / f"ok {k} {name}").write_bytes(GOOD.replace(b"1.2\n", f"1.{k}1\n".encode()))
    results = run_many([ingest_args(name) for name in ODD_NAMES] + [ingest_args(*[f"ok {k} {n}" for k, n in
                                                                                 enumerate(ODD_NAMES)])],
                       cwd=tmp_path, campaign=tmp_path / "camp")
    for name, result in zip(ODD_NAMES, results):
        assert result["rc"] == 1
        # One line whatever the name: control characters are shown escaped (labtool.errors.printable).
        assert result["stderr"].splitlines() == [printable(name) + ODD_TAIL]
    last = results[-1]
    assert last["rc"] == 0, last["stderr"]
    stored = sorted(row[1] for row in last["store"]["captures"])
    assert stored == sorted(f"ok {k} {n}" for k, n in enumerate(ODD_NAMES))
    assert verify_problems(tmp_path / "camp") == []
    assert not any(p.name.startswith("-") for p in (tmp_path / "camp").rglob("*"))


def test_a_file_over_the_size_cap_is_refused_unread(tmp_path):
    """A sparse file just over the cap: refused from its size alone (it is never read into memory)."""
    from labtool.ingest.sniff import MAX_FILE_BYTES

    big = tmp_path / "huge.csv"
    with open(big, "wb") as fh:
        fh.write(GOOD)
        fh.truncate(MAX_FILE_BYTES + 1)
    (result,) = run_many([ingest_args("huge.csv")], cwd=tmp_path, campaign=None)
    assert result["rc"] == 1
    assert result["stderr"] == (f"huge.csv: {(MAX_FILE_BYTES + 1) / 2**20:.0f} MiB; the importers read files of at most "
                                f"{MAX_FILE_BYTES >> 20} MiB (split the export)\n")
    assert os.path.getsize(big) == MAX_FILE_BYTES + 1


def test_a_workbook_member_larger_than_it_declares_is_cut_at_its_declared_size(tmp_path):
    """The workbook cap trusts the zip directory; a member that lies about its size is read only as far
    as declared (zipfile stops there and the CRC check fails), so the lie cannot exceed the cap."""
    import io
    import struct
    import zipfile

    from labtool.errors import InputError
    from labtool.ingest import read_path
    from tests.hardening.files import HEADER, ROWS, SHEET, replace_member, sheet_xml, workbook

    honest = replace_member(workbook([HEADER, *ROWS]), SHEET, sheet_xml("<row r='1'/>" + " " * (8 << 20)))
    info = zipfile.ZipFile(io.BytesIO(honest)).getinfo(SHEET)
    forged = bytearray(honest)
    struct.pack_into("<I", forged, info.header_offset + 22, 1000)  # local header: uncompressed size
    end = forged.rfind(b"PK\x05\x06")
    central = struct.unpack_from("<I", forged, end + 16)[0]  # the first central directory entry
    while forged[central + 46:central + 46 + len(SHEET)] != SHEET.encode():
        n, m, k = struct.unpack_from("<HHH", forged, central + 28)
        central += 46 + n + m + k
    struct.pack_into("<I", forged, central + 24, 1000)  # central directory: uncompressed size
    (tmp_path / "liar.xlsx").write_bytes(bytes(forged))
    with pytest.raises(InputError) as info:
        read_path(str(tmp_path / "liar.xlsx"))
    assert str(info.value) == f"{tmp_path / 'liar.xlsx'}: not a readable XLSX workbook (BadZipFile: Bad CRC-32 for file '{SHEET}')"
