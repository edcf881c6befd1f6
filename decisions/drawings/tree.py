"""The decision tree as vector drawings: laid out by leaf order, split into page-sized parts.

Layout
------
Columns by depth, rows by leaf order (each leaf, continuation marker or
collapsed stub owns one row; a decision or chance node sits halfway between its
first and last child). Branches are elbows: a stub right of the parent, a
vertical run at the parent's connector, a horizontal run into the child. Each
branch writes its label above its horizontal run and its probability and cash
flow below it; decision and chance nodes write their value on a second line
below; end nodes write their payoff to their right.

Why nothing overlaps: every text of a node lies inside its own row band
(``ROW_TOP`` above and ``ROW_BOTTOM`` below the node's y) and inside its own
column span (from the parent's connector to the node; rightwards for texts of
nodes without drawn children). Two nodes of one column belong to disjoint leaf
ranges, so their y differ by at least one row; a node of a deeper column lies in
another leaf range, so its row is never the row of a shallower node's right
text. Row height is ``ROW_TOP + ROW_BOTTOM`` or more. The boxes of every symbol
and text are returned with each part so tests can check the claim.

Large trees
-----------
A part holds at most as many rows and columns as fit the frame. When a subtree
does not fit, the biggest subtree that would fit a page on its own is cut off
and drawn as a later part; the cut node shows "continued in part N" and the
part it opens on repeats the incoming branch with "from part M" (with ", p. P",
the page, when the caller knows where the parts land). A node with
more children than rows spreads its children over several parts. Above
``collapse_over`` nodes, branches pruned at decision nodes are drawn as one
stub each stating how many nodes it stands for; parts beyond ``max_parts`` are
not drawn (the marker says so). The caption of each part states the rule.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from reportlab.graphics.shapes import Circle, Drawing, Line, Polygon, PolyLine, Rect, String

from decisions.drawings.style import (
    ACCENT,
    ACCENT_LIGHT,
    FONT,
    FONT_BOLD,
    INK,
    MUTED,
    PAPER,
    PRUNED,
    WARM,
    amount,
    fit_text,
    pdf_safe,
    text_width,
)
from decisions.drawings.tree_split import Branch, Node, Plan, build, in_order, shown_children, split

__all__ = ["TreePart", "tree_parts", "tree_drawings", "tree_legend",
           "ROW_HEIGHT", "FONT_SIZE"]

FONT_SIZE = 7.0
LINE = FONT_SIZE + 1.5
ROW_TOP = 9.0        # texts of a node reach at most this far above its y
ROW_BOTTOM = 18.5    # ... and this far below it
ROW_HEIGHT = ROW_TOP + ROW_BOTTOM + 1.0
R = 4.5              # half size of a node symbol
STUB = 7.0           # parent symbol to its connector
MIN_COLUMN = 70.0    # narrower columns make labels unreadable: cut the tree into parts instead
MAX_COLUMN = 150.0
END_TEXT = 120.0    # room kept right of the deepest column for payoffs and markers
LEFT = 4.0
TOP_PAD = 4.0
PRUNE_MARK = 9.0     # room for the double-stroke mark at the start of a pruned branch
ASCENT, DESCENT = 0.72 * FONT_SIZE, 0.21 * FONT_SIZE


@dataclass
class TreePart:
    """One page-sized piece of the tree.

    ``drawing`` is the reportlab Drawing; ``boxes`` lists ``(x0, y0, x1, y1, what)``
    for every symbol and text drawn (in drawing coordinates); ``caption`` explains
    what the part shows and the rule used to split or collapse the tree.
    """

    number: int
    root: str
    drawing: Drawing
    boxes: list
    caption: str
    from_part: int | None = None


# ---- drawing one part -----------------------------------------------------------------------

class _Canvas:
    """Collects shapes and the boxes of what they cover."""

    def __init__(self, width: float, height: float):
        self.drawing = Drawing(width, height)
        self.boxes: list[tuple[float, float, float, float, str]] = []
        self.lines: list[tuple[int, Any]] = []   # (layer, shape): pruned below, plan above

    def text(self, x, y, text, *, size=FONT_SIZE, font=FONT, color=INK, what="text"):
        if not text:
            return
        w = text_width(text, size, font)
        self.drawing.add(String(x, y, text, fontName=font, fontSize=size, fillColor=color))
        self.boxes.append((x, y - DESCENT, x + w, y + ASCENT, what))

    def line(self, layer, shape):
        self.lines.append((layer, shape))

    def finish(self) -> Drawing:
        # Lines first (pruned, then plain, then the plan on top), symbols and text over them.
        shapes = list(self.drawing.contents)
        self.drawing.contents = []
        for _, shape in sorted(self.lines, key=lambda item: item[0]):
            self.drawing.add(shape)
        for shape in shapes:
            self.drawing.add(shape)
        return self.drawing


def _branch_style(branch: Branch | None, child: Node) -> tuple[Any, float, int]:
    if not child.on_plan:
        return PRUNED, 0.8, 0
    if branch is not None and branch.best:
        return ACCENT, 2.2, 2
    return INK, 0.9, 1


def _symbol(cv: _Canvas, node: Node, x: float, y: float) -> None:
    stroke = INK if node.on_plan else PRUNED
    if node.kind == "decision":
        shape = Rect(x - R, y - R, 2 * R, 2 * R, strokeColor=stroke, strokeWidth=1,
                     fillColor=ACCENT_LIGHT if node.on_plan else PAPER)
    elif node.kind == "chance":
        shape = Circle(x, y, R, strokeColor=stroke, strokeWidth=1, fillColor=PAPER)
    elif node.kind == "ref":
        shape = Rect(x - R, y - R / 2, 2 * R, R, strokeColor=stroke, strokeWidth=0.8,
                     fillColor=PAPER)
    else:  # end: a triangle pointing back at its branch
        shape = Polygon([x - R, y, x + R, y + R, x + R, y - R], strokeColor=stroke,
                        strokeWidth=0.8, fillColor=stroke)
    cv.drawing.add(shape)
    cv.boxes.append((x - R, y - R, x + R, y + R, f"node {node.id}"))


def _value_text(node: Node) -> str:
    return "" if node.value is None else f"value {amount(node.value)}"


def _ref(part: int, pages: dict[int, int] | None) -> str:
    """"part 3", or "part 3, p. 7" when the page of each part is known."""
    page = (pages or {}).get(part)
    return f"part {part}" + (f", p. {page}" if page else "")


def _right_text(node: Node, plan: Plan, value_word: str,
                pages: dict[int, int] | None = None) -> tuple[str, Any, str]:
    """What a node without drawn children writes to its right: text, colour, font."""
    if id(node) in plan.cut:
        target = plan.cut[id(node)]
        if target:
            return f"continued in {_ref(target, pages)} »", ACCENT, FONT_BOLD
        return "not drawn: part limit reached", WARM, FONT_BOLD
    if id(node) in plan.collapsed:
        return f"pruned: {node.size - 1:,} nodes below not drawn", MUTED, FONT
    if node.kind == "ref":
        return f"same node as '{pdf_safe(node.id)}' (drawn once)", MUTED, FONT
    if node.kind == "end":
        text = amount(node.payoff)
        if node.value is not None and node.payoff is not None \
                and round(node.value) != round(float(node.payoff)):
            text += f"  ({value_word} {amount(node.value)})"
        return text, INK if node.on_plan else MUTED, FONT
    return "", INK, FONT


def _draw_part(plan: Plan, plans_total: int, width: float, rule: str,
               value_word: str, pages: dict[int, int] | None, layout_only: bool = False) -> TreePart:
    r = plan.root
    ordered = in_order(plan)
    depth = {id(r): 0}
    parent_of: dict[int, Node] = {}
    for node, _ in [(r, None), *ordered]:
        for _, child in shown_children(node, plan):
            depth[id(child)] = depth[id(node)] + 1
            parent_of[id(child)] = node
    # Column 0 holds the root's stub: its name (or incoming branch) and value.
    columns = 1 + max([depth[id(n)] for n, _ in ordered] or [0])
    # Room right of the deepest column: what its nodes write there, up to END_TEXT.
    deepest = [n for n, _ in ordered if depth[id(n)] == columns - 1] or [r]
    need = max(text_width(_right_text(n, plan, value_word, pages)[0], FONT_SIZE, FONT_BOLD)
               for n in deepest) + R + 6
    col = min(MAX_COLUMN, (width - LEFT - min(END_TEXT, need)) / columns)
    leaves = [n for n, _ in ordered if not shown_children(n, plan)] or [r]
    n_rows = len(leaves) + (1 if plan.more_part is not None else 0)
    # A continued part writes "from part N" one line above its root's stub.
    top_pad = TOP_PAD + (LINE if plan.from_part else 0)
    height = top_pad + TOP_PAD + n_rows * ROW_HEIGHT
    cv = _Canvas(width, height)
    if layout_only:
        # The memo's trial layout reads only each part's size and caption: the shapes and
        # their text measurements would be built and thrown away (half the tree's cost).
        return TreePart(number=plan.number, root=r.id, drawing=cv.drawing, boxes=[],
                        caption=_caption(plan, plans_total, rule), from_part=plan.from_part)

    def row_y(i: int) -> float:
        # the band [y - ROW_BOTTOM, y + ROW_TOP] centred in the row
        return height - top_pad - i * ROW_HEIGHT - ROW_TOP - (ROW_HEIGHT - ROW_TOP - ROW_BOTTOM) / 2

    ys: dict[int, float] = {id(leaf): row_y(i) for i, leaf in enumerate(leaves)}
    for node, _ in [*reversed(ordered), (r, None)]:
        kids = shown_children(node, plan)
        if kids:
            ys[id(node)] = (ys[id(kids[0][1])] + ys[id(kids[-1][1])]) / 2

    def x_of(node: Node) -> float:
        return LEFT + (depth[id(node)] + 1) * col

    def texts_on_branch(xa: float, node: Node, branch: Branch | None, *, title: str = "",
                        note: str = ""):
        """Label above the branch, figures and value below; ``note`` above the label
        (only the root's stub has one, and column 0 holds nothing else)."""
        x, y = x_of(node), ys[id(node)]
        start = xa + 3 + (PRUNE_MARK if branch is not None and branch.pruned else 0)
        room = x - R - 2 - start
        color = INK if node.on_plan else MUTED
        font = FONT_BOLD if branch is not None and branch.best else FONT
        label = branch.label if branch is not None else title
        cv.text(start, y + 2.5, fit_text(label, room, FONT_SIZE, font), font=font, color=color,
                what=f"label {node.id}")
        bits = []
        if branch is not None and branch.probability is not None:
            bits.append(f"p {float(branch.probability):.4g}")
        if branch is not None and branch.cash_flow:
            bits.append(f"cash {amount(branch.cash_flow)}")
        if note:
            cv.text(start, y + 2.5 + LINE, fit_text(note, room, FONT_SIZE), color=ACCENT,
                    what=f"note {node.id}")
        cv.text(start, y - 2.5 - ASCENT, fit_text("  ".join(bits), room, FONT_SIZE),
                color=color, what=f"figures {node.id}")
        if node.kind in ("decision", "chance"):
            cv.text(start, y - 2.5 - ASCENT - LINE, fit_text(_value_text(node), room, FONT_SIZE),
                    color=color, what=f"value {node.id}")
        if branch is not None and branch.pruned:
            # the double stroke that marks a branch pruned at its decision node
            for dx in (0.0, 3.0):
                cv.drawing.add(Line(xa + 3 + dx, y - 3, xa + 6 + dx, y + 3,
                                    strokeColor=WARM, strokeWidth=0.9))
            cv.boxes.append((xa + 3, y - 3, xa + 9, y + 3, f"prune mark {node.id}"))

    def right_text(node: Node, text: str, color=INK, font=FONT):
        x, y = x_of(node), ys[id(node)]
        start = x + R + 3
        cv.text(start, y - ASCENT / 2 + 0.5, fit_text(text, width - 2 - start, FONT_SIZE, font),
                color=color, font=font, what=f"right {node.id}")

    # the root's stub: the incoming branch of a continued part, else the root's name
    x, y = x_of(r), ys[id(r)]
    color, w, layer = _branch_style(plan.incoming, r)
    cv.line(layer, Line(LEFT, y, x - R, y, strokeColor=color, strokeWidth=w))
    texts_on_branch(LEFT, r, plan.incoming, title=r.name,
                    note=f"from {_ref(plan.from_part, pages)}" if plan.from_part else "")
    for node, branch in [(r, None), *ordered]:
        x, y = x_of(node), ys[id(node)]
        _symbol(cv, node, x, y)
        if node is not r:
            parent = parent_of[id(node)]
            xp, yp = x_of(parent), ys[id(parent)]
            xa = xp + R + STUB
            color, w, layer = _branch_style(branch, node)
            cv.line(layer, PolyLine([xp + R, yp, xa, yp, xa, y, x - R, y], strokeColor=color,
                                    strokeWidth=w))
            texts_on_branch(xa, node, branch)
        if shown_children(node, plan):
            continue
        text, colour, font = _right_text(node, plan, value_word, pages)
        right_text(node, text, color=colour, font=font)
    if plan.more_part is not None:
        y = row_y(n_rows - 1)
        first = plan.last + 1
        text = (f"branches {first}–{len(r.children)} of '{pdf_safe(r.name)}' continue in "
                f"{_ref(plan.more_part, pages)} »" if plan.more_part
                else f"branches {first}–{len(r.children)} not drawn: part limit reached")
        start = x_of(r) + R + STUB + 3
        cv.text(start, y - ASCENT / 2, fit_text(text, width - 2 - start, FONT_SIZE, FONT_BOLD),
                font=FONT_BOLD, color=ACCENT if plan.more_part else WARM, what="more branches")
    drawing = cv.finish()
    return TreePart(number=plan.number, root=r.id, drawing=drawing, boxes=cv.boxes,
                    caption=_caption(plan, plans_total, rule), from_part=plan.from_part)


def _caption(plan: Plan, plans_total: int, rule: str) -> str:
    r = plan.root
    where = f"from '{pdf_safe(r.name)}'"
    if plan.first or plan.last < len(r.children):
        where += f", branches {plan.first + 1}–{plan.last}"
    caption = f"Part {plan.number} of {plans_total}: the tree {where}"
    if plan.from_part:
        caption += f", continued from part {plan.from_part}"
    return caption + f". {rule}"


def tree_parts(tree_doc: dict, details: dict | None = None, *, width: float = 480.0,
               height: float = 640.0, collapse_over: int = 600,
               max_parts: int = 60, pages: dict[int, int] | None = None,
               layout_only: bool = False) -> list[TreePart]:
    """Lay out and draw a general tree document as parts that each fit ``width`` x ``height``.

    Parameters
    ----------
    tree_doc : dict
        A general tree document (``valuation.expand(doc)`` for a payoff table).
    details : dict, optional
        The result document's ``nodes`` (value, best branch and pruned branches of each
        node); without it the tree is drawn without values and plan marks.
    width, height : float
        The frame each part must fit, in points.
    collapse_over : int
        Above this many nodes, subtrees behind pruned branches are drawn as one stub each.
    max_parts : int
        Parts beyond this number are not drawn; their markers say so.
    pages : dict, optional
        ``{part number: page}`` once the caller knows where each part lands; the
        markers then name the page too. Sizes do not depend on it, so a second
        layout with the pages lands every part on the same page as the first.
    layout_only : bool
        Give each part its size, caption and number but an empty drawing (no shapes,
        no boxes): for a trial layout that only needs to know where the parts land.
    """
    details = details or {}
    root, n_nodes = build(tree_doc, details)
    collapse = n_nodes > collapse_over
    max_rows = max(2, int((height - 2 * TOP_PAD - LINE) // ROW_HEIGHT))  # LINE: "from part"
    max_depth = max(1, int((width - LEFT - END_TEXT) // MIN_COLUMN) - 1)  # column 0: the stub
    plans = split(root, max_rows, max_depth, collapse, max_parts)
    rule = ("Bold teal: the recommended branch at each decision; grey with a double stroke: "
            "pruned branches. Amounts are in whole units")
    currency = tree_doc.get("currency")
    rule += f" of {pdf_safe(currency)}." if currency else "."
    if len(plans) > 1:
        rule += (f" The tree is split into parts of at most {max_rows} rows and "
                 f"{max_depth} levels; a cut subtree continues in the part named at its node.")
    if collapse:
        rule += (f" With {n_nodes:,} nodes (more than {collapse_over:,}), each subtree behind "
                 f"a pruned branch is drawn as one stub.")
    # End nodes show their payoff and, when discounting changes it, the value it adds.
    value_word = "PV" if tree_doc.get("discount_rate") else "value"
    return [_draw_part(p, len(plans), width, rule, value_word, pages, layout_only) for p in plans]


def tree_drawings(tree_doc: dict, details: dict | None = None, **kwargs) -> list[Drawing]:
    """The drawings of :func:`tree_parts`, in part order."""
    return [p.drawing for p in tree_parts(tree_doc, details, **kwargs)]


def tree_legend(width: float = 480.0) -> Drawing:
    """A one-line key to the symbols and line styles of the tree drawings."""
    d = Drawing(width, 16)
    y = 8
    x = 6
    items = [("decision", "decision"), ("chance", "chance"), ("end", "end"),
             ("best", "recommended branch"), ("pruned", "pruned branch")]
    for kind, text in items:
        if kind == "decision":
            d.add(Rect(x - R, y - R, 2 * R, 2 * R, strokeColor=INK, fillColor=ACCENT_LIGHT))
        elif kind == "chance":
            d.add(Circle(x, y, R, strokeColor=INK, fillColor=PAPER))
        elif kind == "end":
            d.add(Polygon([x - R, y, x + R, y + R, x + R, y - R], strokeColor=INK, fillColor=INK))
        elif kind == "best":
            d.add(Line(x - 8, y, x + 8, y, strokeColor=ACCENT, strokeWidth=2.2))
        else:
            d.add(Line(x - 8, y, x + 8, y, strokeColor=PRUNED, strokeWidth=0.8))
            for dx in (-2.0, 1.0):
                d.add(Line(x + dx, y - 3, x + dx + 3, y + 3, strokeColor=WARM, strokeWidth=0.9))
        d.add(String(x + 12, y - 2.5, text, fontName=FONT, fontSize=FONT_SIZE, fillColor=INK))
        x += 12 + text_width(text, FONT_SIZE) + 22
    return d
