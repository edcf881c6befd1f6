"""Small general trees evaluated with Python lists, to the last bit of the array code.

Why: a numpy call costs a few microseconds however short its arrays, and the array
routines (``flattree.rollback``, ``tree_eval.clairvoyant_value``,
``tree_eval.learning_values``, ``flattree.reach_probabilities``) spend a fixed number of
calls per level or per node. On a tree of a few hundred nodes those fixed costs are
most of ``valuation.evaluate``. Up to ``LIST_PATH_NODES`` nodes the routines here do
the same floating-point operations in the same order on Python floats instead, so the
result document is the same to the last bit (IEEE 754 addition, subtraction,
multiplication and division are the same in Python and numpy). Where numpy's own
order of operations decides a result, it is restated here:

- ``np.add.reduceat`` gives each run its first element plus the sum of the rest, which
  it starts from -0.0 (``_reduceat_sum``); ``np.sum`` of a few terms starts from 0.0
  (``_sum_of_at_most_8``); ``np.bincount`` with weights adds left to right from 0.0,
  ``np.cumsum`` from its first term.
- ``np.maximum`` returns its second argument when both compare equal (0.0 and -0.0),
  so the rollback's column-by-column maximum keeps the later zero (``_max``). numpy's
  reductions (``.max()``, ``.min()``, ``reduceat``) pick the sign of a zero by the order
  of their vector loops, which depends on the processor: with AVX-512 they matched a
  left-to-right fold on runs of up to 8, with AVX2 runs of 5 to 8 differ. So a maximum
  or minimum of zero taken where the array code reduces is asked of numpy itself
  (``_max_reduced``, ``_min``). A tree with a node of more than ``MAX_LIST_WIDTH``
  branches is left to the array code.
- ``np.exp``, ``np.expm1``, ``np.log`` and ``np.log1p`` are not the C library's (they
  differ in the last bit now and then), so they are still called, on a whole level at a
  time; the logarithm of a certainty equivalent is ``utility.log_expectations`` given
  the same sums (``utility.log_expectation`` where the array code takes that).
- Amounts are bounded (``AMOUNT_TOTAL_LIMIT``, which ``flattree`` already holds every
  document to) so that no value overflows: infinities and NaN, where numpy and Python
  order comparisons differently, cannot arise.

``tests/test_valuation_small_paths.py`` holds each routine equal to its array twin on
generated trees, and ``valuation.evaluate`` on both paths to the same document.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from itertools import groupby
from operator import itemgetter

import numpy as np

from valuation.flattree import CHANCE, DECISION, END, FlatTree, _cash_is_identity
from valuation.limits import AMOUNT_TOTAL_LIMIT, INFORMATION_NODE_LIMIT, TIE_TOLERANCE
from valuation.tree_eval import profile_from_outcomes
from valuation.utility import certainty_equivalent, log_expectation, log_expectations

__all__ = ["LIST_PATH_NODES", "LIST_CLAIRVOYANT_NODES", "ListTree", "ListRollback", "as_lists",
           "rollback", "clairvoyant_on_lists", "clairvoyant_value", "learning_values", "risk_profile",
           "chance_nodes_by_depth"]

#: Trees of at most this many nodes are evaluated here. The lists pay most through the
#: value of learning, which is only worked out up to INFORMATION_NODE_LIMIT nodes: the
#: whole evaluation took 0.72-0.80 of the array time from 600 to 5,000 nodes, and 1.4
#: times it beyond, where the value of learning is left out (alternating_tree, 2026-12).
LIST_PATH_NODES = INFORMATION_NODE_LIMIT
#: ... and their clairvoyant value up to this many nodes, or more when the tree is
#: deep (see ``clairvoyant_on_lists``).
LIST_CLAIRVOYANT_NODES = 400
#: Nodes per level up to which the clairvoyant value is worked out on lists.
LIST_CLAIRVOYANT_NODES_PER_LEVEL = 100
#: Longest run numpy reduces strictly left to right (see the module docstring).
MAX_LIST_WIDTH = 8

_INF = math.inf
_value_of = itemgetter(0)


@dataclass
class ListTree:
    """A ``FlatTree``'s arrays as Python lists, under the same names.

    Code that reads a tree one element at a time (``tree_eval.plan_steps``,
    ``tree_eval.node_details``) takes either, and runs faster on lists.
    """

    objective: str
    sign: float
    root: int
    size: int
    ids: list[str]
    names: list[str]
    labels: list[str]
    kind: list[int]
    payoff: list[float]
    depth: list[int]
    parent: list[int]
    child: list[int]
    prob: list[float]
    cash: list[float]
    first_branch: list[int]
    branch_count: list[int]
    skip_cash: bool  # adding the cash flows would change no value (as in ``rollback``)
    levels: list[tuple[list[int], list[int]]]  # (chance, decision) nodes per depth, deepest first
    up: list[int]  # parent node of every node (-1 for the root)
    via: list[int]  # the branch into every node (-1 for the root)


@dataclass
class ListRollback:
    """``flattree.Rollback`` as lists."""

    value: list[float]
    best: list[int]
    tie: list[bool]
    expected: list[float] | None = None


def as_lists(tree: FlatTree, risk_tolerance: float | None) -> ListTree | None:
    """The tree as lists when this module evaluates it (see the module docstring), else None."""
    if tree.size > LIST_PATH_NODES:
        return None
    # A risk tolerance as large as the amounts' limit stays on the arrays.
    if risk_tolerance is not None and not risk_tolerance < AMOUNT_TOTAL_LIMIT:
        return None
    count = tree.branch_count.tolist()
    if max(count) > MAX_LIST_WIDTH:
        return None
    payoff, cash = tree.payoff.tolist(), tree.cash.tolist()
    # A tree read from a document is within the limit (``flattree._finish``); this guards
    # one whose arrays were set otherwise.
    if not sum(map(abs, payoff)) + sum(map(abs, cash)) < AMOUNT_TOTAL_LIMIT:
        return None
    kind, depth = tree.kind.tolist(), tree.depth.tolist()
    parent, child = tree.parent.tolist(), tree.child.tolist()
    levels: list[tuple[list[int], list[int]]] = [([], []) for _ in range(max(depth) + 1)]
    for i, k in enumerate(kind):
        if k != END:
            levels[depth[i]][k == DECISION].append(i)
    while levels and not levels[-1][0] and not levels[-1][1]:
        levels.pop()
    up = [-1] * tree.size
    via = [-1] * tree.size
    for b, (p, c) in enumerate(zip(parent, child, strict=True)):
        up[c] = p
        via[c] = b
    return ListTree(tree.objective, tree.sign, tree.root, tree.size, tree.ids, tree.names, tree.labels,
                    kind, payoff, depth, parent, child, tree.prob.tolist(), cash,
                    tree.first_branch.tolist(), count, _cash_is_identity(tree.cash, tree.payoff),
                    levels[::-1], up, via)


# -- numpy's orders of operations, restated ---------------------------------------------------


def _reduceat_sum(x: list[float]) -> float:
    """``np.add.reduceat`` over one run: the first element plus the sum of the rest, which
    numpy starts from -0.0 and adds left to right below 8 terms (x + -0.0 is x, so a run
    of one is its element). Runs are never longer than ``MAX_LIST_WIDTH`` here: a node has
    at most that many branches, and each child's outcomes are merged already, so equal
    outcomes gather at most one from each branch."""
    total = -0.0
    for v in x[1:]:
        total += v
    return x[0] + total


def _weighted_run_sum(prob: list[float], f: int, bv: list[float]) -> float:
    """``sum p * v`` over one chance node's branches (probabilities from ``prob[f]``) in
    ``np.add.reduceat``'s order, as the batched array learning adds them: see
    ``_reduceat_sum``."""
    total = -0.0
    for j in range(1, len(bv)):
        total += prob[f + j] * bv[j]
    return prob[f] * bv[0] + total


def _max(x: list[float]) -> float:
    """``np.maximum`` folded left to right: of equal values the later one. Only 0.0 and
    -0.0 are equal without being the same bits, so Python's ``max`` (which keeps the
    earlier) is right unless the best value is a zero."""
    top = max(x)
    if top == 0:
        for v in x:
            if not top > v:
                top = v
    return top


def _max_reduced(x: list[float]) -> float:
    """``np.max`` of ``x``: Python's ``max``, but a zero's sign from numpy (see above)."""
    top = max(x)
    if top == 0:
        return float(np.array(x).max())
    return top


def _min(x: list[float]) -> float:
    """``np.min`` of ``x``: Python's ``min``, but a zero's sign from numpy (see above)."""
    low = min(x)
    if low == 0:
        return float(np.array(x).min())
    return low


def _sum_of_at_most_8(x: list[float]) -> float:
    """``np.sum`` of at most 8 terms: 0.0 plus numpy's pairwise sum, which adds fewer than 8
    terms left to right from -0.0 and exactly 8 as four pairs of pairs."""
    if len(x) == 8:
        return 0.0 + (((x[0] + x[1]) + (x[2] + x[3])) + ((x[4] + x[5]) + (x[6] + x[7])))
    total = -0.0
    for v in x:
        total += v
    return 0.0 + total


def _certainty_equivalents(lotteries: list[tuple[list[float], list[float]]], r: float) -> list[float]:
    """``utility.certainty_equivalent`` of several lotteries of at most 8 outcomes (each
    with one outcome of positive probability at least), step for step, with one np.exp
    and one np.expm1 for all of them instead of a few numpy calls each."""
    lows, exponents, live = [], [], []
    for values, probs in lotteries:
        x = [v for v, p in zip(values, probs, strict=True) if p > 0]
        m = _min(x)
        lows.append(m)
        exponents += [-(v - m) / r for v in x]
        live.append([p for p in probs if p > 0])
    e = iter(np.exp(exponents).tolist())
    d = iter(np.expm1(exponents).tolist())
    out = []
    for m, ps in zip(lows, live, strict=True):
        exp_sum = _sum_of_at_most_8([p * next(e) for p in ps])
        expm1_sum = _sum_of_at_most_8([p * next(d) for p in ps])
        out.append(m - r * log_expectation(_sum_of_at_most_8(ps), exp_sum, expm1_sum))
    return out


def _same(a: float, b: float) -> bool:
    """Equal to the last bit (0.0 and -0.0 differ; NaN cannot occur here)."""
    return a == b and math.copysign(1.0, a) == math.copysign(1.0, b)


# -- rollback (twin of flattree.rollback) ------------------------------------------------------


def rollback(lt: ListTree, risk_tolerance: float | None = None) -> ListRollback:
    """``flattree.rollback``: chance nodes add ``p * value`` left to right (or take the
    certainty equivalent), decision nodes take the first branch within the tie tolerance."""
    r = risk_tolerance
    kind, child, cash = lt.kind, lt.child, lt.cash
    first, count = lt.first_branch, lt.branch_count
    value = [p if k == END else 0.0 for k, p in zip(kind, lt.payoff, strict=True)]
    expected = value.copy() if r else None
    best = [-1] * lt.size
    tie = [False] * lt.size
    skip = lt.skip_cash
    for chance, decision in lt.levels:
        if r:
            _chance_ce_level(lt, chance, value, r)
        _expect_level(lt, chance, expected if r else value)
        for i in decision:
            f = first[i]
            bv = [value[child[b]] if skip else cash[b] + value[child[b]] for b in range(f, f + count[i])]
            top = _max(bv)
            a = abs(top)
            threshold = top - TIE_TOLERANCE * (1.0 if a < 1.0 else a)
            near = [j for j, v in enumerate(bv) if v >= threshold]
            value[i] = top
            best[i] = f + near[0]
            tie[i] = len(near) > 1
            if expected is not None:
                b = f + near[0]
                expected[i] = expected[child[b]] if skip else cash[b] + expected[child[b]]
    return ListRollback(value, best, tie, expected)


def _expect_level(lt: ListTree, chance: list[int], values: list[float]) -> None:
    """Expected values of one level's chance nodes into ``values``: ``p * (cash + value)``
    added left to right from the first branch, as ``flattree.rollback`` adds them."""
    first, count, prob, cash, child = lt.first_branch, lt.branch_count, lt.prob, lt.cash, lt.child
    skip = lt.skip_cash
    for i in chance:
        f = first[i]
        total = prob[f] * (values[child[f]] if skip else cash[f] + values[child[f]])
        for b in range(f + 1, f + count[i]):
            total += prob[b] * (values[child[b]] if skip else cash[b] + values[child[b]])
        values[i] = total


def _chance_ce_level(lt: ListTree, nodes: list[int], value: list[float], r: float) -> None:
    """``flattree._chance_ce`` for the chance nodes of one depth: one np.exp, one np.expm1
    and one ``log_expectations`` for all of them, sums added as ``flattree._segment_sum``."""
    if not nodes:
        return
    child, prob, cash, first, count, skip = (lt.child, lt.prob, lt.cash, lt.first_branch,
                                             lt.branch_count, lt.skip_cash)
    lows, exponents = [], []
    for i in nodes:
        f = first[i]
        bv = [value[child[b]] if skip else cash[b] + value[child[b]] for b in range(f, f + count[i])]
        p = prob[f:f + count[i]]
        m = _min([v if q > 0 else _INF for v, q in zip(bv, p, strict=True)])
        lows.append(m)
        exponents += [-(v - m) / r if q > 0 else -_INF for v, q in zip(bv, p, strict=True)]
    e = np.exp(exponents).tolist()
    d = np.expm1(exponents).tolist()
    prob_sums, exp_sums, expm1_sums = [], [], []
    pos = 0
    for i in nodes:
        f = first[i]
        prob_sum, exp_sum, expm1_sum = prob[f], prob[f] * e[pos], prob[f] * d[pos]
        for j in range(1, count[i]):
            q = prob[f + j]
            prob_sum += q
            exp_sum += q * e[pos + j]
            expm1_sum += q * d[pos + j]
        prob_sums.append(prob_sum)
        exp_sums.append(exp_sum)
        expm1_sums.append(expm1_sum)
        pos += count[i]
    log_totals = log_expectations(prob_sums, exp_sums, expm1_sums).tolist()
    for i, m, log_total in zip(nodes, lows, log_totals, strict=True):
        value[i] = m - r * log_total


# -- plan reach and risk profile (twin of flattree.reach_probabilities) ------------------------


def risk_profile(lt: ListTree, rb: ListRollback) -> dict:
    """``tree_eval.risk_profile``: probability of reaching each end node under the plan."""
    kind, parent, child, prob, cash, best = lt.kind, lt.parent, lt.child, lt.prob, lt.cash, rb.best
    reach = [0.0] * lt.size
    acc = [0.0] * lt.size
    reach[lt.root] = 1.0
    # Branches are ordered by the depth of their parent, so a parent is reached first.
    for b, (par, ch) in enumerate(zip(parent, child, strict=True)):
        if kind[par] == DECISION:
            reach[ch] = reach[par] * (1.0 if best[par] == b else 0.0)
        else:
            reach[ch] = reach[par] * prob[b]
        acc[ch] = acc[par] + cash[b]
    ends = [i for i, k in enumerate(kind) if k == END and reach[i] > 0]
    sign, payoff = lt.sign, lt.payoff
    values = [sign * (acc[i] + payoff[i]) for i in ends]
    return profile_from_outcomes(values, [reach[i] for i in ends], lt.objective)


# -- clairvoyant value (twin of tree_eval.clairvoyant_value) -----------------------------------


def clairvoyant_on_lists(lt: ListTree) -> bool:
    """Whether the lists work out the clairvoyant value faster than the arrays.

    The arrays pay some forty numpy calls per level, the lists a few steps per outcome
    of every node, and outcomes grow with the nodes of a level: measured (2026-12),
    the lists took 0.5 of the array time on a 300-node alternating tree and 1.3 times
    it at 600 nodes (6 levels); on generated trees 0.3-0.7 up to about 160 nodes a
    level and 1.0-2.3 times beyond; on a 999-node chain of 499 levels 0.53.
    """
    return (lt.size <= LIST_CLAIRVOYANT_NODES
            or lt.size <= LIST_CLAIRVOYANT_NODES_PER_LEVEL * len(lt.levels))


def clairvoyant_value(lt: ListTree, risk_tolerance: float | None = None) -> float:
    """``tree_eval.clairvoyant_value``: the value distribution of every node, deepest first."""
    if lt.kind[lt.root] == END:
        v, p = [lt.payoff[lt.root]], [1.0]
    else:
        runs: dict[int, tuple[list[float], list[float]]] = {}
        for chance, decision in lt.levels:
            _level_distributions(lt, sorted(chance + decision), runs)
        v, p = runs.get(lt.root, ([], []))
    if risk_tolerance:
        return certainty_equivalent(v, p, risk_tolerance)
    return float(np.dot(np.array(v, dtype=float), np.array(p, dtype=float)))


def _level_distributions(lt: ListTree, owners: list[int], runs: dict) -> None:
    """``tree_eval._next_level``: each owner's outcomes sorted by value, equal values merged.

    A chance owner's mass at a value is the ``np.add.reduceat`` sum of its entries there.
    A decision owner's is ``tree_eval._max_pmf``'s: the step of the product over its
    branches j of P(branch j <= value), where numpy takes P(branch j <= value) as a
    difference of running sums of the entries of branch position j over the whole level
    (every owner's, in owner then value order). ``run`` keeps those running sums, fed
    the same terms in the same order; numpy also adds the zeros of the other positions,
    which changes no sum that is not zero, and a zero mass is dropped either way.
    """
    kind, payoff, child, prob, cash = lt.kind, lt.payoff, lt.child, lt.prob, lt.cash
    first, count = lt.first_branch, lt.branch_count
    coupled = any(kind[o] == DECISION for o in owners)
    run = [0.0] * MAX_LIST_WIDTH
    whole = True  # every running sum is still a whole number
    for o in owners:
        f, c = first[o], count[o]
        is_chance = kind[o] == CHANCE
        if whole and not is_chance:
            # A decision between end nodes while the running sums are whole numbers: each
            # P(branch <= value) comes out exactly 0.0 or 1.0 (a whole number plus 1.0,
            # less itself, is exact), so the product is 0.0 below the best value and 1.0
            # at it: one outcome, the best value (the first branch to reach it, as the
            # stable sort puts it first), of probability 1.0.
            values = []
            for b in range(f, f + c):
                if kind[child[b]] != END:
                    break
                values.append(payoff[child[b]] + cash[b])
            else:
                top = max(values)
                for v in values:
                    if v == top:
                        break
                runs[o] = ([v], [1.0])
                for j in range(c):
                    run[j] += 1.0
                continue
        whole = False
        # (value, probability, branch position) of every outcome of the branches, in order
        # (inline: a call per node costs more than the work on a node of a few branches).
        entries: list[tuple[float, float, int]] = []
        for j in range(c):
            b = f + j
            ch = child[b]
            cb = cash[b]
            if kind[ch] == END:
                entries.append((payoff[ch] + cb, prob[b] if is_chance else 1.0, j))  # 1.0 * p
            elif ch in runs:
                cv, cp = runs[ch]
                if len(cv) == 1:
                    entries.append((cv[0] + cb, cp[0] * prob[b] if is_chance else cp[0], j))
                elif is_chance:
                    pb = prob[b]
                    entries += [(v + cb, q * pb, j) for v, q in zip(cv, cp, strict=True)]
                else:
                    entries += [(v + cb, q, j) for v, q in zip(cv, cp, strict=True)]
        if not entries:
            continue
        entries.sort(key=_value_of)  # stable, as numpy's lexsort
        if is_chance:
            if coupled:
                for _, q, j in entries:
                    run[j] += q
            values, masses = _merged(entries)
        else:
            values, masses = _best_of(entries, run, c)
        if values:
            runs[o] = (values, masses)


def _merged(entries: list[tuple[float, float, int]]) -> tuple[list[float], list[float]]:
    """A chance node's sorted outcomes with equal values merged (the first one's bits
    kept, masses added as ``np.add.reduceat`` adds them), outcomes of no mass left out."""
    values, masses, _ = zip(*entries, strict=True)
    if len(set(values)) == len(values) and min(masses) > 0:  # (0.0 == -0.0 in a set too)
        return list(values), list(masses)
    values: list[float] = []
    masses: list[float] = []
    for v, group in groupby(entries, _value_of):
        g = list(group)
        mass = g[0][1] if len(g) == 1 else _reduceat_sum([e[1] for e in g])
        if mass > 0:
            values.append(v)
            masses.append(mass)
    return values, masses


def _best_of(entries: list[tuple[float, float, int]], run: list[float],
             c: int) -> tuple[list[float], list[float]]:
    """A decision node's outcomes once every chance node is known: the distribution of
    the best of its ``c`` branches, from its sorted entries and the level's running sums
    (see ``_level_distributions``). While some branch has no outcome yet, its difference
    is exactly 0.0 (a sum less itself), so is the product, and no mass is left: the
    product is only worked out from the value at which every branch has appeared."""
    values: list[float] = []
    masses: list[float] = []
    before = run[:c]
    unseen = set(range(c))
    previous = None
    for v, group in groupby(entries, _value_of):
        for _, q, j in group:
            run[j] += q
            unseen.discard(j)
        if unseen:
            previous = 0.0
            continue
        cdf = 1.0
        for j in range(c):
            cdf *= run[j] - before[j]
        mass = cdf if previous is None else cdf - previous
        if mass > 0:
            values.append(v)
            masses.append(mass)
        previous = cdf
    return values, masses


# -- value of learning one chance node (twin of tree_eval.learning_values) ---------------------


def chance_nodes_by_depth(lt: ListTree) -> list[int]:
    """Chance nodes, the shallowest first, document order within a depth (a stable sort)."""
    chance = [i for i, k in enumerate(lt.kind) if k == CHANCE]
    chance.sort(key=lt.depth.__getitem__)
    return chance


def learning_values(lt: ListTree, nodes: list[int], base_value: float,
                    risk_tolerance: float | None = None) -> list[float]:
    """``tree_eval.learning_values``: for each chance node, each outcome revealed in turn.

    The array code rolls the whole tree back once per revealed outcome (``_root_values``,
    whose sums are ``np.add.reduceat``'s). Revealing node k changes only the values of k
    and of its ancestors, so here the tree is rolled back once that same way, and each
    revealed outcome recomputes k and then its ancestors only, and stops as soon as a
    value comes out the same to the last bit (nothing above it can change then).
    """
    r = risk_tolerance
    if not nodes:
        return []
    base, branch_values = _root_values(lt, r)
    prob, first = lt.prob, lt.first_branch
    if r:
        rows = []  # per revealed outcome: [index in nodes, its probability, node, the node's value]
        for k, node in enumerate(nodes):
            f = first[node]
            # A single branch of probability 1 is left, whose certainty equivalent is its
            # value (m is that value, expm1(-0.0) = -0.0, the sums give q = +0.0 and
            # log1p(0.0) = 0.0, m - r * 0.0 = m: see ``utility.log_expectation``).
            rows += [[k, prob[f + j], node, v] for j, v in enumerate(branch_values[node])
                     if prob[f + j] > 0]
        _walk_up_together(lt, base, branch_values, rows, r)
        lotteries = [([row[3] for row in rows if row[0] == k], [row[1] for row in rows if row[0] == k])
                     for k in range(len(nodes))]
        return [max(0.0, ce - base_value) for ce in _certainty_equivalents(lotteries, r)]
    out = []
    rest: dict[int, float | None] = {}  # per branch: the best of its siblings (see _walk_up)
    for node in nodes:
        f = first[node]
        bv = branch_values[node]
        with_info = 0.0  # np.bincount's sum: from 0.0, in row order
        for j in range(len(bv)):
            q = prob[f + j]
            if q > 0:
                # The node's probabilities become 1 for branch j and 0 elsewhere; the zeros
                # they add change a sum that is not zero by nothing.
                x = bv[j]
                revealed = x if x != 0 else _reduceat_sum([(1.0 if i == j else 0.0) * y
                                                           for i, y in enumerate(bv)])
                with_info += q * _walk_up(lt, base, branch_values, node, revealed, rest)
        out.append(max(0.0, with_info - base_value))
    return out


def _root_values(lt: ListTree, r: float | None) -> tuple[list[float], list]:
    """Every node's value as ``tree_eval._root_values`` computes it (cash always added,
    chance sums as ``np.add.reduceat``, certainty equivalents as there), and the values
    of every node's branches (cash plus child value; None for end nodes)."""
    child, prob, cash, first, count = lt.child, lt.prob, lt.cash, lt.first_branch, lt.branch_count
    value = [p if k == END else 0.0 for k, p in zip(lt.kind, lt.payoff, strict=True)]
    branch_values: list = [None] * lt.size
    for chance, decision in lt.levels:
        for i in chance:
            f = first[i]
            branch_values[i] = [cash[b] + value[child[b]] for b in range(f, f + count[i])]
        if r:
            for i, v in zip(chance, _ce_values(lt, chance, [branch_values[i] for i in chance], r),
                            strict=True):
                value[i] = v
        else:
            for i in chance:
                value[i] = _weighted_run_sum(prob, first[i], branch_values[i])
        for i in decision:
            f = first[i]
            bv = [cash[b] + value[child[b]] for b in range(f, f + count[i])]
            branch_values[i] = bv
            value[i] = _max_reduced(bv)
    return value, branch_values


def _new_value(lt: ListTree, branch_values: list, node: int, v: float) -> tuple[int, list[float]]:
    """``node``'s parent and its branch values once ``node`` is valued ``v``."""
    parent = lt.up[node]
    b = lt.via[node]
    bv = branch_values[parent].copy()
    bv[b - lt.first_branch[parent]] = lt.cash[b] + v
    return parent, bv


def _walk_up(lt: ListTree, base: list[float], branch_values: list, node: int, v: float,
             rest: dict[int, float | None]) -> float:
    """The root's value once ``node`` is valued ``v`` (expected values).

    At a decision the new best is the better of the changed branch and the best of its
    siblings, kept in ``rest`` per branch (the outcomes of one node climb the same
    path); a best of 0 is worked out again over all branches, for the zero numpy keeps.
    """
    root, up, via, kind, prob, cash, first = (lt.root, lt.up, lt.via, lt.kind, lt.prob, lt.cash,
                                              lt.first_branch)
    while node != root:
        old = base[node]
        if v == old and (v != 0 or math.copysign(1.0, v) == math.copysign(1.0, old)):
            return base[root]  # the same to the last bit: nothing above changes
        parent = up[node]
        b = via[node]
        f = first[parent]
        x = cash[b] + v
        if kind[parent] == DECISION:
            if b not in rest:
                siblings = branch_values[parent][:b - f] + branch_values[parent][b - f + 1:]
                rest[b] = max(siblings) if siblings else None
            other = rest[b]
            v = x if other is None or x > other else other
            if v == 0:
                bv = branch_values[parent].copy()
                bv[b - f] = x
                v = _max_reduced(bv)
        else:
            bv = branch_values[parent].copy()
            bv[b - f] = x
            v = _weighted_run_sum(prob, f, bv)
        node = parent
    return v


def _ce_values(lt: ListTree, nodes: list[int], bvs: list[list[float]], r: float) -> list[float]:
    """Certainty equivalents of chance nodes from their branch values, as ``_root_values``
    takes them: one np.exp, one np.expm1 and one ``log_expectations`` for all of them."""
    prob, first = lt.prob, lt.first_branch
    lows, exponents = [], []
    for i, bv in zip(nodes, bvs, strict=True):
        p = prob[first[i]:first[i] + len(bv)]
        m = _min([v if q > 0 else _INF for v, q in zip(bv, p, strict=True)])
        lows.append(m)
        exponents += [-(v - m) / r for v, q in zip(bv, p, strict=True) if q > 0]
    e = iter(np.exp(exponents).tolist())
    d = iter(np.expm1(exponents).tolist())
    prob_sums, exp_sums, expm1_sums = [], [], []
    for i, bv in zip(nodes, bvs, strict=True):
        p = prob[first[i]:first[i] + len(bv)]
        prob_sums.append(_reduceat_sum(p))
        exp_sums.append(_reduceat_sum([q * (next(e) if q > 0 else 0.0) for q in p]))
        expm1_sums.append(_reduceat_sum([q * (next(d) if q > 0 else 0.0) for q in p]))
    log_totals = log_expectations(prob_sums, exp_sums, expm1_sums).tolist()
    return [m - r * log_total for m, log_total in zip(lows, log_totals, strict=True)]


def _walk_up_together(lt: ListTree, base: list[float], branch_values: list, rows: list,
                      r: float) -> None:
    """``_walk_up`` under a risk tolerance, for all rows at once and one depth at a time,
    so that the certainty equivalents of a depth take one np.exp and one np.expm1. In
    place: each row ends with the root's value in ``row[3]``."""
    depth, kind, root = lt.depth, lt.kind, lt.root
    live = []
    for row in rows:
        if row[2] == root:
            continue
        if _same(row[3], base[row[2]]):
            row[2], row[3] = root, base[root]
        else:
            live.append(row)
    while live:
        d = max(depth[row[2]] for row in live)
        moving = [row for row in live if depth[row[2]] == d]
        chance_rows, chance_bvs = [], []
        for row in moving:
            parent, bv = _new_value(lt, branch_values, row[2], row[3])
            row[2] = parent
            if kind[parent] == DECISION:
                row[3] = _max_reduced(bv)
            else:
                chance_rows.append(row)
                chance_bvs.append(bv)
        if chance_rows:
            new = _ce_values(lt, [row[2] for row in chance_rows], chance_bvs, r)
            for row, v in zip(chance_rows, new, strict=True):
                row[3] = v
        for row in moving:
            if row[2] != root and _same(row[3], base[row[2]]):
                row[2], row[3] = root, base[root]
        live = [row for row in live if row[2] != root]
