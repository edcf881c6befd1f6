"""General decision trees held as flat arrays, rolled back level by level.

Why flat arrays: a tree of a million nodes held as a million Python objects
costs more memory than the JSON it came from and rolls back at Python speed.
Here every node is an index; branches are parallel arrays (parent, child,
probability, discounted cash flow) ordered by the depth of their parent, so
each level is one contiguous slice and its chance nodes reduce with
``np.add.reduceat`` and its decision nodes with ``np.maximum.reduceat``.

Rollback is the standard "average out and fold back" procedure: the value of a
chance node is the probability-weighted value of its branches, the value of a
decision node the best of its branches (Raiffa, H., *Decision Analysis*,
Addison-Wesley 1968, ch. 2). Under exponential utility chance nodes take the
certainty equivalent instead of the mean, which is exact because of the delta
property (see ``valuation.utility``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from valuation.checks import Problems, describe
from valuation.limits import (
    MAX_TIME_YEARS,
    MAX_TREE_DEPTH,
    MAX_TREE_NODES,
    PROBABILITY_SUM_TOLERANCE,
    TIE_TOLERANCE,
)
from valuation.table import COMMON_FIELDS, check_common

__all__ = ["FlatTree", "Rollback", "build_tree", "rollback", "reach_probabilities"]

END, CHANCE, DECISION = 0, 1, 2
_KINDS = {"end": END, "chance": CHANCE, "decision": DECISION}
_TREE_FIELDS = COMMON_FIELDS | {"root", "nodes"}
_NODE_FIELDS = frozenset({"id", "kind", "name", "branches", "payoff", "time", "description"})
_BRANCH_FIELDS = frozenset({"label", "to", "probability", "cash_flow", "time", "description"})


@dataclass
class FlatTree:
    """A validated tree. Node arrays are in document order; branch arrays by parent depth."""

    title: str
    currency: str
    objective: str
    discount_rate: float | None
    ids: list[str]
    names: list[str]
    kind: np.ndarray  # int8 per node
    payoff: np.ndarray  # discounted end payoffs (0 elsewhere), sign applied
    depth: np.ndarray
    root: int
    # branches, ordered by depth of parent then parent then document order
    parent: np.ndarray
    child: np.ndarray
    prob: np.ndarray
    cash: np.ndarray  # discounted cash flow, sign applied
    labels: list[str]
    level_slices: list[tuple[int, int]]  # branch slice [a, b) for parents at each depth
    first_branch: np.ndarray  # per node: index of its first branch in branch order (-1 if none)
    branch_count: np.ndarray

    @property
    def sign(self) -> float:
        return 1.0 if self.objective == "max" else -1.0

    @property
    def size(self) -> int:
        return len(self.ids)


def _discount(amount: float, time: float, rate: float | None) -> float:
    if not rate or not time:
        return amount
    return amount / (1.0 + rate) ** time


def _time(where: str, raw: Any, problems: Problems) -> float:
    if raw is None:
        return 0.0
    if not problems.number(where, raw):
        return 0.0
    if not 0 <= raw <= MAX_TIME_YEARS:
        problems.add(where, f"must be within [0, {MAX_TIME_YEARS}] years, got {raw}")
        return 0.0
    return float(raw)


def build_tree(doc: dict, problems: Problems) -> FlatTree | None:
    """Validate a general-tree document and build its arrays in one pass over the nodes."""
    problems.unknown_fields("", doc, _TREE_FIELDS)
    title, currency, objective, rate = check_common(doc, problems)
    sign = 1.0 if objective == "max" else -1.0
    nodes = doc.get("nodes")
    if not isinstance(nodes, list) or not nodes:
        problems.add("nodes", "must be a non-empty list of nodes")
        return None
    if len(nodes) > MAX_TREE_NODES:
        problems.add("nodes", f"at most {MAX_TREE_NODES:,} nodes are allowed, got {len(nodes):,}")
        return None
    n = len(nodes)
    ids: list[str] = [""] * n
    names: list[str] = [""] * n
    index: dict[str, int] = {}
    kind = np.zeros(n, dtype=np.int8)
    payoff = np.zeros(n)
    # First pass: ids, kinds and end payoffs (children are resolved after every id is known).
    for i, node in enumerate(nodes):
        where = f"nodes[{i}]"
        if type(node) is not dict:
            problems.add(where, f"must be an object, got {describe(node)}")
            continue
        nid = node.get("id")
        if not problems.name(f"{where}.id", nid, "id"):
            continue
        if nid in index:
            problems.add(f"{where}.id", f"duplicate id {nid!r} (also nodes[{index[nid]}])")
            continue
        index[nid] = i
        ids[i] = nid
        names[i] = node.get("name") if isinstance(node.get("name"), str) else nid
        k = _KINDS.get(node.get("kind"))
        if k is None:
            problems.add(f"{where}.kind", f"must be 'decision', 'chance' or 'end', got "
                         f"{describe(node.get('kind'))}")
            continue
        kind[i] = k
        if len(node) > 4 or not node.keys() <= _NODE_FIELDS:
            problems.unknown_fields(where, node, _NODE_FIELDS)
        if k == END:
            value = node.get("payoff")
            if problems.number(f"{where}.payoff", value):
                payoff[i] = sign * _discount(float(value), _time(f"{where}.time", node.get("time"),
                                                                  problems), rate)
            if node.get("branches"):
                problems.add(f"{where}.branches", "an end node has no branches")
    root_id = doc.get("root")
    root = index.get(root_id) if isinstance(root_id, str) else None
    if root is None:
        problems.add("root", f"must be the id of a node, got {describe(root_id)}")
    if problems:
        return None
    parent_l: list[int] = []
    child_l: list[int] = []
    prob_l: list[float] = []
    cash_l: list[float] = []
    label_l: list[str] = []
    first = np.full(n, -1, dtype=np.int64)
    count = np.zeros(n, dtype=np.int64)
    for i, node in enumerate(nodes):
        k = kind[i]
        if k == END:
            continue
        _read_branches(i, node, k, index, problems, sign, rate,
                       (parent_l, child_l, prob_l, cash_l, label_l), first, count)
    if problems:
        return None
    parent = np.asarray(parent_l, dtype=np.int64)
    child = np.asarray(child_l, dtype=np.int64)
    depth = _depths(n, root, parent, child, first, count, ids, problems)
    if depth is None:
        return None
    # Order branches by the depth of their parent; a stable sort keeps each parent's
    # branches together and in document order, which reduceat and tie-breaking need.
    order = np.argsort(depth[parent], kind="stable")
    parent, child = parent[order], child[order]
    prob = np.asarray(prob_l)[order]
    cash = np.asarray(cash_l)[order]
    labels = [label_l[j] for j in order]
    pos = np.empty(len(order), dtype=np.int64)
    pos[order] = np.arange(len(order))
    first = np.where(first >= 0, pos[np.maximum(first, 0)], -1)
    parent_depth = depth[parent]
    max_depth = int(depth.max())
    bounds = np.searchsorted(parent_depth, np.arange(max_depth + 1), side="left")
    ends = np.searchsorted(parent_depth, np.arange(max_depth + 1), side="right")
    slices = [(int(a), int(b)) for a, b in zip(bounds, ends, strict=True)]
    return FlatTree(title, currency, objective, rate, ids, names, kind, payoff, depth, root,
                    parent, child, prob, cash, labels, slices, first, count)


def _read_branches(i, node, k, index, problems, sign, rate, out, first, count) -> None:
    parent_l, child_l, prob_l, cash_l, label_l = out
    where = f"nodes[{i}]"
    branches = node.get("branches")
    what = "decision" if k == DECISION else "chance"
    if not isinstance(branches, list) or not branches:
        problems.add(f"{where}.branches", f"a {what} node needs at least one branch")
        return
    first[i] = len(parent_l)
    count[i] = len(branches)
    seen: set[str] = set()
    total = 0.0
    probs_ok = True
    for j, br in enumerate(branches):
        bw = f"{where}.branches[{j}]"
        if type(br) is not dict:
            problems.add(bw, f"must be an object, got {describe(br)}")
            probs_ok = False
            continue
        if not br.keys() <= _BRANCH_FIELDS:
            problems.unknown_fields(bw, br, _BRANCH_FIELDS)
        label = br.get("label")
        if problems.name(f"{bw}.label", label, "label"):
            if label in seen:
                problems.add(f"{bw}.label", f"duplicate label {label!r} in node {node['id']!r}")
            seen.add(label)
        target = index.get(br.get("to")) if isinstance(br.get("to"), str) else None
        if target is None:
            problems.add(f"{bw}.to", f"must be the id of a node, got {describe(br.get('to'))}")
            target = 0
        p = br.get("probability")
        if k == CHANCE:
            if problems.probability(f"{bw}.probability", p):
                total += p
            else:
                probs_ok = False
                p = 0.0
        elif p is not None:
            problems.add(f"{bw}.probability", "only branches of a chance node carry a probability")
        cf = br.get("cash_flow", 0)
        if not problems.number(f"{bw}.cash_flow", cf):
            cf = 0
        t = _time(f"{bw}.time", br.get("time"), problems)
        parent_l.append(i)
        child_l.append(target)
        prob_l.append(float(p) if k == CHANCE else 0.0)
        cash_l.append(sign * _discount(float(cf), t, rate))
        label_l.append(label if isinstance(label, str) else "")
    if k == CHANCE and probs_ok and abs(total - 1.0) > PROBABILITY_SUM_TOLERANCE:
        problems.add(
            f"{where}.branches",
            f"probabilities must sum to 1 (within {PROBABILITY_SUM_TOLERANCE:g}), got {total:.9g}",
        )


def _depths(n, root, parent, child, first, count, ids, problems) -> np.ndarray | None:
    """Depth of every node by breadth-first levels; refuses shared subtrees and cycles."""
    indegree = np.bincount(child, minlength=n)
    shared = np.flatnonzero(indegree > 1)
    for i in shared[:20]:
        problems.add(f"nodes[{i}]", f"node {ids[i]!r} is the target of {indegree[i]} branches; "
                     "a tree may not share subtrees (copy the subtree under new ids)")
    if indegree[root] > 0:
        problems.add("root", f"the root {ids[root]!r} is the target of a branch (a cycle)")
    if problems:
        return None
    depth = np.full(n, -1, dtype=np.int64)
    depth[root] = 0
    frontier = np.array([root], dtype=np.int64)
    level = 0
    while frontier.size:
        if level > MAX_TREE_DEPTH:
            problems.add("nodes", f"the tree is deeper than {MAX_TREE_DEPTH} levels")
            return None
        has = count[frontier] > 0
        starts, counts = first[frontier[has]], count[frontier[has]]
        if not starts.size:
            break
        # Gather every branch of every frontier node without a Python loop.
        offsets = np.repeat(starts - np.cumsum(counts) + counts, counts) + np.arange(counts.sum())
        frontier = child[offsets]
        level += 1
        depth[frontier] = level
    unreached = np.flatnonzero(depth < 0)
    for i in unreached[:20]:
        problems.add(f"nodes[{i}]", f"node {ids[i]!r} is not reachable from the root "
                     "(an orphan or part of a cycle)")
    if unreached.size > 20:
        problems.add("nodes", f"... {unreached.size - 20} more unreachable nodes")
    return None if problems else depth


@dataclass
class Rollback:
    """Result of folding a tree back: a value per node and the chosen branch per decision."""

    value: np.ndarray  # per node, internal sign (more is better)
    best: np.ndarray  # per node: chosen branch index (branch order), -1 if not a decision
    tie: np.ndarray  # per node: True where two or more branches tie for best
    expected: np.ndarray | None = None  # per node EV of the chosen plan (when utility used)


def _segment_starts(tree: FlatTree, a: int, b: int) -> np.ndarray:
    """Start offsets (relative to a) of each parent's run of branches in slice [a, b)."""
    parents = tree.parent[a:b]
    change = np.flatnonzero(parents[1:] != parents[:-1]) + 1
    return np.concatenate(([0], change))


def rollback(tree: FlatTree, *, risk_tolerance: float | None = None,
             prob: np.ndarray | None = None) -> Rollback:
    """Fold the tree back from the leaves; chance nodes average (or take the CE), decisions pick.

    ``prob`` overrides the branch probabilities (same order as ``tree.prob``), so
    sensitivity sweeps and value-of-information runs reuse the structure.
    """
    p_all = tree.prob if prob is None else prob
    n = tree.size
    value = np.where(tree.kind == END, tree.payoff, 0.0)
    expected = value.copy() if risk_tolerance else None
    best = np.full(n, -1, dtype=np.int64)
    tie = np.zeros(n, dtype=bool)
    for a, b in reversed(tree.level_slices):
        if a == b:
            continue
        starts = _segment_starts(tree, a, b)
        parents = tree.parent[a:b][starts]
        bv = tree.cash[a:b] + value[tree.child[a:b]]
        p = p_all[a:b]
        is_chance = tree.kind[parents] == CHANCE
        node_value = np.empty(len(parents))
        if risk_tolerance:
            node_value[is_chance] = _chance_ce(bv, p, starts, risk_tolerance)[is_chance]
        else:
            node_value[is_chance] = np.add.reduceat(p * bv, starts)[is_chance]
        choice, ties, top = _decide(bv, starts, a)
        is_dec = ~is_chance
        node_value[is_dec] = top[is_dec]
        value[parents] = node_value
        best[parents[is_dec]] = choice[is_dec]
        tie[parents[is_dec]] = ties[is_dec]
        if expected is not None:
            ev_b = tree.cash[a:b] + expected[tree.child[a:b]]
            ev_node = np.add.reduceat(p * ev_b, starts)
            ev_node[is_dec] = ev_b[choice[is_dec] - a]
            expected[parents] = ev_node
    return Rollback(value, best, tie, expected)


def _chance_ce(bv, p, starts, r) -> np.ndarray:
    """Certainty equivalent per segment, shifted by the segment minimum to avoid overflow."""
    masked = np.where(p > 0, bv, np.inf)
    m = np.minimum.reduceat(masked, starts)
    seg = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, len(bv))))
    # Branches of probability 0 are left out of the sum (their exponent may overflow).
    exponent = np.where(p > 0, -(bv - m[seg]) / r, -np.inf)
    total = np.add.reduceat(p * np.exp(exponent), starts)
    # Decision nodes share the level's slice; their segments (all p = 0) give -inf
    # here and are discarded by the caller, so the warning would be noise.
    with np.errstate(divide="ignore", invalid="ignore"):
        return m - r * np.log(total)


def _decide(bv, starts, offset) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Best branch per segment: the first (document order) within the tie tolerance of the max."""
    top = np.maximum.reduceat(bv, starts)
    seg = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, len(bv))))
    tol = TIE_TOLERANCE * np.maximum(1.0, np.abs(top))
    near = bv >= top[seg] - tol[seg]
    idx = np.where(near, np.arange(len(bv)), len(bv))
    choice = np.minimum.reduceat(idx, starts) + offset
    ties = np.add.reduceat(near.astype(np.int64), starts) > 1
    return choice, ties, top


def reach_probabilities(tree: FlatTree, best: np.ndarray,
                        prob: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Probability of reaching each node under the plan, and the money accumulated on the way."""
    p_all = tree.prob if prob is None else prob
    reach = np.zeros(tree.size)
    acc = np.zeros(tree.size)
    reach[tree.root] = 1.0
    branch_ids = np.arange(len(tree.parent))
    for a, b in tree.level_slices:
        if a == b:
            continue
        par = tree.parent[a:b]
        ch = tree.child[a:b]
        is_dec = tree.kind[par] == DECISION
        chosen = best[par] == branch_ids[a:b]
        factor = np.where(is_dec, chosen.astype(float), p_all[a:b])
        reach[ch] = reach[par] * factor
        acc[ch] = acc[par] + tree.cash[a:b]
    return reach, acc
