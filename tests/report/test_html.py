"""The HTML report: self-contained, navigable, sortable, printable; rendered in headless Chromium."""

import base64
import re
import struct
from html.parser import HTMLParser

import pytest

from labtool.report import html as report_html
from labtool.report import plots
from tests.report.chromium import print_to_pdf, render_and_check, visible_text
from tests.report.tables import measurement_rows


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.ids = [], set()

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        if "id" in attrs:
            self.ids.add(attrs["id"])


def _png_size(png: bytes) -> tuple[int, int]:
    # PNG signature then the IHDR chunk: width and height as 4-byte big-endian (ISO/IEC 15948 §11.2.2).
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and png[12:16] == b"IHDR"
    return struct.unpack(">II", png[16:24])


@pytest.fixture(scope="module")
def page():
    table = measurement_rows([("ZR24A", "W03", 0, 0, "started", 2e-6), ("ZR24A", "W03", 1, 0, "started", 1e-5),
                              ("ZR24A", "W03", 2, 0, "started", 1e-7), ("ZR24A", "W03", 3, 0, "stuck_at_zero", None)])
    pngs = [plots.delay_histogram(table, title="ZR24A").png(), plots.wafer_map(table, title="ZR24A").png(),
            plots.qq_plot([("set-up", [1e-6, 2e-6], [1e-6, 3e-6])], title="qq").png()]
    sections = [
        report_html.Section("s-overview", "Overview", facts=[("captures", "4")], nav_group="overview",
                            tables=[report_html.Table("captures", table[["capture_id", "delay_s", "verdict"]])]),
        report_html.Section(report_html.anchor_for("lot ZR24A"), "lot <ZR24A> & co", finding="consistent",
                            pictures=[report_html.Picture("histogram", pngs[0]), report_html.Picture("wafer", pngs[1])]),
        report_html.Section("s-p01", "ZR24A/p01", pictures=[report_html.Picture("triage", pngs[2])], nav_group="parts"),
    ]
    return report_html.render_html("ZR-4410 report", "demo campaign", sections), pngs


def test_page_is_self_contained_and_every_link_stays_inside_it(page):
    text, pngs = page
    parsed = _Collect()
    parsed.feed(text)
    imgs = [a for t, a in parsed.tags if t == "img"]
    assert len(imgs) == 3
    for attrs, png in zip(imgs, pngs):
        assert attrs["src"] == "data:image/png;base64," + base64.b64encode(png).decode()
        assert attrs["alt"]
    assert not [t for t, a in parsed.tags if t in ("link", "iframe", "object", "embed", "base")]
    assert all("src" not in a for t, a in parsed.tags if t == "script")
    hrefs = [a["href"] for t, a in parsed.tags if "href" in a]
    assert hrefs and all(h.startswith("#") and h[1:] in parsed.ids for h in hrefs)
    outside = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", text)
    assert not re.search(r"(https?:)?//[A-Za-z0-9]", outside)  # no address of anything elsewhere
    assert "@media print" in text and "url(" not in text


def test_text_is_escaped_and_numbers_shown_with_si_prefixes(page):
    text, _ = page
    assert "lot &lt;ZR24A&gt; &amp; co" in text and "<ZR24A>" not in text
    assert '<td data-v="1e-07" class="num">100 ns</td>' in text
    assert "stuck at zero" in text and "✖" in text  # the verdict's label and its glyph, not colour alone


def test_display_formats():
    assert report_html.display("delay_s", 1.25e-5) == "12.5 µs"
    assert report_html.display("vout_final_v", 1.2011) == "1.201 V"
    assert report_html.display("parts_stuck_ppm_upper95", 45123.4) == "45,123 ppm"
    assert report_html.display("start_stuck_upper95", 0.15332) == "15.33 %"  # a fraction, shown in %
    assert report_html.display("delay_s", 999.96e-6) == "1 ms" and report_html.display("delay_s", 999.6e-6) == "999.6 µs"
    assert report_html.display("temperature_c", -40.0) == "-40 °C"
    assert report_html.display("delay_s", float("nan")) == "—"
    assert report_html.display("verdict", "recollapse") == "re-collapse"


def test_chromium_renders_every_image_and_sorts_tables_without_a_network(page, tmp_path):
    text, pngs = page
    result = render_and_check(text, tmp_path, check_column=1)
    assert result["n_images"] == 3 and result["decoded"] == 3
    assert result["widths"] == [_png_size(p)[0] for p in pngs]
    assert result["sections"] == 3
    # Sorted by value, not by text ("10 µs" < "2 µs" as text); missing last both ways.
    assert result["ascending"] == ["100 ns", "2 µs", "10 µs", "—"]
    assert result["descending"] == ["10 µs", "2 µs", "100 ns", "—"]


def test_labels_keep_their_case_so_micro_stays_micro(tmp_path):
    # Upper-casing "µs" gives "ΜS" (U+039C, Greek capital mu), read as milliseconds: what Chromium lays
    # out must be the label as written (innerText applies the stylesheet's text-transform).
    sec = report_html.Section("s-a", "lot ZR24A", facts=[("ramp 10 µs · median", "12.5 µs")])
    shown = visible_text(report_html.render_html("r", "s", [sec]), tmp_path, "dl.facts dt, dl.facts dd, nav h3")
    assert shown == ["Groups", "ramp 10 µs · median", "12.5 µs"] and "\u039c" not in "".join(shown)


def test_chromium_prints_one_section_per_page(tmp_path):
    # Three short sections fit on one screen; the print stylesheet still gives each its own page.
    sections = [report_html.Section(f"s-{i}", f"lot ZR24{c}", facts=[("captures", str(i))])
                for i, c in enumerate("ABC")]
    path = tmp_path / "report.html"
    path.write_text(report_html.render_html("ZR-4410 report", "print", sections), encoding="utf-8")
    pdf = print_to_pdf(path, tmp_path)
    assert pdf[:5] == b"%PDF-"
    assert len(re.findall(rb"/Type\s*/Page(?!s)", pdf)) == 3
