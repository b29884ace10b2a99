"""Headless Chromium for the report tests: render a page, run a small inline check, read its answer."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync")

# Runs after every image has loaded (the load event waits for them): counts the images, which
# decoded (naturalWidth > 0), then clicks the first sortable table's sort head and reads the order.
CHECK_SCRIPT = """
<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var out = {n_images: imgs.length,
             decoded: imgs.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length,
             widths: imgs.map(function (i) { return i.naturalWidth; }),
             sections: document.querySelectorAll('main section').length};
  var table = document.querySelector('table.sortable[data-check-column]');
  if (table) {
    var col = parseInt(table.getAttribute('data-check-column'), 10);
    var th = table.tHead.rows[0].cells[col];
    var read = function () {
      return Array.prototype.map.call(table.tBodies[0].rows, function (r) { return r.cells[col].textContent; });
    };
    th.click(); out.ascending = read();
    th.click(); out.descending = read();
  }
  var pre = document.createElement('pre');
  pre.id = 'labtool-check';
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});
</script>
"""


def require_chromium() -> str:
    if not Path(CHROMIUM).exists() and shutil.which("chromium") is None:
        pytest.skip("Chromium is not installed (/usr/bin/chromium missing): the HTML report was not rendered; "
                    "install Debian's chromium package (.ci/run does) to run this test")
    return CHROMIUM if Path(CHROMIUM).exists() else shutil.which("chromium")


def _run(args: list[str], profile: Path) -> subprocess.CompletedProcess:
    exe = require_chromium()
    return subprocess.run([exe, *FLAGS, f"--user-data-dir={profile}", *args], capture_output=True, text=True,
                          timeout=120)


def _answer(page: str, work: Path, script: str, name: str) -> object:
    """Render ``page`` with ``script`` (which leaves JSON in a ``<pre id="labtool-NAME">``), return it."""
    path = work / f"{name}.html"
    path.write_text(page.replace("</body>", script + "</body>"), encoding="utf-8")
    done = _run(["--virtual-time-budget=5000", "--dump-dom", path.as_uri()], work / f"profile-{name}")
    m = re.search(rf'<pre id="labtool-{name}">(.*?)</pre>', done.stdout, re.S)
    assert m, f"the {name} script did not run (exit {done.returncode}): {done.stderr[-800:]}"
    return json.loads(m.group(1).replace("&quot;", '"').replace("&amp;", "&").replace("&lt;", "<").replace("&gt;", ">"))


def render_and_check(page: str, work: Path, *, check_column: int | None = None) -> dict:
    """Write ``page`` plus the check script, render it headless, return the check's JSON answer."""
    if check_column is not None:
        page = page.replace('<table class="sortable"', f'<table class="sortable" data-check-column="{check_column}"', 1)
    return _answer(page, work, CHECK_SCRIPT, "check")


def print_to_pdf(html_path: Path, work: Path) -> bytes:
    pdf = work / "page.pdf"
    _run(["--no-pdf-header-footer", f"--print-to-pdf={pdf}", html_path.as_uri()], work / "profile-pdf")
    assert pdf.exists(), "Chromium wrote no PDF"
    return pdf.read_bytes()


def visible_text(page: str, work: Path, selector: str) -> list[str]:
    """What a person sees of every element matching ``selector``: its ``innerText`` as Chromium lays it
    out (after the stylesheet, so a CSS case transform shows)."""
    script = ("<script>window.addEventListener('load', function () {"
              "var out = Array.prototype.map.call(document.querySelectorAll(" + json.dumps(selector) + "),"
              " function (e) { return e.innerText; });"
              "var pre = document.createElement('pre'); pre.id = 'labtool-text';"
              "pre.textContent = JSON.stringify(out); document.body.appendChild(pre); });</script>")
    return _answer(page, work, script, "text")
