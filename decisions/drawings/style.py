"""Palette, fonts and text helpers shared by the tree, the charts and the memo.

The palette is our own: a deep slate for text and the plan in force, a teal
accent for the recommended path, a warm amber for warnings and break-even
marks, and light greys for what the plan leaves aside. Every text colour has a
contrast ratio of at least 4.5:1 on white (WCAG 2.1, success criterion 1.4.3).
"""

from __future__ import annotations

import unicodedata
from functools import lru_cache

from reportlab.lib.colors import HexColor
from reportlab.pdfbase.pdfmetrics import stringWidth

__all__ = [
    "INK", "MUTED", "ACCENT", "ACCENT_LIGHT", "WARM", "PRUNED", "GRID", "PAPER", "NEGATIVE",
    "FONT", "FONT_BOLD", "FONT_MONO",
    "pdf_safe", "text_width", "fit_text", "money", "amount", "pct", "prob",
]

INK = HexColor("#1f2a36")          # body text, axes
MUTED = HexColor("#5b6672")        # secondary text (contrast 5.9:1)
ACCENT = HexColor("#0b6e72")       # recommended path, chart series (contrast 6.1:1)
ACCENT_LIGHT = HexColor("#cfe7e6")  # fills behind the accent
WARM = HexColor("#a4540a")         # break-even marks, expected-value markers (contrast 5.3:1)
NEGATIVE = HexColor("#9c2f3a")     # losses, bars below the base value
PRUNED = HexColor("#9aa3ac")       # pruned branches and off-plan subtrees (lines only)
GRID = HexColor("#e3e7eb")         # grid lines, table rules
PAPER = HexColor("#ffffff")

# reportlab's standard Type 1 fonts: no font files to ship, same bytes everywhere.
FONT = "Helvetica"
FONT_BOLD = "Helvetica-Bold"
FONT_MONO = "Courier"

# Letters the standard fonts cannot show and NFKD does not decompose.
_FALLBACK = {"Ł": "L", "ł": "l", "Đ": "D", "đ": "d", "Ħ": "H", "ħ": "h", "ı": "i",
             "Ŧ": "T", "ŧ": "t", "ĸ": "k", "ŀ": "l", "Ŀ": "L", "−": "-", "→": "->",
             "≤": "<=", "≥": ">=", "≈": "~"}


def _encodable(ch: str) -> bool:
    try:
        ch.encode("cp1252")
    except UnicodeEncodeError:
        return False
    return True


def pdf_safe(text) -> str:
    """``text`` with every character the standard PDF fonts can show.

    The standard fonts cover Windows-1252. Other characters become their base
    letter when one exists (``ő`` -> ``o``, ``Ł`` -> ``L``), otherwise their code
    point in brackets (``张`` -> ``[U+5F20]``), so a name is never lost to a
    blank box and the substitution is visible.
    """
    text = str(text)
    try:  # the common case, one encode instead of one per character
        text.encode("cp1252")
    except UnicodeEncodeError:
        pass
    else:
        return text
    out = []
    for ch in text:
        if _encodable(ch):
            out.append(ch)
            continue
        if ch in _FALLBACK:
            out.append(_FALLBACK[ch])
            continue
        base = "".join(c for c in unicodedata.normalize("NFKD", ch)
                       if not unicodedata.combining(c))
        if base and all(_encodable(c) for c in base):
            out.append(base)
        else:
            out.append(f"[U+{ord(ch):04X}]")
    return "".join(out)


# A tree drawing measures the same short texts ("p 0.5", labels, values) thousands of
# times, once to fit them and once more to box them: the widths are pure functions of
# their arguments, so they are remembered (bounded, a few hundred KiB at most).
@lru_cache(maxsize=8192)
def text_width(text: str, size: float, font: str = FONT) -> float:
    return stringWidth(text, font, size)


@lru_cache(maxsize=4096)
def fit_text(text: str, width: float, size: float, font: str = FONT) -> str:
    """``text`` shortened with an ellipsis so that it fits ``width`` points."""
    text = pdf_safe(text)
    if text_width(text, size, font) <= width:
        return text
    ell = "…"
    lo, hi = 0, len(text)
    while lo < hi:  # longest prefix that fits with the ellipsis
        mid = (lo + hi + 1) // 2
        if text_width(text[:mid].rstrip() + ell, size, font) <= width:
            lo = mid
        else:
            hi = mid - 1
    return (text[:lo].rstrip() + ell) if lo else ""


def money(value, currency: str = "") -> str:
    """An amount to the cent with thousands separators, as the API's figures read."""
    if value is None:
        return "n/a"
    return f"{float(value):,.2f} {currency}".strip()


def amount(value) -> str:
    """A whole-unit amount for tight places (tree labels, axis ticks)."""
    if value is None:
        return "n/a"
    v = round(float(value))
    return f"{v:,}" if v != 0 else "0"


def pct(value, digits: int = 1) -> str:
    return "n/a" if value is None else f"{float(value) * 100:.{digits}f}%"


def prob(value) -> str:
    return "n/a" if value is None else f"{float(value):.4f}"
