"""Build the decision memo PDF from a plain dict (no database, no clock).

``memo_data`` (assembled by ``decisions.services.memo``; every key but
``decision``, ``version``, ``results`` and ``generated_at`` may be missing)::

    {"decision": {"id", "title", "team", "status"},
     "version": {"number", "content_sha256", "results_sha256", "created_at", "author",
                 "change_note"},
     "generated_at": "2026-12-01T18:00:00+00:00",     # printed; the only varying input
     "audit_head": {"seq", "hash"},                    # latest audit event at generation
     "document": {...},                                # the model document of the version
     "results": {...},                                 # the result document stored with it
     "strategy": {"recommended", "plan", "justification", "value_given_up", "chosen_by",
                  "chosen_at"},
     "signoffs": [{"printed_name", "role", "meaning", "signed_at", "bound_sha256", "reason"}],
     "policy": {"roles": {role: {"required", "signed", "signers"}}, "met"},
     "sensitivity": {"tornado": [...], "one_way": [...], "note"},   # valuation.sensitivity
     "sources": [{"study", "name", "calibration": valuation.reliability.calibrate(...)}],
     "outcomes": {"rows": [{"label", "expected", "realised", "regret"?}], "regret"?, "note"?}}

Determinism: the PDF is written in reportlab's invariant mode (fixed document ID
and dates), the generation time appears in the text only, and nothing depends
on dict order beyond the inputs' own order, so equal inputs give equal bytes.
"""

from __future__ import annotations

import io

from reportlab.lib.pagesizes import A4
from reportlab.lib.utils import simpleSplit
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Frame, PageTemplate
from reportlab.platypus.doctemplate import BaseDocTemplate

from decisions.drawings.style import FONT, MUTED, pdf_safe
from decisions.memo import sections
from decisions.memo.styles import CAUTION, MARGIN

__all__ = ["build_memo", "CAUTION"]

FOOTER_HEIGHT = 40.0


class _NumberedCanvas(Canvas):
    """Holds every page until the end so each footer can say "page N of M"."""

    footer_note = ""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._pages: list[dict] = []

    def showPage(self):  # reportlab's method name
        self._pages.append(dict(self.__dict__))
        self._startPage()

    def save(self):
        total = len(self._pages)
        for number, state in enumerate(self._pages, start=1):
            self.__dict__.update(state)
            self._footer(number, total)
            super().showPage()
        super().save()

    def _footer(self, number: int, total: int) -> None:
        width, _ = self._pagesize
        self.saveState()
        self.setStrokeColor(MUTED)
        self.setLineWidth(0.4)
        self.line(MARGIN, FOOTER_HEIGHT, width - MARGIN, FOOTER_HEIGHT)
        self.setFillColor(MUTED)
        self.setFont(FONT, 6.8)
        for k, line in enumerate(simpleSplit(CAUTION, FONT, 6.8, width - 2 * MARGIN)[:2]):
            self.drawString(MARGIN, FOOTER_HEIGHT - 10 - 8 * k, line)
        self.drawString(MARGIN, FOOTER_HEIGHT - 28, self.footer_note)
        self.setFont(FONT, 8)
        self.drawRightString(width - MARGIN, FOOTER_HEIGHT - 28, f"page {number} of {total}")
        self.restoreState()


def _template(buf, memo_data: dict) -> BaseDocTemplate:
    decision, version = memo_data["decision"], memo_data["version"]
    doc = BaseDocTemplate(
        buf, pagesize=A4, leftMargin=MARGIN, rightMargin=MARGIN, topMargin=MARGIN,
        bottomMargin=FOOTER_HEIGHT + 12, invariant=1,
        title=pdf_safe(f"Decision memo: {decision['title']} (version {version['number']})"),
        author=pdf_safe(decision.get("team", "")), subject="Decision memo",
        creator="decision register",
    )
    frame = Frame(doc.leftMargin, doc.bottomMargin, doc.width, doc.height, id="body",
                  leftPadding=0, rightPadding=0, topPadding=0, bottomPadding=0)
    doc.addPageTemplates([PageTemplate(id="memo", frames=[frame])])
    return doc


def _tree_pages(memo_data: dict) -> dict[int, int]:
    """Page of each tree part, from a trial layout of the sections up to the tree.

    Nothing before the tree depends on the pages, and the parts' sizes do not either,
    so the real build puts every part on the page found here. The trial paints
    nothing (the costly part) and is skipped when the tree fits one part.
    """
    doc = _template(io.BytesIO(), memo_data)
    w, h = doc.width, doc.height
    tree = sections.tree_section(memo_data, w, h, draw=False)
    if sum(1 for f in tree if getattr(f, "tree_part", None)) < 2:
        return {}
    pages: dict[int, int] = {}

    def after(flowable):
        number = getattr(flowable, "tree_part", None)
        if number is not None:
            pages.setdefault(number, doc.page)

    doc.afterFlowable = after
    doc.build([*sections.title_block(memo_data, w), *sections.summary(memo_data, w), *tree])
    return pages


def build_memo(memo_data: dict) -> bytes:
    """The memo of one model version as PDF bytes (see the module docstring for the input)."""
    decision, version = memo_data["decision"], memo_data["version"]
    buf = io.BytesIO()
    doc = _template(buf, memo_data)
    story = sections.story(memo_data, frame_width=doc.width, frame_height=doc.height,
                           tree_pages=_tree_pages(memo_data))
    note = pdf_safe(f"Decision {decision.get('id', '')} · version {version['number']} · "
                    f"SHA-256 {version['content_sha256']}")

    class _Canvas(_NumberedCanvas):
        footer_note = note

    doc.build(story, canvasmaker=_Canvas)
    return buf.getvalue()
