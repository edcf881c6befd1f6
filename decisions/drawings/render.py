"""Render the drawings: SVG text safe to inline in a page, and PDF flowables.

``to_svg`` runs reportlab's SVG renderer, then re-parses its output as XML and
writes it back without the XML declaration and DOCTYPE (not allowed inside
HTML), with the renderer's fixed element ids (``clip``, ``group``) made unique
per drawing so that two charts on one page do not share a clip path. Text goes
through the XML serializer, so ``<``, ``&`` and ``>`` in labels arrive escaped;
elements or attributes that could run script (``script``, ``foreignObject``,
``on*`` handlers, ``javascript:`` links) are refused outright, though reportlab
never writes them. Characters XML does not allow at all (C0 controls other than
tab, LF and CR; U+FFFE, U+FFFF; lone surrogates) are replaced by U+FFFD before
parsing: reportlab copies label text as it is, and one such character in a
stored title or name would otherwise make the XML unreadable and the page fail.
"""

from __future__ import annotations

import hashlib
import re
import xml.etree.ElementTree as ET

from reportlab.graphics import renderSVG
from reportlab.graphics.shapes import Drawing
from reportlab.platypus import Flowable

__all__ = ["to_svg", "to_pdf_flowable", "xml_safe", "UnsafeSvg", "XML_ILLEGAL"]

SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
ET.register_namespace("", SVG_NS)
ET.register_namespace("xlink", XLINK_NS)

_FORBIDDEN_TAGS = {"script", "foreignObject", "iframe", "object", "embed"}
#: Characters outside XML 1.0's ``Char`` production (W3C XML 1.0, section 2.2): C0
#: controls except tab, LF and CR; the surrogate range (only lone ones reach a str);
#: U+FFFE and U+FFFF.
XML_ILLEGAL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")
#: What stands in for such a character: the Unicode replacement character.
REPLACEMENT = "\ufffd"


def xml_safe(text: str) -> str:
    """``text`` with every character XML forbids replaced by U+FFFD."""
    return XML_ILLEGAL.sub(REPLACEMENT, text)


class UnsafeSvg(ValueError):
    """The SVG output holds something that must not be inlined in a page."""


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def to_svg(drawing: Drawing, *, id_prefix: str | None = None, title: str = "") -> str:
    """The drawing as an ``<svg>`` element, ready to inline in HTML.

    ``id_prefix`` makes element ids unique on the page (default: derived from the
    drawing's content, so the same drawing always yields the same text). ``title``
    becomes the SVG's accessible title.
    """
    # Stored data (a title, a name, a claimed state) must never make the page fail.
    raw = xml_safe(renderSVG.drawToString(drawing))
    # Our own renderer's output, with its prolog cut off: no DOCTYPE, hence no entity
    # declarations to expand (the attack S314 warns of). Malformed output raises here
    # rather than reaching a page.
    body = raw[raw.index("<svg"):]
    if "<!ENTITY" in body or "<!DOCTYPE" in body:
        raise UnsafeSvg("entity or DOCTYPE declarations are not allowed in inline SVG")
    root = ET.fromstring(body.encode("utf-8"))  # noqa: S314 (see above)
    prefix = id_prefix or "d" + hashlib.sha256(raw.encode("utf-8")).hexdigest()[:10]
    if not re.fullmatch(r"[A-Za-z][A-Za-z0-9_-]*", prefix):
        raise ValueError(f"id_prefix: must be a letter followed by letters, digits, _ or -, "
                         f"got {prefix!r}")
    ids = {}
    for el in root.iter():
        if _local(el.tag) in _FORBIDDEN_TAGS:
            raise UnsafeSvg(f"element <{_local(el.tag)}> is not allowed in inline SVG")
        for name, value in el.attrib.items():
            if _local(name).lower().startswith("on"):
                raise UnsafeSvg(f"attribute {_local(name)} is not allowed in inline SVG")
            if "javascript:" in value.replace(" ", "").lower():
                raise UnsafeSvg(f"attribute {_local(name)} holds a script link")
        if "id" in el.attrib:
            ids[el.attrib["id"]] = f"{prefix}-{el.attrib['id']}"
            el.attrib["id"] = ids[el.attrib["id"]]
    for el in root.iter():
        for name, value in list(el.attrib.items()):
            for old, new in ids.items():
                if f"url(#{old})" in value or value == f"#{old}":
                    value = value.replace(f"url(#{old})", f"url(#{new})")
                    value = f"#{new}" if value == f"#{old}" else value
            el.attrib[name] = value
        style = el.attrib.get("style", "")
        if "font-family: Helvetica" in style:
            # reportlab names the PDF font; browsers need a family list and a weight.
            style = style.replace("font-family: Helvetica-Bold;",
                                  "font-family: Helvetica, Arial, sans-serif; font-weight: bold;")
            style = style.replace("font-family: Helvetica;",
                                  "font-family: Helvetica, Arial, sans-serif;")
            el.attrib["style"] = style
        if _local(el.tag) == "title":
            el.text = xml_safe(title)
        elif _local(el.tag) == "desc":
            el.text = ""
    root.set("role", "img")
    return ET.tostring(root, encoding="unicode")


class _ScaledDrawing(Flowable):
    """A drawing scaled down (never up) to the width the frame offers."""

    def __init__(self, drawing: Drawing, max_width: float | None, h_align: str, draw: bool):
        super().__init__()
        self.drawing, self.max_width, self.hAlign = drawing, max_width, h_align
        self.scale = 1.0
        self.enabled = draw

    def wrap(self, avail_width, avail_height):
        limit = min(avail_width, self.max_width or avail_width)
        self.scale = min(1.0, limit / self.drawing.width) if self.drawing.width else 1.0
        self.width = self.drawing.width * self.scale
        self.height = self.drawing.height * self.scale
        return self.width, self.height

    def draw(self):
        if not self.enabled:
            return
        self.canv.saveState()
        self.canv.scale(self.scale, self.scale)
        self.drawing.drawOn(self.canv, 0, 0)
        self.canv.restoreState()


def to_pdf_flowable(drawing: Drawing, *, max_width: float | None = None,
                    h_align: str = "LEFT", draw: bool = True) -> Flowable:
    """A platypus flowable of the drawing, shrunk to fit the frame's width if needed.

    ``draw=False`` keeps its size but paints nothing: a trial layout that only
    needs to know where things land need not pay for rendering them.
    """
    return _ScaledDrawing(drawing, max_width, h_align, draw)
