"""Reading a tree document and splitting it into page-sized parts (no drawing here).

The rules are stated in :mod:`decisions.drawings.tree`, which draws the parts.
Nodes are plain objects linked parent to child; a node reached twice is read as
a reference (``kind == "ref"``) so that nothing is drawn twice.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

__all__ = ["Node", "Branch", "Plan", "build", "shown_children", "in_order", "row_counts", "split"]


@dataclass
class Node:
    id: str
    kind: str                 # decision | chance | end | ref (a node reached twice)
    name: str
    payoff: float | None = None
    value: float | None = None
    best: str | None = None
    pruned: frozenset = frozenset()
    children: list = field(default_factory=list)   # [(Branch, Node)]
    on_plan: bool = True
    size: int = 1             # nodes in the subtree (itself included)
    height: int = 0           # levels below the node (0 for an end node)


@dataclass
class Branch:
    label: str
    probability: float | None
    cash_flow: float | None
    best: bool
    pruned: bool


# ---- reading the documents ------------------------------------------------------------------

def build(tree_doc: dict, details: dict) -> tuple[Node, int]:
    by_id = {n["id"]: n for n in tree_doc.get("nodes", [])}
    made: dict[str, Node] = {}

    def make(node_id: str) -> Node:
        raw = by_id[node_id]
        d = details.get(node_id) or {}
        node = Node(
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
            branch = Branch(label=label, probability=br.get("probability"),
                             cash_flow=br.get("cash_flow"),
                             best=node.kind == "decision" and node.best == label,
                             pruned=label in node.pruned)
            child_id = br["to"]
            if child_id in made:  # reached twice: draw a reference, not the subtree again
                child = Node(id=child_id, kind="ref", name=made[child_id].name)
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
class Plan:
    """What one part draws. Cut and collapsed nodes are keyed by object identity: a
    reference to a node reached twice carries the same id as the node itself."""

    root: Node
    incoming: Branch | None
    from_part: int | None
    first: int = 0             # children of the root shown: [first, last)
    last: int = 0
    cut: dict = field(default_factory=dict)        # id(node) -> part number (0: not drawn)
    collapsed: set = field(default_factory=set)    # id(node) drawn as a pruned stub
    more_part: int | None = None                   # part continuing the root's children
    number: int = 0


def shown_children(node: Node, plan: Plan) -> list:
    if id(node) in plan.cut or id(node) in plan.collapsed:
        return []
    if node is plan.root:
        return node.children[plan.first:plan.last]
    return node.children


def in_order(plan: Plan) -> list:
    """Visible nodes below the part's root in drawing order, with their incoming branch."""
    out = []
    stack = [(c, b) for b, c in reversed(shown_children(plan.root, plan))]
    while stack:
        node, branch = stack.pop()
        out.append((node, branch))
        stack.extend((c, b) for b, c in reversed(shown_children(node, plan)))
    return out


def row_counts(plan: Plan) -> dict[int, int]:
    """Rows each visible node's subtree takes in the part (one per drawn leaf)."""
    ordered = in_order(plan)
    rows: dict[int, int] = {}
    for node, _ in reversed(ordered):
        kids = shown_children(node, plan)
        rows[id(node)] = sum(rows[id(c)] for _, c in kids) if kids else 1
    kids = shown_children(plan.root, plan)
    rows[id(plan.root)] = sum(rows[id(c)] for _, c in kids) if kids else 1
    return rows


def split(root: Node, max_rows: int, max_depth: int, collapse: bool,
           max_parts: int) -> list[Plan]:
    plans: list[Plan] = []
    queue: deque[Plan] = deque([Plan(root=root, incoming=None, from_part=None, number=1)])
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
        inner: list[Node] = []
        while walk:
            node = walk.pop()
            for branch, child in shown_children(node, plan):
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
            rows = row_counts(plan)
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
        for node, branch in in_order(plan):
            if plan.cut.get(id(node)) != -1:
                continue
            if next_number > max_parts:
                plan.cut[id(node)] = 0
                continue
            plan.cut[id(node)] = next_number
            queue.append(Plan(root=node, incoming=branch, from_part=plan.number,
                               number=next_number))
            next_number += 1
        if plan.last < len(r.children):
            if next_number > max_parts:
                plan.more_part = 0
            else:
                plan.more_part = next_number
                queue.append(Plan(root=r, incoming=plan.incoming, from_part=plan.number,
                                   first=plan.last, number=next_number))
                next_number += 1
    return plans


