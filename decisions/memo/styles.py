"""Paragraph and table styles of the memo, and the caution every page carries."""

from __future__ import annotations

from reportlab.lib.enums import TA_LEFT
from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import TableStyle

from decisions.drawings.style import ACCENT, ACCENT_LIGHT, FONT, FONT_BOLD, FONT_MONO, GRID, INK, MUTED
from valuation.report import CAUTION

__all__ = ["CAUTION", "MARGIN", "S", "table_style"]

MARGIN = 42.0

S = {
    "title": ParagraphStyle("title", fontName=FONT_BOLD, fontSize=16, leading=20, textColor=INK,
                            spaceAfter=4),
    "h1": ParagraphStyle("h1", fontName=FONT_BOLD, fontSize=12, leading=15, textColor=ACCENT,
                         spaceBefore=12, spaceAfter=5, keepWithNext=1),
    "h2": ParagraphStyle("h2", fontName=FONT_BOLD, fontSize=9.5, leading=12, textColor=INK,
                         spaceBefore=8, spaceAfter=3, keepWithNext=1),
    "body": ParagraphStyle("body", fontName=FONT, fontSize=9, leading=12, textColor=INK,
                           alignment=TA_LEFT, spaceAfter=4),
    "small": ParagraphStyle("small", fontName=FONT, fontSize=7.5, leading=9.5, textColor=MUTED,
                            spaceAfter=3),
    "cell": ParagraphStyle("cell", fontName=FONT, fontSize=8, leading=10, textColor=INK),
    "cell_bold": ParagraphStyle("cell_bold", fontName=FONT_BOLD, fontSize=8, leading=10,
                                textColor=INK),
    "mono": ParagraphStyle("mono", fontName=FONT_MONO, fontSize=7.2, leading=9, textColor=INK),
    "caution": ParagraphStyle("caution", fontName=FONT, fontSize=8.5, leading=11,
                              textColor=INK, backColor=ACCENT_LIGHT, borderPadding=5,
                              spaceBefore=6, spaceAfter=8),
}


def table_style(*, header: bool = True, numeric_from: int | None = None) -> TableStyle:
    """Light rules, a tinted header row, numbers right-aligned from column ``numeric_from``."""
    cmds = [
        ("FONT", (0, 0), (-1, -1), FONT, 8),
        ("TEXTCOLOR", (0, 0), (-1, -1), INK),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.3, GRID),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
        ("LEFTPADDING", (0, 0), (-1, -1), 4),
        ("RIGHTPADDING", (0, 0), (-1, -1), 4),
    ]
    if header:
        cmds += [("FONT", (0, 0), (-1, 0), FONT_BOLD, 8), ("BACKGROUND", (0, 0), (-1, 0), ACCENT_LIGHT),
                 ("LINEBELOW", (0, 0), (-1, 0), 0.6, ACCENT)]
    if numeric_from is not None:
        cmds.append(("ALIGN", (numeric_from, 0), (-1, -1), "RIGHT"))
    return TableStyle(cmds)
