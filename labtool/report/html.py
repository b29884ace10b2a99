"""The HTML report: one self-contained file.

Plots are embedded as base64 PNG data URIs; the stylesheet and the table-sorting script are inline;
nothing links outside the file (no web fonts, no scripts or styles fetched from anywhere), so the
report opens offline, attaches to a ticket and prints (print stylesheet: no navigation, one group per
page, figures kept whole).
"""

from __future__ import annotations

import base64
import html
import math
import re
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from labtool.report import style
from labtool.display import format_cell


@dataclass(frozen=True)
class Picture:
    """One embedded plot."""

    caption: str
    png: bytes = field(repr=False)
    alt: str = ""


@dataclass(frozen=True)
class Table:
    """A sortable table; ``note`` says, for example, that only the first rows are shown."""

    caption: str
    frame: pd.DataFrame = field(repr=False)
    note: str = ""


@dataclass(frozen=True)
class Section:
    """A navigable part of the report: a group, or one of the overall sections."""

    anchor: str
    title: str
    facts: Sequence[tuple[str, str]] = ()  # key figures shown as tiles: (label, value text)
    finding: str = ""  # plain-words comparison with the model
    pictures: Sequence[Picture] = ()
    tables: Sequence[Table] = ()
    text: str = ""
    nav_group: str = "groups"  # "overview", "groups" or "parts": where it sits in the navigation


def anchor_for(text: str) -> str:
    return "s-" + (re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower() or "x")


def display(column: str, value: Any) -> str:
    """A cell as text: the column's unit with SI prefixes (labtool.display), verdict labels, '—' for missing."""
    if column == "verdict" and str(value) in style.VERDICT_STYLES:
        return style.VERDICT_STYLES[str(value)].label
    return format_cell(column, value, digits=4)


_BOUND_TEXT = re.compile(r"^[≥≤] ?([-+0-9.eE]+)$")


def _sort_key(value: Any) -> str:
    """The data-v attribute: the raw number for numeric cells (sorted numerically), empty otherwise;
    a p-value shown as a bound ("≥ 0.25") sorts by its number."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, str) and _BOUND_TEXT.match(value):
        return repr(float(_BOUND_TEXT.match(value).group(1)))
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return ""
    return repr(float(value)) if math.isfinite(value) else ""


def _cell_html(column: str, value: Any) -> str:
    text = html.escape(display(column, value))
    key = _sort_key(value)
    attr = f' data-v="{key}" class="num"' if key else ""
    if column == "verdict" and str(value) in style.VERDICT_STYLES:
        vs = style.VERDICT_STYLES[str(value)]
        cls = str(value).replace("_", "-")
        text = f'<span class="chip v-{cls}"><span class="glyph" aria-hidden="true">{vs.glyph}</span>{text}</span>'
    return f"<td{attr}>{text}</td>"


def table_html(table: Table, table_id: str) -> str:
    frame = table.frame
    head = "".join(f'<th scope="col" title="sort by {html.escape(str(c))}">{html.escape(str(c))}</th>'
                   for c in frame.columns)
    cols = [str(c) for c in frame.columns]
    body = "\n".join("<tr>" + "".join(_cell_html(c, v) for c, v in zip(cols, row)) + "</tr>"
                     for row in frame.itertuples(index=False, name=None))
    note = f'<p class="note">{html.escape(table.note)}</p>' if table.note else ""
    return (f'<figure class="table-wrap"><figcaption>{html.escape(table.caption)}</figcaption>{note}'
            f'<div class="scroll"><table class="sortable" id="{table_id}"><thead><tr>{head}</tr></thead>'
            f"<tbody>\n{body}\n</tbody></table></div></figure>")


def picture_html(pic: Picture) -> str:
    data = base64.b64encode(pic.png).decode("ascii")
    alt = html.escape(pic.alt or pic.caption)
    return (f'<figure class="plot"><img src="data:image/png;base64,{data}" alt="{alt}">'
            f"<figcaption>{html.escape(pic.caption)}</figcaption></figure>")


def section_html(sec: Section) -> str:
    parts = [f'<section id="{sec.anchor}" class="{html.escape(sec.nav_group)}"><h2>{html.escape(sec.title)}</h2>']
    if sec.facts:
        parts.append('<dl class="facts">' + "".join(
            f"<div><dt>{html.escape(k)}</dt><dd>{html.escape(v)}</dd></div>" for k, v in sec.facts) + "</dl>")
    if sec.finding:
        parts.append(f'<p class="finding"><strong>Against the model:</strong> {html.escape(sec.finding)}</p>')
    if sec.text:
        parts.append("".join(f"<p>{html.escape(p)}</p>" for p in sec.text.split("\n\n")))
    parts.extend(picture_html(p) for p in sec.pictures)
    parts.extend(table_html(t, f"{sec.anchor}-t{i}") for i, t in enumerate(sec.tables))
    parts.append("</section>")
    return "\n".join(parts)


def _nav(sections: Sequence[Section]) -> str:
    out = ['<nav aria-label="report sections"><p class="brand">labtool</p>']
    for group, heading in (("overview", "Report"), ("groups", "Groups"), ("parts", "Returned parts")):
        members = [s for s in sections if s.nav_group == group]
        if members:
            out.append(f"<h3>{heading}</h3><ul>" + "".join(
                f'<li><a href="#{s.anchor}">{html.escape(s.title)}</a></li>' for s in members) + "</ul>")
    out.append("</nav>")
    return "".join(out)


def _legend() -> str:
    chips = "".join(f'<span class="chip v-{v.replace("_", "-")}"><span class="glyph" aria-hidden="true">'
                    f'{s.glyph}</span>{html.escape(s.label)}</span>' for v, s in style.VERDICT_STYLES.items())
    return f'<p class="legend">Verdicts: {chips}</p>'


def render_html(title: str, subtitle: str, sections: Sequence[Section]) -> str:
    """The whole report as one HTML string."""
    body = "\n".join(section_html(s) for s in sections)
    verdict_css = "\n".join(
        f".v-{v.replace('_', '-')} {{ border-color: {s.colour}; background: {s.colour}2e; }}\n"
        f".v-{v.replace('_', '-')} .glyph {{ color: {s.colour}; }}" for v, s in style.VERDICT_STYLES.items())
    slots = {"TITLE": html.escape(title), "SUBTITLE": html.escape(subtitle), "CSSVARS": style.CSS_VARIABLES,
             "VERDICTCSS": verdict_css, "NAV": _nav(sections), "LEGEND": _legend(), "BODY": body,
             "SCRIPT": SORT_SCRIPT}
    # One pass, so text inside a slot is never taken for another slot.
    return re.sub(r"%([A-Z]+)%", lambda m: slots.get(m.group(1), m.group(0)), _TEMPLATE)


# Sorting: click (or Enter on) a column head; numbers by their SI value, text case-blind, missing last.
SORT_SCRIPT = """
(function () {
  function key(cell) {
    var v = cell.getAttribute('data-v');
    if (v !== null && v !== '') return {num: true, v: parseFloat(v)};
    var t = cell.textContent.trim();
    return {num: false, v: t === '\\u2014' ? null : t.toLowerCase()};
  }
  function sortBy(table, index, th) {
    var dir = th.getAttribute('aria-sort') === 'ascending' ? -1 : 1;
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (h) { h.removeAttribute('aria-sort'); });
    th.setAttribute('aria-sort', dir === 1 ? 'ascending' : 'descending');
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.sort(function (a, b) {
      var x = key(a.cells[index]), y = key(b.cells[index]);
      if (x.v === null || y.v === null) return (x.v === null) - (y.v === null);
      if (x.num !== y.num) return x.num ? -1 : 1;
      return (x.v < y.v ? -1 : x.v > y.v ? 1 : 0) * dir;
    });
    rows.forEach(function (r) { body.appendChild(r); });
  }
  Array.prototype.forEach.call(document.querySelectorAll('table.sortable'), function (table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, i) {
      th.tabIndex = 0;
      th.addEventListener('click', function () { sortBy(table, i, th); });
      th.addEventListener('keydown', function (e) {
        if (e.key === 'Enter' || e.key === ' ') { e.preventDefault(); sortBy(table, i, th); }
      });
    });
  });
})();
"""

_TEMPLATE = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="labtool">
<title>%TITLE%</title>
<style>
:root {
%CSSVARS%
}
* { box-sizing: border-box; }
html { font-size: 15px; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font-family: "DejaVu Sans", "Liberation Sans", "Helvetica Neue", Arial, sans-serif; line-height: 1.45; }
header.top { background: var(--ink); color: var(--paper); padding: 0.9rem 1.4rem 0.8rem 17rem;
             border-bottom: 4px solid var(--accent); }
header.top h1 { margin: 0; font-size: 1.35rem; letter-spacing: 0.02em; }
header.top p { margin: 0.2rem 0 0; color: var(--band); font-size: 0.85rem; }
nav { position: fixed; top: 0; left: 0; bottom: 0; width: 15.5rem; overflow-y: auto; padding: 1rem;
      background: #fff; border-right: 1px solid var(--grid); font-size: 0.85rem; }
nav .brand { font-weight: bold; font-size: 1.1rem; margin: 0 0 0.8rem; color: var(--accent);
             border-left: 4px solid var(--accent); padding-left: 0.5rem; }
nav h3 { font-size: 0.78rem; font-weight: bold; letter-spacing: 0.04em; color: var(--slate);
         margin: 1rem 0 0.3rem; }
nav ul { list-style: none; margin: 0; padding: 0; }
nav li a { display: block; padding: 0.18rem 0.4rem; color: var(--ink); text-decoration: none; border-radius: 3px; }
nav li a:hover, nav li a:focus { background: var(--band); }
main { margin-left: 15.5rem; padding: 0.6rem 1.6rem 3rem; max-width: 78rem; }
section { margin: 1.4rem 0 2.2rem; padding-top: 0.4rem; border-top: 1px solid var(--grid); }
h2 { font-size: 1.25rem; margin: 0.6rem 0 0.8rem; color: var(--ink); }
h2::before { content: ""; display: inline-block; width: 0.55rem; height: 0.9rem; margin-right: 0.5rem;
             background: var(--accent); vertical-align: -0.05rem; }
dl.facts { display: flex; flex-wrap: wrap; gap: 0.5rem; margin: 0 0 0.8rem; }
dl.facts div { background: #fff; border: 1px solid var(--grid); border-top: 3px solid var(--slate);
               padding: 0.35rem 0.7rem; min-width: 8.5rem; }
/* labels keep their case: upper-casing turns "µs" into "ΜS" (Greek capital mu), read as ms */
dl.facts dt { font-size: 0.75rem; letter-spacing: 0.02em; color: var(--slate); }
dl.facts dd { margin: 0; font-size: 1.05rem; font-weight: bold; font-variant-numeric: tabular-nums; }
p.finding { background: #fff; border-left: 4px solid var(--accent); padding: 0.5rem 0.8rem; margin: 0 0 1rem; }
p.note, p.legend { color: var(--slate); font-size: 0.85rem; }
figure { margin: 0 0 1.2rem; }
figure.plot { background: #fff; border: 1px solid var(--grid); padding: 0.5rem; display: inline-block;
              max-width: 100%; }
figure.plot img { display: block; max-width: 100%; height: auto; }
figcaption { font-size: 0.85rem; color: var(--slate); margin: 0.3rem 0; }
.scroll { overflow-x: auto; max-height: 34rem; overflow-y: auto; border: 1px solid var(--grid); background: #fff; }
table { border-collapse: collapse; font-size: 0.8rem; font-variant-numeric: tabular-nums; }
th { position: sticky; top: 0; background: var(--ink); color: var(--paper); text-align: left;
     padding: 0.3rem 0.55rem; cursor: pointer; white-space: nowrap; user-select: none; }
th:focus { outline: 2px solid var(--accent); }
th[aria-sort="ascending"]::after { content: " \\25B2"; }
th[aria-sort="descending"]::after { content: " \\25BC"; }
td { padding: 0.22rem 0.55rem; border-bottom: 1px solid var(--grid); white-space: nowrap; }
td.num { text-align: right; }
tbody tr:nth-child(even) { background: #F6F7F8; }
.chip { display: inline-block; border: 1px solid; border-radius: 3px; padding: 0 0.35rem; margin: 0 0.2rem 0.1rem 0;
        white-space: nowrap; color: var(--ink); }
.chip .glyph { margin-right: 0.25rem; }
%VERDICTCSS%
footer { margin-left: 15.5rem; padding: 1rem 1.6rem; color: var(--slate); font-size: 0.8rem;
         border-top: 1px solid var(--grid); }
@media (max-width: 900px) {
  nav { position: static; width: auto; border-right: 0; border-bottom: 1px solid var(--grid); }
  main, footer { margin-left: 0; }
  header.top { padding-left: 1.4rem; }
}
@page { size: A4; margin: 14mm 12mm; }
@media print {
  html { font-size: 10.5pt; }
  body { background: #fff; }
  nav { display: none; }
  header.top { padding: 0 0 0.4rem; background: none; color: var(--ink); border-bottom: 2px solid var(--ink); }
  header.top p { color: var(--slate); }
  main, footer { margin: 0; padding: 0; max-width: none; }
  section { break-before: page; border-top: 0; }
  section:first-of-type { break-before: auto; }
  figure, dl.facts div, p.finding { break-inside: avoid; }
  figure.plot { border: 0; padding: 0; display: block; }
  .scroll { max-height: none; overflow: visible; border: 0; }
  table { width: 100%; font-size: 7pt; }
  th, td { white-space: normal; padding: 0.1rem 0.25rem; }
  th { overflow-wrap: anywhere; }
  th { position: static; background: #fff; color: var(--ink); border-bottom: 1.5px solid var(--ink); }
  th::after { content: "" !important; }
  tr { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
</style>
</head>
<body>
%NAV%
<header class="top"><h1>%TITLE%</h1><p>%SUBTITLE%</p></header>
<main>
%LEGEND%
%BODY%
</main>
<footer>Written by labtool. Model predictions come from a behavioural startup model, not transistor-level
sign-off. Tables sort by a click on a column head.</footer>
<script>%SCRIPT%</script>
</body>
</html>
"""
