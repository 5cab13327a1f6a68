"""The report's look: page geometry, palette and paragraph styles.

Palette: dark slate ink on white with one muted teal accent; event types use the
Okabe-Ito colour-blind-safe set (Okabe & Ito 2008, "Color Universal Design") and are
always also told apart by their own labelled lane, so the graphs read in greyscale too.
"""

from __future__ import annotations

from dataclasses import dataclass

from reportlab.lib import colors
from reportlab.lib.enums import TA_CENTER, TA_LEFT, TA_RIGHT
from reportlab.lib.pagesizes import A4, landscape
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm

from hsat.report._fonts import FontSet

PAGE = A4
PAGE_LANDSCAPE = landscape(A4)
MARGIN_X = 16 * mm
MARGIN_TOP = 24 * mm  # room for the running header
MARGIN_BOTTOM = 18 * mm  # room for the footer

INK = colors.HexColor("#1d2630")
MUTED = colors.HexColor("#5b6670")
RULE = colors.HexColor("#aab3bb")
ACCENT = colors.HexColor("#1f5f63")
ACCENT_LIGHT = colors.HexColor("#e3eeee")
ZEBRA = colors.HexColor("#f3f5f6")
WARN = colors.HexColor("#8a3b00")
WARN_LIGHT = colors.HexColor("#fbefe4")
EXCLUDED = colors.HexColor("#d9dde1")
WAKE = colors.HexColor("#eceff1")
WATERMARK = colors.Color(0.55, 0.58, 0.62, alpha=0.16)

#: Event lanes: Okabe-Ito colours (colour-blind safe); each lane is also labelled.
EVENT_COLOURS = {
    "obstructive_apnea": colors.HexColor("#0072B2"),
    "mixed_apnea": colors.HexColor("#CC79A7"),
    "central_apnea": colors.HexColor("#D55E00"),
    "unclassified_apnea": colors.HexColor("#000000"),
    "hypopnea": colors.HexColor("#E69F00"),
    "desaturation": colors.HexColor("#56B4E9"),
}
SPO2_LINE = colors.HexColor("#0072B2")
PULSE_LINE = colors.HexColor("#7a2f55")
FLOW_LINE = colors.HexColor("#2f4f4f")
POSITION_BAR = colors.HexColor("#4d6a6d")


@dataclass(frozen=True)
class Styles:
    """The paragraph styles of one report (they depend on the fonts found)."""

    fonts: FontSet
    body: ParagraphStyle
    small: ParagraphStyle
    tiny: ParagraphStyle
    h1: ParagraphStyle
    h2: ParagraphStyle
    h3: ParagraphStyle
    label: ParagraphStyle
    value: ParagraphStyle
    cell: ParagraphStyle
    cell_right: ParagraphStyle
    cell_center: ParagraphStyle
    cell_head: ParagraphStyle
    cell_head_center: ParagraphStyle
    right: ParagraphStyle
    caution: ParagraphStyle
    bullet: ParagraphStyle
    mono: ParagraphStyle


def make_styles(fonts: FontSet) -> Styles:
    base = ParagraphStyle(
        "body", fontName=fonts.regular, fontSize=9, leading=12, textColor=INK,
        alignment=TA_LEFT,
    )

    def derive(name: str, **kw: object) -> ParagraphStyle:
        return ParagraphStyle(name, parent=base, **kw)  # type: ignore[arg-type]

    return Styles(
        fonts=fonts,
        body=base,
        small=derive("small", fontSize=8, leading=10.2),
        tiny=derive("tiny", fontSize=6.8, leading=8.4, textColor=MUTED),
        h1=derive("h1", fontName=fonts.bold, fontSize=14, leading=18, textColor=ACCENT,
                  spaceBefore=2, spaceAfter=6),
        h2=derive("h2", fontName=fonts.bold, fontSize=10.5, leading=13, textColor=ACCENT,
                  spaceBefore=8, spaceAfter=3),
        h3=derive("h3", fontName=fonts.bold, fontSize=9, leading=11.5, spaceBefore=5,
                  spaceAfter=2),
        label=derive("label", fontSize=6.8, leading=8.2, textColor=MUTED),
        value=derive("value", fontName=fonts.bold, fontSize=9, leading=11),
        cell=derive("cell", fontSize=8, leading=9.6),
        cell_right=derive("cell_right", fontSize=8, leading=9.6, alignment=TA_RIGHT),
        cell_center=derive("cell_center", fontSize=8, leading=9.6, alignment=TA_CENTER),
        cell_head=derive("cell_head", fontName=fonts.bold, fontSize=7.4, leading=9,
                         textColor=ACCENT),
        cell_head_center=derive("cell_head_center", fontName=fonts.bold, fontSize=7.4,
                                leading=9, textColor=ACCENT, alignment=TA_CENTER),
        right=derive("right", fontSize=8, leading=10.2, alignment=TA_RIGHT),
        caution=derive("caution", fontSize=7.6, leading=9.6, textColor=INK),
        bullet=derive("bullet", leftIndent=14, bulletIndent=2),
        mono=derive("mono", fontName=fonts.mono, fontSize=6.8, leading=8.4),
    )
