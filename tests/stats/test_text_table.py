"""Readable tables: unit-suffixed columns shown with SI prefixes (BIPM SI Brochure, 9th ed., table 7)."""

import re

from labtool.stats.sources import text_table


def test_unit_suffixed_columns_get_si_prefixes_and_others_stay_plain():
    table = text_table([{"lot": "ZR24A", "delay_median_s": -2.317e-4, "vref_v": 1.2032, "parts_stuck_ppm_upper95": 153318.0,
                         "n": 18, "cpk": None}], ("lot", "delay_median_s", "vref_v", "parts_stuck_ppm_upper95", "n", "cpk"))
    header, row = table.splitlines()
    assert header.split() == ["lot", "delay_median_s", "vref_v", "parts_stuck_ppm_upper95", "n", "cpk"]
    assert re.split(r"\s{2,}", row) == ["ZR24A", "-232 µs", "1.2 V", "153,318 ppm", "18", "-"]
