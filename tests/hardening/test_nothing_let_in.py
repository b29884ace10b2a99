"""Nothing let in: inputs are data, never code or paths. Formula cells give their cached value or a
clear error (never evaluation); XML is parsed by defusedxml (entity expansion and external entities
refused); condition fields from names, manifests, preambles, workbooks and plans cannot steer a
write outside the campaign; the simulated bench listens on loopback only."""

import os
import re
import socket
from pathlib import Path

import numpy as np
import pytest

from labtool.errors import InputError
from labtool.ingest import IngestOptions, ingest_paths, load_manifest, read_path
from labtool.store import Campaign
from tests.hardening.files import GOOD, HEADER, ROWS, SHEET, replace_member, sheet_xml, workbook
from tests.hardening.cli_runs import ROOT, run_cli, verify_problems
from tests.hardening.scenario import POPULATION, small_plan


def formula_book(cell: str) -> bytes:
    """A capture sheet whose B3 (vdd, second data row) is ``cell`` (raw XML inside <c>)."""
    head = "".join(f'<c r="{"ABC"[k]}1" t="inlineStr"><is><t>{h}</t></is></c>' for k, h in enumerate(HEADER))
    body = [f'<row r="1">{head}</row>']
    for r, row in enumerate(ROWS, start=2):
        cells = [f'<c r="{"ABC"[k]}{r}"><v>{v!r}</v></c>' for k, v in enumerate(row)]
        if r == 3:
            cells[1] = f'<c r="B3">{cell}</c>'
        body.append(f'<row r="{r}">{"".join(cells)}</row>')
    return replace_member(workbook([HEADER, *ROWS]), SHEET, sheet_xml("".join(body), dimension="A1:C5"))


def read_book(tmp_path, data: bytes, name="book.xlsx"):
    path = tmp_path / name
    path.write_bytes(data)
    return read_path(str(path))


# -- formulas ---------------------------------------------------------------------------------------
def test_a_formula_cell_gives_its_cached_value_not_an_evaluation(tmp_path):
    # The cached value (0.5) disagrees with what the formula would compute (2): the cached one is read.
    (capture,) = read_book(tmp_path, formula_book("<f>1+1</f><v>0.5</v>"))
    np.testing.assert_array_equal(capture.channel("supply").values, [0.0, 0.5, 1.8, 1.8])


def test_a_formula_without_a_cached_value_is_a_clear_error(tmp_path):
    with pytest.raises(InputError) as info:
        read_book(tmp_path, formula_book("<f>1+1</f>"))
    assert str(info.value) == (f"{tmp_path / 'book.xlsx'} [run!B3]: formula =1+1 has no cached value (formulas "
                               f"are never evaluated: recalculate and save the workbook, or export CSV)")


def test_formula_and_code_text_in_a_csv_cell_is_not_a_number(tmp_path):
    for text in ("=1+1", "__import__('os').getcwd()", "1e-6*0+5", "@SUM(A1:A2)"):
        path = tmp_path / "f.csv"
        path.write_bytes(b"time,vdd,vref\n0,0,0\n1e-6,%s,0.1\n2e-6,1.8,1.2\n" % text.encode())
        with pytest.raises(InputError) as info:
            read_path(str(path))
        assert str(info.value) == f"{path}:3 [vdd]: {text!r} is not a number"


# -- XML ------------------------------------------------------------------------------------------
def test_openpyxl_parses_with_defusedxml():
    import openpyxl.xml

    assert openpyxl.xml.DEFUSEDXML is True  # openpyxl switches to defusedxml when it is installed


def test_an_external_entity_is_refused_and_the_file_it_names_is_never_read(tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("4410.125")
    prolog = f'<?xml version="1.0"?><!DOCTYPE w [<!ENTITY xxe SYSTEM "{secret.as_uri()}">]>'
    body = ('<row r="1"><c r="A1" t="inlineStr"><is><t>time</t></is></c><c r="B1" t="inlineStr"><is><t>vdd</t></is>'
            '</c><c r="C1" t="inlineStr"><is><t>vref</t></is></c></row><row r="2"><c r="A2"><v>0</v></c>'
            '<c r="B2" t="inlineStr"><is><t>&xxe;</t></is></c><c r="C2"><v>0</v></c></row>')
    book = replace_member(workbook([HEADER, *ROWS]), SHEET, sheet_xml(body, prolog=prolog))
    (tmp_path / "xxe.xlsx").write_bytes(book)
    done = run_cli(["ingest", "xxe.xlsx", "--into", "camp", "--scheduler", "local:1"], cwd=tmp_path)
    assert done.returncode == 1 and "Traceback" not in done.stderr
    assert done.stderr == ("xxe.xlsx: not a readable XLSX workbook (XML entity declarations are refused: a possible "
                           "entity-expansion attack)\n")
    assert "4410.125" not in done.stdout + done.stderr


# -- writes stay inside the campaign --------------------------------------------------------------
HOSTILE = ["../../outside", "/tmp/labtool-escape", "..", "~", "C:\\Windows\\x", "a/../../b", "\x00nul", "." * 300]


def _tree(folder: Path, skip: Path) -> dict:
    return {p: p.stat().st_mtime_ns for p in folder.rglob("*") if skip not in p.parents and p != skip}


def _all_inside(root: Path):
    real = root.resolve()
    for p in root.rglob("*"):
        assert p.resolve().is_relative_to(real), p
    with Campaign.open(root) as camp:
        for rel in camp.captures(current_only=False)["waveform_path"]:
            assert (root / rel).resolve().is_relative_to((root / "waveforms").resolve()), rel
    assert verify_problems(root) == []


def test_hostile_lot_and_part_fields_never_write_outside_the_campaign(tmp_path):
    """Lot/part from a preamble, a manifest, a workbook's conditions sheet and a name pattern."""
    src = tmp_path / "src"
    src.mkdir()
    rows = ["file,lot,part"]
    for k, value in enumerate(HOSTILE):
        clean = value.replace("\x00", "")
        (src / f"pre{k}.csv").write_bytes(f"# lot: {clean}\n# part: {clean}\n".encode() +
                                          GOOD.replace(b"1.2\n", f"1.{k}\n".encode()))
        (src / f"man{k}.csv").write_bytes(GOOD.replace(b"1.2\n", f"2.{k}\n".encode()))
        rows.append(f'man{k}.csv,"{clean}","{clean}"')
        (src / f"book{k}.xlsx").write_bytes(_conditions_book(clean, k))
    (tmp_path / "manifest.csv").write_text("\n".join(rows) + "\n")
    (src / "..__..__p.csv").write_bytes(GOOD.replace(b"1.2\n", b"3.3\n"))
    before = _tree(tmp_path, tmp_path / "camp")
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([str(src)], camp, IngestOptions(manifest=load_manifest(str(tmp_path / "manifest.csv"))))
        named = ingest_paths([str(src / "..__..__p.csv")], camp, IngestOptions(name_pattern="{lot}__{wafer}__{part}.csv"))
    assert report.failed == [] and named.failed == []
    assert len(report.added) == 3 * len(HOSTILE) and len(named.added) == 1
    assert _tree(tmp_path, tmp_path / "camp") == before  # nothing outside the campaign created or touched
    assert not Path("/tmp/labtool-escape").exists()
    _all_inside(tmp_path / "camp")
    with Campaign.open(tmp_path / "camp") as camp:
        lots = set(camp.captures(current_only=False)["lot"])
    assert "../../outside" in lots and "/tmp/labtool-escape" in lots  # kept as data, only the folder name is cleaned


def _conditions_book(lot: str, k: int) -> bytes:
    import io

    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "run"
    for row in [HEADER, *ROWS[:-1], (3e-6, 1.8, 1.0 + k / 100)]:
        ws.append(row)
    cond = wb.create_sheet("conditions")
    cond.append(("lot", lot))
    cond.append(("part", lot))
    out = io.BytesIO()
    wb.save(out)
    return out.getvalue()


@pytest.mark.slow
def test_hostile_lot_in_an_acquisition_plan_stays_inside_the_campaign(tmp_path):
    plan = small_plan(tmp_path, parts=1, ramps=("10us",), lot="../../../outside")
    before = _tree(tmp_path, tmp_path / "camp")
    done = run_cli(["acquire", str(plan), "--into", "camp", "--sim"], cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert _tree(tmp_path, tmp_path / "camp") == before
    _all_inside(tmp_path / "camp")


# -- code execution -------------------------------------------------------------------------------
def test_a_pickle_payload_in_a_preamble_is_kept_as_text(tmp_path):
    marker = tmp_path / "pwned"
    payload = f"cos\nsystem\n(S'touch {marker}'\ntR."
    path = tmp_path / "p.csv"
    path.write_bytes(b"# note: " + payload.encode().replace(b"\n", b"\\n") + b"\n" + GOOD)
    with Campaign.open(tmp_path / "camp", create=True) as camp:
        report = ingest_paths([str(path)], camp)
        (capture,) = list(camp.iter_captures(report.added))
    assert not marker.exists()
    assert "system" in capture.provenance.metadata["note"]


def test_no_unpickling_or_eval_anywhere_in_the_package():
    """A backstop to the behavioural tests above: the source never calls these on anything."""
    pattern = re.compile(r"\b(pickle\.loads?|marshal\.loads?|eval|exec|yaml\.load|shelve\.open)\s*\(")
    hits = [f"{p.relative_to(ROOT)}:{n}" for pkg in ("labtool", "instruments") for p in (ROOT / pkg).rglob("*.py")
            for n, line in enumerate(p.read_text().splitlines(), 1) if pattern.search(line)]
    assert hits == []


# -- the simulated bench --------------------------------------------------------------------------
def _outside_address() -> str | None:
    """This host's address on a non-loopback interface (no packet is sent), or None."""
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        try:
            s.connect(("192.0.2.1", 9))
        except OSError:
            return None
        address = s.getsockname()[0]
    return None if address.startswith("127.") or address == "0.0.0.0" else address


def _listening(port: int) -> set[str]:
    """Local addresses listening on ``port`` (Linux /proc/net/tcp, TCP_LISTEN = 0A)."""
    found = set()
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        if not os.path.exists(table):
            continue
        for line in open(table).read().splitlines()[1:]:
            local, state = line.split()[1], line.split()[3]
            addr, p = local.rsplit(":", 1)
            if int(p, 16) == port and state == "0A":
                found.add(addr)
    return found


def test_the_simulated_bench_listens_on_loopback_only():
    from instruments.sim.bench import start_population_bench

    running = start_population_bench(str(POPULATION))
    try:
        outside = _outside_address()
        for role, resource in running.resources.items():
            port = int(resource.split("::")[2])
            if os.path.exists("/proc/net/tcp"):
                assert _listening(port) == {"0100007F"}, role  # 127.0.0.1, little-endian hex
            with socket.create_connection(("127.0.0.1", port), timeout=5) as s:
                s.sendall(b"*IDN?\n")
                assert s.recv(200).strip()
            if outside is not None:
                with pytest.raises(OSError):
                    socket.create_connection((outside, port), timeout=5).close()
    finally:
        running.stop()
