"""labtool's own visual identity for plots and the HTML report: the "bench ink" look.

Verdict colours are the eight colours of the Okabe & Ito colour-universal-design palette
(Okabe M., Ito K., "Color Universal Design — how to make figures and presentations that are friendly
to colorblind people", J*FLY, 2008), which stays distinguishable under protanopia, deuteranopia and
tritanopia. Colour is never the only cue: every verdict also has its own marker, hatch and text
label. Continuous values (delay on a wafer map) use matplotlib's ``cividis`` map, designed for
colour-vision deficiency (Nuñez, Anderton, Renslow, PLoS ONE 13(7) 2018).

Neutral inks (paper, slate, grid) and the layout are chosen for this tool.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

PALETTE_NAME = "bench ink"


@dataclass(frozen=True)
class Inks:
    """The neutral colours of the look (hex)."""

    paper: str = "#FBFAF7"  # warm off-white page
    ink: str = "#1F2A36"  # text, median envelopes, predicted distributions
    slate: str = "#5D7285"  # secondary text, faint traces
    bars: str = "#A7B6C4"  # measured histogram bars
    band: str = "#CFD8E0"  # envelope band (p05–p95)
    grid: str = "#E3E7EB"
    rule: str = "#8895A2"  # spec limits and reference lines
    accent: str = "#2E5E7E"  # headings and links in the HTML report


INKS = Inks()


@dataclass(frozen=True)
class VerdictStyle:
    colour: str
    marker: str  # matplotlib marker
    hatch: str
    label: str
    glyph: str  # the marker's look-alike character for HTML and text
    edge: str = INKS.ink


# Order follows labtool.measure.verdict.VERDICTS (most severe first). Colours: Okabe & Ito 2008.
VERDICT_STYLES: Mapping[str, VerdictStyle] = {
    "no_supply": VerdictStyle("#000000", "P", "++", "no supply", "✚"),
    "stuck_at_zero": VerdictStyle("#D55E00", "X", "xx", "stuck at zero", "✖"),
    "recollapse": VerdictStyle("#0072B2", "v", "\\\\", "re-collapse", "▼"),
    "incomplete": VerdictStyle("#56B4E9", "D", "..", "incomplete", "◆"),
    "wrong_level": VerdictStyle("#F0E442", "s", "--", "wrong level", "■"),
    "slow_start": VerdictStyle("#E69F00", ">", "//", "slow start", "▶"),
    "ringing": VerdictStyle("#CC79A7", "*", "oo", "ringing", "✱"),
    "started": VerdictStyle("#009E73", "o", "", "started", "●"),
}

UNKNOWN_VERDICT = VerdictStyle("#BBBBBB", ".", "", "unknown", "?")


def verdict_style(verdict: str) -> VerdictStyle:
    return VERDICT_STYLES.get(verdict, UNKNOWN_VERDICT)


def verdict_order(verdicts) -> list[str]:
    """Verdicts present, most severe first (the order of VERDICT_STYLES), unknown ones last."""
    known = [v for v in VERDICT_STYLES if v in set(verdicts)]
    return known + sorted(set(verdicts) - set(known))


# Markers on waveform overlays for the instants the measurement found.
EVENT_MARKERS: Mapping[str, tuple[str, str]] = {
    "t_supply": ("^", "supply valid"),
    "cross90": ("o", "90 % crossing"),
    "settle": ("s", "settled"),
}

SEQUENTIAL_MAP = "cividis"

# Figure sizes in inches; a triage sheet is one A4 page, portrait.
FIGSIZE_WIDE = (9.0, 4.2)
FIGSIZE_TALL = (9.0, 6.4)
FIGSIZE_A4 = (8.27, 11.69)
DPI = 110

RC: Mapping[str, object] = {
    "figure.facecolor": INKS.paper,
    "savefig.facecolor": INKS.paper,
    "axes.facecolor": "#FFFFFF",
    "axes.edgecolor": INKS.slate,
    "axes.labelcolor": INKS.ink,
    "axes.titlecolor": INKS.ink,
    "axes.titlelocation": "left",
    "axes.titlesize": 11,
    "axes.titleweight": "bold",
    "axes.labelsize": 9,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": INKS.grid,
    "grid.linewidth": 0.8,
    "xtick.color": INKS.slate,
    "ytick.color": INKS.slate,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.frameon": False,
    "font.family": "DejaVu Sans",  # ships with matplotlib: no system or web fonts needed
    "font.size": 9,
    "lines.linewidth": 1.2,
    "hatch.linewidth": 0.8,
    "hatch.color": INKS.ink,
    "figure.titlesize": 13,
    "figure.titleweight": "bold",
}

# The HTML report's stylesheet uses the same inks.
CSS_VARIABLES = "\n".join(
    f"  --{name}: {value};" for name, value in (
        ("paper", INKS.paper), ("ink", INKS.ink), ("slate", INKS.slate), ("band", INKS.band),
        ("grid", INKS.grid), ("rule", INKS.rule), ("accent", INKS.accent),
    )) + "\n" + "\n".join(f"  --v-{v.replace('_', '-')}: {s.colour};" for v, s in VERDICT_STYLES.items())
