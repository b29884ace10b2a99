"""Small fixture files written by the hardening tests: a good capture as CSV, workbooks, and workbooks
with one zip member swapped for hand-written XML. Invented values (stating properties)."""

from __future__ import annotations

import io
import zipfile

GOOD = b"time,vdd,vref\n0,0,0\n1e-6,0.9,0.1\n2e-6,1.8,1.2\n3e-6,1.8,1.2\n"
SHEET = "xl/worksheets/sheet1.xml"


def workbook(rows: list[tuple], title: str = "run") -> bytes:
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for row in rows:
        ws.append(row)
    out = io.BytesIO()
    wb.save(out)
    return out.getvalue()


def replace_member(book: bytes, name: str, content: bytes | None = None, *, writer=None) -> bytes:
    """The workbook with one zip member replaced (``writer(fh)`` streams a large one)."""
    src = zipfile.ZipFile(io.BytesIO(book))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            if info.filename != name:
                dst.writestr(info, src.read(info.filename))
            elif writer is not None:
                big = zipfile.ZipInfo(name)
                big.compress_type = zipfile.ZIP_DEFLATED
                with dst.open(big, "w", force_zip64=True) as fh:
                    writer(fh)
            else:
                dst.writestr(name, content)
    return out.getvalue()


def sheet_xml(body: str, *, prolog: str = "", dimension: str = "A1:C3") -> bytes:
    return (f'{prolog}<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
            f'<dimension ref="{dimension}"/><sheetData>{body}</sheetData></worksheet>').encode()


HEADER = ("time", "vdd", "vref")
ROWS = [(0.0, 0.0, 0.0), (1e-6, 0.9, 0.1), (2e-6, 1.8, 1.2), (3e-6, 1.8, 1.2)]
