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

import operator
from dataclasses import dataclass, field
from itertools import chain, compress, repeat
from itertools import count as count_from
from typing import Any

import numpy as np

from valuation.checks import Problems, amount_total_message, describe
from valuation.limits import (
    AMOUNT_TOTAL_LIMIT,
    MAX_NAME_LENGTH,
    MAX_TIME_YEARS,
    MAX_TREE_DEPTH,
    MAX_TREE_NODES,
    PROBABILITY_SUM_TOLERANCE,
    TIE_TOLERANCE,
)
from valuation.table import COMMON_FIELDS, check_common
from valuation.utility import log_expectations

__all__ = ["FlatTree", "Rollback", "build_tree", "rollback", "reach_probabilities", "spans",
           "amount_total"]

END, CHANCE, DECISION = 0, 1, 2
#: Trees of at most this many nodes are walked level by level with Python lists rather
#: than numpy arrays (a few numpy calls per level, each a few microseconds): on bushy
#: trees the lists take half the time at 200 nodes, 0.84 of it at 364, 1.5 times it
#: at 600 (alternating_tree, 2026-12); on deep narrow trees they gain more.
LIST_WALK_NODES = 400
_KINDS = {"end": END, "chance": CHANCE, "decision": DECISION}
_TREE_FIELDS = COMMON_FIELDS | {"root", "nodes"}
_NODE_FIELDS = frozenset({"id", "kind", "name", "branches", "payoff", "time", "description"})
_BRANCH_FIELDS = frozenset({"label", "to", "probability", "cash_flow", "time", "description"})


@dataclass
class FlatTree:
    """A validated tree. Node arrays are in document order; branch arrays by parent depth.

    Within a depth, the branches of chance nodes come before those of decision nodes
    (each group in document order of the parents), so that rollback reduces each
    group as one contiguous slice. The branches of one node are always contiguous
    and in document order: branch ``j`` of node ``i`` is ``first_branch[i] + j``.
    """

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
    # Rollback plan (segment starts, groups, contiguous slices) worked out once per
    # structure; see ``_plan_of``. Not part of the tree's value: excluded from ==.
    cache: dict = field(default_factory=dict, repr=False, compare=False)

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
    """Validate a general-tree document and build its arrays in one pass over the nodes.

    Two implementations of the same rules: ``_build_fast`` reads a valid document in
    one tight pass (type checks inlined, no message formatting, no per-node object)
    and gives up at the first thing it does not like; ``_build_checked`` then reads
    the document again, collecting every problem with its location and message.
    Both end in ``_finish``, so a document accepted by either yields the same tree
    (``tests/test_valuation_rollback.py`` checks this on generated trees).
    """
    tree = _build_fast(doc)
    if tree is not None:
        return tree
    return _build_checked(doc, problems)


def _build_checked(doc: dict, problems: Problems) -> FlatTree | None:
    """The validating reader: every problem is added to ``problems``; None when invalid."""
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
    return _finish((title, currency, objective, rate), ids, names, kind, payoff, root, parent, child,
                   np.asarray(prob_l, dtype=float), np.asarray(cash_l, dtype=float), label_l,
                   first, count, problems)


def _finish(common, ids, names, kind, payoff, root, parent, child, prob, cash, labels,
            first, count, problems) -> FlatTree | None:
    """Depths, branch order and level slices, shared by both readers."""
    n = len(ids)
    depth = _depths(n, root, parent, child, first, count, ids, problems)
    # Branches are still in document order here (node by node), as the location needs.
    amounts_ok = _amounts_within_limit(payoff, cash, parent, first, problems)
    if depth is None or not amounts_ok:
        return None
    # Order branches by the depth of their parent, chance parents before decision
    # parents within a depth; a stable sort keeps each parent's branches together and
    # in document order, which the segment reductions and tie-breaking need. A
    # document written breadth-first is usually in this order already.
    key = depth[parent] * 2 + (kind[parent] == DECISION)
    if len(key) and not bool(np.all(key[1:] >= key[:-1])):
        order = np.argsort(key, kind="stable")
        parent, child, prob, cash, key = parent[order], child[order], prob[order], cash[order], key[order]
        labels = [labels[j] for j in order.tolist()]
        pos = np.empty(len(order), dtype=np.int64)
        pos[order] = np.arange(len(order))
        first = np.where(first >= 0, pos[np.maximum(first, 0)], -1)
    max_depth = int(depth.max())
    parent_depth = key >> 1
    levels = np.arange(max_depth + 1)
    bounds = np.searchsorted(parent_depth, levels, side="left")
    ends = np.searchsorted(parent_depth, levels, side="right")
    slices = [(int(a), int(b)) for a, b in zip(bounds, ends, strict=True)]
    # The rollback plan is made on the first array rollback (``_plan_of``): a small
    # tree evaluated with Python lists (``valuation.small_tree``) never needs it.
    return FlatTree(*common, ids, names, kind, payoff, depth, root,
                    parent, child, prob, cash, labels, slices, first, count)


def amount_total(payoff: np.ndarray, cash: np.ndarray) -> float:
    """Total of the absolute discounted amounts, the measure of ``AMOUNT_TOTAL_LIMIT`` (inf
    when beyond a double's range)."""
    with np.errstate(over="ignore"):
        return float(np.abs(payoff).sum() + np.abs(cash).sum())


def _amounts_within_limit(payoff, cash, parent, first, problems) -> bool:
    """The ``AMOUNT_TOTAL_LIMIT`` rule: discounted payoffs and cash flows total less than it
    in absolute value, so that no rollback, risk profile or EVPI overflows.

    Two reductions on the hot path; a total beyond a double is inf, which fails the
    comparison as well (summed with the overflow warning off). The largest amount, where
    the problem is reported, is only looked for once the rule is broken.
    """
    total = amount_total(payoff, cash)
    if total < AMOUNT_TOTAL_LIMIT:
        return True
    problems.add(_largest_amount(payoff, cash, parent, first),
                 amount_total_message("payoffs and cash flows (after discounting)", total))
    return False


def _largest_amount(payoff, cash, parent, first) -> str:
    """Location of the largest amount in absolute value (of equals, the one in the first node).

    ``cash`` must be in document order (node by node), as both readers hand it to ``_finish``.
    """
    i = int(np.argmax(np.abs(payoff)))
    if len(cash):
        b = int(np.argmax(np.abs(cash)))
        node = int(parent[b])
        if abs(cash[b]) > abs(payoff[i]) or (abs(cash[b]) == abs(payoff[i]) and node < i):
            return f"nodes[{node}].branches[{b - int(first[node])}].cash_flow"
    return f"nodes[{i}].payoff"


# -- the fast reader -----------------------------------------------------------------------
#
# The checked reader spends its time in Python per node and per branch. The fast
# reader reads the document column by column instead: ``map(dict.get, items,
# repeat(key))`` pulls one field out of every node (or every branch) in a C loop, and
# each rule is then checked on the whole column at once (``set(map(type, column))``,
# ``min(map(len, ...))``, numpy comparisons). No object is made per node beyond the
# list slots. Each check below mirrors one in ``_build_checked``/``_read_branches``
# and declines on anything those would report (or on anything unusual, such as a
# subclass of dict or a bool): the checked reader then decides and words the problems.


def _names_ok(values: list) -> bool:
    """``Problems.name`` over a column: non-blank str, at most MAX_NAME_LENGTH, no control
    character XML refuses (``checks.XML_ILLEGAL_CONTROLS``)."""
    if not values:
        return True
    if set(map(type, values)) != {str}:
        return False
    if "" in values or max(map(len, values)) > MAX_NAME_LENGTH:
        return False
    return (Problems.CONTROL_CHARACTERS.search("".join(values)) is None
            and not any(map(str.isspace, values)))


def _numbers(values: list) -> np.ndarray | None:
    """``Problems.number`` over a column (int or float, not bool, finite) as a float array."""
    if not values:
        return np.zeros(0)
    if not set(map(type, values)) <= {int, float}:
        return None
    arr = np.array(values, dtype=float)
    return arr if bool(np.isfinite(arr).all()) else None


def _dated(times: list, amounts: np.ndarray, raw_amounts: list, rate) -> bool:
    """Apply ``_time`` and ``_discount`` to the entries that carry a time; False on a bad time."""
    if times.count(None) == len(times):
        return True
    for j, raw in enumerate(times):
        if raw is None:
            continue
        t = type(raw)
        if not ((t is float or t is int) and 0 <= raw <= MAX_TIME_YEARS):
            return False
        amounts[j] = _discount(float(raw_amounts[j]), float(raw), rate)
    return True


def _build_fast(doc) -> FlatTree | None:
    """Read a valid document column by column; None at the first doubt (see above)."""
    if type(doc) is not dict:
        return None
    scratch = Problems()
    scratch.unknown_fields("", doc, _TREE_FIELDS)
    common = check_common(doc, scratch)
    nodes = doc.get("nodes")
    root_id = doc.get("root")
    if (scratch or type(nodes) is not list or not nodes or len(nodes) > MAX_TREE_NODES
            or type(root_id) is not str):
        return None
    try:
        return _read_columns(nodes, root_id, common)
    except (KeyError, TypeError, ValueError, OverflowError):
        return None


def _read_columns(nodes: list, root_id: str, common) -> FlatTree | None:
    objective, rate = common[2], common[3]
    get = dict.get
    n = len(nodes)
    if set(map(type, nodes)) != {dict} or not set().union(*nodes) <= _NODE_FIELDS:
        return None
    ids = list(map(get, nodes, repeat("id")))
    if not _names_ok(ids):
        return None
    index = dict(zip(ids, range(n), strict=True))
    root = index.get(root_id)
    if len(index) != n or root is None:  # a duplicate id, or an unknown root
        return None
    kind = np.array(list(map(_KINDS.__getitem__, map(get, nodes, repeat("kind")))), dtype=np.int8)
    names = list(map(get, nodes, repeat("name"), ids))
    if set(map(type, names)) != {str}:
        names = [nm if isinstance(nm, str) else nid for nm, nid in zip(names, ids, strict=True)]
    is_end = (kind == END).tolist()
    # End nodes: a finite payoff, an optional time, no branches.
    ends = list(compress(nodes, is_end))
    raw_pay = list(map(get, ends, repeat("payoff")))
    pay = _numbers(raw_pay)
    if pay is None or any(map(get, ends, repeat("branches"))):
        return None
    if not _dated(list(map(get, ends, repeat("time"))), pay, raw_pay, rate):
        return None
    # Decision and chance nodes: a non-empty list of branches each.
    inner = list(compress(nodes, map(operator.not_, is_end)))
    lists = list(map(get, inner, repeat("branches")))
    if lists and (set(map(type, lists)) != {list} or min(map(len, lists)) == 0):
        return None
    branches = list(chain.from_iterable(lists))
    m = len(branches)
    if m and (set(map(type, branches)) != {dict}
              or not set().union(*branches) <= _BRANCH_FIELDS):
        return None
    labels = list(map(get, branches, repeat("label")))
    # Number the distinct labels (documents repeat a handful of labels), check each
    # distinct label once, and look for a label repeated within one node.
    numbers: dict[str, int] = {}
    code = np.fromiter(map(numbers.setdefault, labels, count_from(0)), dtype=np.int64, count=m)
    if not _names_ok(list(numbers)):
        return None
    count = np.zeros(n, dtype=np.int64)
    count[kind != END] = np.fromiter(map(len, lists), dtype=np.int64, count=len(lists))
    parent = np.repeat(np.arange(n, dtype=np.int64), count)
    if m and _repeated_label(parent, code, count, list(numbers.values())):
        return None
    child = np.fromiter(map(index.__getitem__, map(get, branches, repeat("to"))), dtype=np.int64,
                        count=m)
    # Probabilities: numbers within [0, 1] on chance branches, absent (or null) elsewhere.
    chance_branch = kind[parent] == CHANCE
    raw_prob = list(map(get, branches, repeat("probability")))
    on_chance = chance_branch.tolist()
    given = list(compress(raw_prob, on_chance))
    if not set(compress(raw_prob, map(operator.not_, on_chance))) <= {None}:
        return None
    pc = _numbers(given)
    if pc is None or not bool(((pc >= 0.0) & (pc <= 1.0)).all()):
        return None
    prob = np.zeros(m)
    prob[chance_branch] = pc
    if not _sums_to_one(pc, count[kind == CHANCE], given):
        return None
    raw_cash = list(map(get, branches, repeat("cash_flow"), repeat(0)))
    cash = _numbers(raw_cash)
    if cash is None or not _dated(list(map(get, branches, repeat("time"))), cash, raw_cash, rate):
        return None
    payoff = np.zeros(n)
    payoff[kind == END] = pay
    if objective != "max":
        # Same bits as the checked reader's ``sign * amount`` (zeros become -0.0 there too).
        cash *= -1.0
        payoff = np.where(kind == END, -payoff, 0.0)
    offsets = np.cumsum(count) - count
    first = np.where(count > 0, offsets, -1)
    return _finish(common, ids, names, kind, payoff, root, parent, child, prob, cash, labels,
                   first, count, Problems())


def _repeated_label(parent: np.ndarray, code: np.ndarray, count: np.ndarray, used: list) -> bool:
    """Whether some node has two branches with the same label number."""
    distinct = len(used)
    if distinct == len(code):
        return False
    if len(code) <= 128:
        # Fewer distinct (node, label) pairs than branches. Up to about a hundred branches
        # one set costs less than the numpy calls below (beyond, it costs more).
        return len(set(zip(parent.tolist(), code.tolist(), strict=True))) != len(code)
    dense = np.zeros(len(code), dtype=np.int64)
    dense[used] = np.arange(distinct)
    code = dense[code]  # numbers 0 .. distinct - 1
    if distinct <= 63:
        # One bit per label: a node repeats a label iff its OR has fewer bits than branches.
        inner = count > 0
        bits = np.bitwise_or.reduceat(np.left_shift(1, code), (np.cumsum(count) - count)[inner])
        return bool(np.any(np.bitwise_count(bits) != count[inner]))
    key = np.sort(parent * distinct + code)
    return bool(np.any(key[1:] == key[:-1]))


def _sums_to_one(p: np.ndarray, counts: np.ndarray, raw: list) -> bool:
    """Each chance node's probabilities sum to 1 within the tolerance, added up as the checked
    reader does (left to right, from 0.0); numpy's sum only screens, near the limit the
    node is added up again in Python so that both readers agree to the last bit."""
    if not len(counts):
        return True
    starts = np.cumsum(counts) - counts
    rough = np.abs(np.add.reduceat(p, starts) - 1.0)
    for j in np.flatnonzero(rough > PROBABILITY_SUM_TOLERANCE - 1e-9).tolist():
        total = 0.0
        for q in raw[int(starts[j]):int(starts[j] + counts[j])]:
            total += q
        if abs(total - 1.0) > PROBABILITY_SUM_TOLERANCE:
            return False
    return True


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


def spans(first: np.ndarray, count: np.ndarray) -> np.ndarray:
    """``first[i], first[i] + 1, ..., first[i] + count[i] - 1`` for every i, end to end:
    the gather of several runs of consecutive positions without a Python loop."""
    offsets = np.cumsum(count) - count
    return np.repeat(first - offsets, count) + np.arange(int(count.sum()))


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
    walk = _walk_lists if n <= LIST_WALK_NODES else _walk_arrays
    depth = walk(n, root, child, first, count)
    if depth is None:
        problems.add("nodes", f"the tree is deeper than {MAX_TREE_DEPTH} levels")
        return None
    unreached = np.flatnonzero(depth < 0)
    for i in unreached[:20]:
        problems.add(f"nodes[{i}]", f"node {ids[i]!r} is not reachable from the root "
                     "(an orphan or part of a cycle)")
    if unreached.size > 20:
        problems.add("nodes", f"... {unreached.size - 20} more unreachable nodes")
    return None if problems else depth


def _walk_arrays(n, root, child, first, count) -> np.ndarray | None:
    """Breadth-first depths (-1 where unreached), a few numpy calls per level; None when too deep."""
    depth = np.full(n, -1, dtype=np.int64)
    depth[root] = 0
    frontier = np.array([root], dtype=np.int64)
    level = 0
    while frontier.size:
        if level > MAX_TREE_DEPTH:
            return None
        has = count[frontier] > 0
        starts, counts = first[frontier[has]], count[frontier[has]]
        if not starts.size:
            break
        # Gather every branch of every frontier node without a Python loop.
        frontier = child[spans(starts, counts)]
        level += 1
        depth[frontier] = level
    return depth


def _walk_lists(n, root, child, first, count) -> np.ndarray | None:
    """``_walk_arrays`` over Python lists: on a small tree the numpy calls per level cost
    more than the whole walk (tests/test_valuation_small_paths.py holds the two equal)."""
    child_l, first_l, count_l = child.tolist(), first.tolist(), count.tolist()
    depth = [-1] * n
    depth[root] = 0
    frontier = [root]
    level = 0
    while frontier:
        if level > MAX_TREE_DEPTH:
            return None
        nxt: list[int] = []
        for node in frontier:
            if count_l[node]:
                f = first_l[node]
                nxt += child_l[f:f + count_l[node]]
        if not nxt:
            break
        level += 1
        for node in nxt:
            depth[node] = level
        frontier = nxt
    return np.array(depth, dtype=np.int64)


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


# -- rollback plan: the structure's segments, worked out once ---------------------------------


@dataclass
class _Bucket:
    """The segments of one group that have ``width`` branches each."""

    width: int
    segments: np.ndarray | None  # segment numbers within the group (None: all of them)
    cells: np.ndarray | None  # segments x width positions in the group (None: a plain reshape)


@dataclass
class _Group:
    """The branches of one kind of parent (chance or decision) at one depth."""

    sel: slice | np.ndarray  # positions within the level
    base: np.ndarray | int  # absolute branch index of each position (an int when contiguous)
    parents: slice | np.ndarray  # node of each segment
    starts: np.ndarray  # start of each segment within the group
    seg: np.ndarray | None  # segment number of each branch (only when widths differ)
    buckets: list[_Bucket]
    size: int


@dataclass
class _Level:
    a: int
    b: int
    child: slice | np.ndarray  # children of the level's branches (a slice when consecutive)
    chance: _Group | None
    decision: _Group | None


@dataclass
class _Plan:
    parent: np.ndarray  # the arrays the plan was made from, to notice a replaced structure
    child: np.ndarray
    kind: np.ndarray
    is_end: np.ndarray
    levels: list[_Level]


def _as_slice(idx: np.ndarray) -> slice | np.ndarray:
    """A run of consecutive integers as a slice (views instead of gathers), else the array."""
    if len(idx) and int(idx[-1]) - int(idx[0]) == len(idx) - 1 and bool(np.all(np.diff(idx) == 1)):
        return slice(int(idx[0]), int(idx[-1]) + 1)
    return idx


def _group(tree: FlatTree, a: int, sel: np.ndarray) -> _Group:
    parents = tree.parent[a + sel]
    starts = np.concatenate(([0], np.flatnonzero(parents[1:] != parents[:-1]) + 1))
    widths = np.diff(np.append(starts, len(sel)))
    sel_s = _as_slice(sel)
    base = a + sel_s.start if isinstance(sel_s, slice) else a + sel
    seg = None
    if bool(np.all(widths == widths[0])):
        buckets = [_Bucket(int(widths[0]), None, None)]
    else:
        seg = np.repeat(np.arange(len(starts)), widths)
        buckets = []
        for w in np.unique(widths):
            segments = np.flatnonzero(widths == w)
            cells = starts[segments][:, None] + np.arange(w)[None, :]
            buckets.append(_Bucket(int(w), segments, cells))
    return _Group(sel_s, base, _as_slice(parents[starts]), starts, seg, buckets, len(sel))


def _plan_of(tree: FlatTree) -> _Plan:
    """The rollback plan of ``tree``, made on first use and kept while the structure stays."""
    plan = tree.cache.get("plan")
    if (plan is not None and plan.parent is tree.parent and plan.child is tree.child
            and plan.kind is tree.kind):
        return plan
    levels = []
    for a, b in tree.level_slices:
        if a == b:
            continue
        is_dec = tree.kind[tree.parent[a:b]] == DECISION
        pos = np.arange(b - a)
        chance = _group(tree, a, pos[~is_dec]) if not bool(is_dec.all()) else None
        decision = _group(tree, a, pos[is_dec]) if bool(is_dec.any()) else None
        levels.append(_Level(a, b, _as_slice(tree.child[a:b]), chance, decision))
    plan = _Plan(tree.parent, tree.child, tree.kind, tree.kind == END, levels)
    tree.cache["plan"] = plan
    return plan


def _segment_sum(x: np.ndarray, g: _Group) -> np.ndarray:
    """Sum of each segment, added left to right in branch order (as a plain loop would)."""
    out = np.empty(len(g.starts))
    for bk in g.buckets:
        cols = x.reshape(-1, bk.width) if bk.cells is None else x[bk.cells]
        if bk.width > 8:
            # cumsum is a strictly sequential accumulation, unlike sum's pairwise blocks.
            total = np.cumsum(cols, axis=1)[:, -1]
        else:
            total = cols[:, 0].copy()
            for j in range(1, bk.width):
                total += cols[:, j]
        if bk.segments is None:
            return total
        out[bk.segments] = total
    return out


def _segment_best(x: np.ndarray, g: _Group) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per segment: position of the best branch (first within the tie tolerance), tie, top."""
    m = len(g.starts)
    choice = np.empty(m, dtype=np.int64)
    ties = np.empty(m, dtype=bool)
    top = np.empty(m)
    for bk in g.buckets:
        cols = x.reshape(-1, bk.width) if bk.cells is None else x[bk.cells]
        if bk.width <= 8:
            # Column by column: numpy reduces a short inner axis one row at a time.
            t = cols[:, 0].copy()
            for j in range(1, bk.width):
                np.maximum(t, cols[:, j], out=t)
            threshold = t - TIE_TOLERANCE * np.maximum(1.0, np.abs(t))
            local = np.zeros(len(t), dtype=np.int64)
            n_near = np.zeros(len(t), dtype=np.int8)
            for j in range(bk.width - 1, -1, -1):
                near = cols[:, j] >= threshold
                np.copyto(local, j, where=near)
                n_near += near
            tie = n_near > 1
        else:
            t = cols.max(axis=1)
            near = cols >= (t - TIE_TOLERANCE * np.maximum(1.0, np.abs(t)))[:, None]
            local = near.argmax(axis=1)
            tie = np.count_nonzero(near, axis=1) > 1
        if bk.segments is None:
            return g.starts + local, tie, t
        choice[bk.segments] = g.starts[bk.segments] + local
        ties[bk.segments] = tie
        top[bk.segments] = t
    return choice, ties, top


def _cash_is_identity(cash: np.ndarray, payoff: np.ndarray) -> bool:
    """True when adding ``cash`` would change no value, so rollback may skip the addition.

    Adding -0.0 changes nothing; adding +0.0 changes nothing unless a value is -0.0,
    which can only come from a payoff of -0.0.
    """
    if cash.any():
        return False
    return bool(np.signbit(cash).all()) or not bool(np.signbit(payoff).any())


def rollback(tree: FlatTree, *, risk_tolerance: float | None = None,
             prob: np.ndarray | None = None) -> Rollback:
    """Fold the tree back from the leaves; chance nodes average (or take the CE), decisions pick.

    ``prob`` overrides the branch probabilities (same order as ``tree.prob``), so
    sensitivity sweeps and value-of-information runs reuse the structure.

    Each depth is two contiguous groups of branches (those of chance nodes, those of
    decision nodes); a group whose nodes all have ``k`` branches is reduced as a
    ``(nodes, k)`` matrix, column by column, so a chance node's mean is added up left
    to right exactly as ``tests/reference_rollback.py`` does it in plain Python.
    """
    plan = _plan_of(tree)
    p_all = tree.prob if prob is None else prob
    n = tree.size
    value = np.where(plan.is_end, tree.payoff, 0.0)
    expected = value.copy() if risk_tolerance else None
    best = np.full(n, -1, dtype=np.int64)
    tie = np.zeros(n, dtype=bool)
    skip_cash = _cash_is_identity(tree.cash, tree.payoff)
    for lv in reversed(plan.levels):
        a, b = lv.a, lv.b
        bv = value[lv.child]
        if not skip_cash:
            bv = tree.cash[a:b] + bv
        p = p_all[a:b]
        if expected is not None:
            ev_b = expected[lv.child]
            if not skip_cash:
                ev_b = tree.cash[a:b] + ev_b
        g = lv.chance
        if g is not None:
            pg = p[g.sel]
            if risk_tolerance:
                value[g.parents] = _chance_ce(bv[g.sel], pg, g, risk_tolerance)
            else:
                value[g.parents] = _segment_sum(pg * bv[g.sel], g)
            if expected is not None:
                expected[g.parents] = _segment_sum(pg * ev_b[g.sel], g)
        g = lv.decision
        if g is not None:
            local, ties, top = _segment_best(bv[g.sel], g)
            value[g.parents] = top
            best[g.parents] = g.base + local if isinstance(g.base, int) else g.base[local]
            tie[g.parents] = ties
            if expected is not None:
                expected[g.parents] = ev_b[g.sel][local]
    return Rollback(value, best, tie, expected)


def _chance_ce(bv, p, g: _Group, r) -> np.ndarray:
    """Certainty equivalent per segment, shifted by the segment minimum to avoid overflow."""
    masked = np.where(p > 0, bv, np.inf)
    m = np.minimum.reduceat(masked, g.starts)
    seg = g.seg if g.seg is not None else np.repeat(np.arange(len(g.starts)), g.buckets[0].width)
    # Branches of probability 0 are left out of the sums (their exponent may overflow);
    # a tiny R overflows the exponent of the others to -inf, whose exp is 0.
    with np.errstate(over="ignore"):
        exponent = np.where(p > 0, -(bv - m[seg]) / r, -np.inf)
    log_total = log_expectations(_segment_sum(p, g), _segment_sum(p * np.exp(exponent), g),
                                 _segment_sum(p * np.expm1(exponent), g))
    return m - r * log_total


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
