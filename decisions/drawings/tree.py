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

from collections import deque
from dataclasses import dataclass, field
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
class _Node:
    id: str
    kind: str                 # decision | chance | end | ref (a node reached twice)
    name: str
    payoff: float | None = None
    value: float | None = None
    best: str | None = None
    pruned: frozenset = frozenset()
    children: list = field(default_factory=list)   # [(_Branch, _Node)]
    on_plan: bool = True
    size: int = 1             # nodes in the subtree (itself included)
    height: int = 0           # levels below the node (0 for an end node)


@dataclass
class _Branch:
    label: str
    probability: float | None
    cash_flow: float | None
    best: bool
    pruned: bool


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


# ---- reading the documents ------------------------------------------------------------------

def _build(tree_doc: dict, details: dict) -> tuple[_Node, int]:
    by_id = {n["id"]: n for n in tree_doc.get("nodes", [])}
    made: dict[str, _Node] = {}

    def make(node_id: str) -> _Node:
        raw = by_id[node_id]
        d = details.get(node_id) or {}
        node = _Node(
            id=node_id, kind=raw.get("kind", "end"),
            name=str(raw.get("name") or d.get("name") or node_id),
            payoff=raw.get("payoff"), value=d.get("value"), best=d.get("best_branch"),
            pruned=frozenset(d.get("pruned") or ()),
        )
        made[node_id] = node
        return node

    root = make(tree_doc["root"])
    stack = [root]
    while stack:  # iterative: trees may be hundreds of levels deep
        node = stack.pop()
        for br in by_id[node.id].get("branches", []) if node.kind != "ref" else []:
            label = str(br.get("label", ""))
            branch = _Branch(label=label, probability=br.get("probability"),
                             cash_flow=br.get("cash_flow"),
                             best=node.kind == "decision" and node.best == label,
                             pruned=label in node.pruned)
            child_id = br["to"]
            if child_id in made:  # reached twice: draw a reference, not the subtree again
                child = _Node(id=child_id, kind="ref", name=made[child_id].name)
            else:
                child = make(child_id)
                stack.append(child)
            node.children.append((branch, child))
    # plan membership and subtree sizes, parents before children
    order = [root]
    for node in order:
        for branch, child in node.children:
            child.on_plan = node.on_plan and not branch.pruned
            order.append(child)
    for node in reversed(order):
        node.size = 1 + sum(c.size for _, c in node.children)
        node.height = 1 + max((c.height for _, c in node.children), default=-1)
    return root, len(order)


# ---- splitting into parts -----------------------------------------------------------------

@dataclass
class _Plan:
    """What one part draws. Cut and collapsed nodes are keyed by object identity: a
    reference to a node reached twice carries the same id as the node itself."""

    root: _Node
    incoming: _Branch | None
    from_part: int | None
    first: int = 0             # children of the root shown: [first, last)
    last: int = 0
    cut: dict = field(default_factory=dict)        # id(node) -> part number (0: not drawn)
    collapsed: set = field(default_factory=set)    # id(node) drawn as a pruned stub
    more_part: int | None = None                   # part continuing the root's children
    number: int = 0


def _kids(node: _Node, plan: _Plan) -> list:
    if id(node) in plan.cut or id(node) in plan.collapsed:
        return []
    if node is plan.root:
        return node.children[plan.first:plan.last]
    return node.children


def _in_order(plan: _Plan) -> list:
    """Visible nodes below the part's root in drawing order, with their incoming branch."""
    out = []
    stack = [(c, b) for b, c in reversed(_kids(plan.root, plan))]
    while stack:
        node, branch = stack.pop()
        out.append((node, branch))
        stack.extend((c, b) for b, c in reversed(_kids(node, plan)))
    return out


def _row_counts(plan: _Plan) -> dict[int, int]:
    """Rows each visible node's subtree takes in the part (one per drawn leaf)."""
    ordered = _in_order(plan)
    rows: dict[int, int] = {}
    for node, _ in reversed(ordered):
        kids = _kids(node, plan)
        rows[id(node)] = sum(rows[id(c)] for _, c in kids) if kids else 1
    kids = _kids(plan.root, plan)
    rows[id(plan.root)] = sum(rows[id(c)] for _, c in kids) if kids else 1
    return rows


def _split(root: _Node, max_rows: int, max_depth: int, collapse: bool,
           max_parts: int) -> list[_Plan]:
    plans: list[_Plan] = []
    queue: deque[_Plan] = deque([_Plan(root=root, incoming=None, from_part=None, number=1)])
    next_number = 2
    while queue:
        plan = queue.popleft()
        plans.append(plan)
        r = plan.root
        # The root's children: as many as leave a row for the "more branches" marker.
        plan.last = len(r.children)
        if plan.last - plan.first > max_rows:
            plan.last = plan.first + max_rows - 1
        # Collapse pruned subtrees (big trees only). A subtree too deep for the rest of
        # this part is cut off where it would fit a part of its own (so later parts
        # are full and few, rather than many stubs at the depth limit); a subtree too
        # deep even for that goes on down, and is cut at the limit at the latest.
        depth_of = {id(r): 0}
        walk = [r]
        inner: list[_Node] = []
        while walk:
            node = walk.pop()
            for branch, child in _kids(node, plan):
                depth_of[id(child)] = depth_of[id(node)] + 1
                if not child.children:
                    continue
                if collapse and branch.pruned:
                    plan.collapsed.add(id(child))
                elif depth_of[id(child)] + child.height > max_depth and (
                        child.height <= max_depth or depth_of[id(child)] >= max_depth):
                    plan.cut[id(child)] = -1
                else:
                    inner.append(child)
                    walk.append(child)
        # Cut subtrees until the rows fit: the biggest one that fits a page on its
        # own (fewest parts), else the biggest of all.
        while True:
            rows = _row_counts(plan)
            if rows[id(r)] <= max_rows:
                break
            sizes = [(n, rows[id(n)]) for n in inner
                     if id(n) in rows and id(n) not in plan.cut and rows[id(n)] > 1]
            if not sizes:
                break
            fitting = [(n, k) for n, k in sizes if k <= max_rows]
            node, _ = max(fitting or sizes, key=lambda item: item[1])
            plan.cut[id(node)] = -1
        # Number the parts opened here in reading order (depth-first, top to bottom).
        for node, branch in _in_order(plan):
            if plan.cut.get(id(node)) != -1:
                continue
            if next_number > max_parts:
                plan.cut[id(node)] = 0
                continue
            plan.cut[id(node)] = next_number
            queue.append(_Plan(root=node, incoming=branch, from_part=plan.number,
                               number=next_number))
            next_number += 1
        if plan.last < len(r.children):
            if next_number > max_parts:
                plan.more_part = 0
            else:
                plan.more_part = next_number
                queue.append(_Plan(root=r, incoming=plan.incoming, from_part=plan.number,
                                   first=plan.last, number=next_number))
                next_number += 1
    return plans


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


def _branch_style(branch: _Branch | None, child: _Node) -> tuple[Any, float, int]:
    if not child.on_plan:
        return PRUNED, 0.8, 0
    if branch is not None and branch.best:
        return ACCENT, 2.2, 2
    return INK, 0.9, 1


def _symbol(cv: _Canvas, node: _Node, x: float, y: float) -> None:
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


def _value_text(node: _Node) -> str:
    return "" if node.value is None else f"value {amount(node.value)}"


def _ref(part: int, pages: dict[int, int] | None) -> str:
    """"part 3", or "part 3, p. 7" when the page of each part is known."""
    page = (pages or {}).get(part)
    return f"part {part}" + (f", p. {page}" if page else "")


def _right_text(node: _Node, plan: _Plan, value_word: str,
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


def _draw_part(plan: _Plan, plans_total: int, width: float, rule: str,
               value_word: str, pages: dict[int, int] | None) -> TreePart:
    r = plan.root
    ordered = _in_order(plan)
    depth = {id(r): 0}
    parent_of: dict[int, _Node] = {}
    for node, _ in [(r, None), *ordered]:
        for _, child in _kids(node, plan):
            depth[id(child)] = depth[id(node)] + 1
            parent_of[id(child)] = node
    # Column 0 holds the root's stub: its name (or incoming branch) and value.
    columns = 1 + max([depth[id(n)] for n, _ in ordered] or [0])
    # Room right of the deepest column: what its nodes write there, up to END_TEXT.
    deepest = [n for n, _ in ordered if depth[id(n)] == columns - 1] or [r]
    need = max(text_width(_right_text(n, plan, value_word, pages)[0], FONT_SIZE, FONT_BOLD)
               for n in deepest) + R + 6
    col = min(MAX_COLUMN, (width - LEFT - min(END_TEXT, need)) / columns)
    leaves = [n for n, _ in ordered if not _kids(n, plan)] or [r]
    n_rows = len(leaves) + (1 if plan.more_part is not None else 0)
    # A continued part writes "from part N" one line above its root's stub.
    top_pad = TOP_PAD + (LINE if plan.from_part else 0)
    height = top_pad + TOP_PAD + n_rows * ROW_HEIGHT
    cv = _Canvas(width, height)

    def row_y(i: int) -> float:
        # the band [y - ROW_BOTTOM, y + ROW_TOP] centred in the row
        return height - top_pad - i * ROW_HEIGHT - ROW_TOP - (ROW_HEIGHT - ROW_TOP - ROW_BOTTOM) / 2

    ys: dict[int, float] = {id(leaf): row_y(i) for i, leaf in enumerate(leaves)}
    for node, _ in [*reversed(ordered), (r, None)]:
        kids = _kids(node, plan)
        if kids:
            ys[id(node)] = (ys[id(kids[0][1])] + ys[id(kids[-1][1])]) / 2

    def x_of(node: _Node) -> float:
        return LEFT + (depth[id(node)] + 1) * col

    def texts_on_branch(xa: float, node: _Node, branch: _Branch | None, *, title: str = "",
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

    def right_text(node: _Node, text: str, color=INK, font=FONT):
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
        if _kids(node, plan):
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
    where = f"from '{pdf_safe(r.name)}'"
    if plan.first or plan.last < len(r.children):
        where += f", branches {plan.first + 1}–{plan.last}"
    caption = f"Part {plan.number} of {plans_total}: the tree {where}"
    if plan.from_part:
        caption += f", continued from part {plan.from_part}"
    caption += f". {rule}"
    return TreePart(number=plan.number, root=r.id, drawing=drawing, boxes=cv.boxes,
                    caption=caption, from_part=plan.from_part)


def tree_parts(tree_doc: dict, details: dict | None = None, *, width: float = 480.0,
               height: float = 640.0, collapse_over: int = 600,
               max_parts: int = 60, pages: dict[int, int] | None = None) -> list[TreePart]:
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
    """
    details = details or {}
    root, n_nodes = _build(tree_doc, details)
    collapse = n_nodes > collapse_over
    max_rows = max(2, int((height - 2 * TOP_PAD - LINE) // ROW_HEIGHT))  # LINE: "from part"
    max_depth = max(1, int((width - LEFT - END_TEXT) // MIN_COLUMN) - 1)  # column 0: the stub
    plans = _split(root, max_rows, max_depth, collapse, max_parts)
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
    return [_draw_part(p, len(plans), width, rule, value_word, pages) for p in plans]


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
