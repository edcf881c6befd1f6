"""Reports on a rolled-back tree: the plan in words, node details, risk profile, VOI.

Value of information on a general tree treats each chance node as its own
uncertainty, as drawn: learning node C before the first decision is worth
sum_k P(k) V(tree | C = k) - V(tree) (common practice: "clairvoyance" on one
node). EVPI of the whole tree learns every chance node at once; because the
subtrees under a decision share no chance node, their clairvoyant values are
independent and the distribution of the best of them follows from the product
of their distribution functions.
"""

from __future__ import annotations

import sys

import numpy as np

from valuation.flattree import (
    CHANCE,
    DECISION,
    END,
    FlatTree,
    Rollback,
    reach_probabilities,
    rollback,
    spans,
)
from valuation.utility import certainty_equivalent, segment_certainty_equivalents

__all__ = [
    "plan_steps",
    "plan_text",
    "node_details",
    "risk_profile",
    "learning_value",
    "clairvoyant_value",
    "MAX_PLAN_STEPS",
]

MAX_PLAN_STEPS = 1000
_KIND_NAMES = {END: "end", CHANCE: "chance", DECISION: "decision"}


def _branches(tree: FlatTree, node: int) -> range:
    f = int(tree.first_branch[node])
    return range(f, f + int(tree.branch_count[node])) if f >= 0 else range(0)


def plan_steps(tree: FlatTree, rb: Rollback, prob=None) -> tuple[list[dict], bool]:
    """Each decision the plan reaches, with the chance outcomes that lead to it."""
    p_all = tree.prob if prob is None else prob
    steps: list[dict] = []
    stack: list[tuple[int, tuple]] = [(tree.root, ())]
    while stack:
        node, when = stack.pop()
        k = tree.kind[node]
        if k == DECISION:
            b = int(rb.best[node])
            if len(steps) >= MAX_PLAN_STEPS:
                return steps, True
            steps.append({"node": tree.ids[node], "name": tree.names[node],
                          "choice": tree.labels[b],
                          "when": [{"node": n, "name": nm, "outcome": o} for n, nm, o in when]})
            stack.append((int(tree.child[b]), when))
        elif k == CHANCE:
            for b in reversed(_branches(tree, node)):
                if p_all[b] > 0:
                    cond = (*when, (tree.ids[node], tree.names[node], tree.labels[b]))
                    stack.append((int(tree.child[b]), cond))
    return steps, False


def plan_text(steps: list[dict], truncated: bool, limit: int = 60) -> str:
    """The plan in words: 'At X choose Y. If Z is W: at ... choose ...'."""
    if not steps:
        return "No decision to take: the tree holds only chance and end nodes."
    parts = []
    for step in steps[:limit]:
        cond = " and ".join(f"'{w['name']}' is '{w['outcome']}'" for w in step["when"])
        action = f"at '{step['name']}' choose '{step['choice']}'"
        parts.append(f"If {cond}: {action}." if cond else action[0].upper() + action[1:] + ".")
    if len(steps) > limit or truncated:
        parts.append(f"(and further decisions: {len(steps) - limit if len(steps) > limit else 0}+"
                     " more in the step list)")
    return " ".join(parts)


def node_details(tree: FlatTree, rb: Rollback, risk_tolerance) -> dict:
    """Value, best branch and pruned branches of every node, in the objective's units.

    Takes a tree and a rollback as arrays or as lists (``valuation.small_tree``); it
    reads them one element at a time, which lists do several times faster.
    """
    sign = tree.sign
    kind, best = _as_list(tree.kind), _as_list(rb.best)
    first, count = _as_list(tree.first_branch), _as_list(tree.branch_count)
    shown = _as_list(rb.expected if rb.expected is not None else rb.value)
    ce = _as_list(rb.value) if risk_tolerance else None
    names, labels = tree.names, tree.labels
    out = {}
    for i, nid in enumerate(tree.ids):
        k = kind[i]
        # Python floats (the lists hold them), so no float() is needed.
        entry = {"kind": _KIND_NAMES[k], "name": names[i], "value": sign * shown[i],
                 "best_branch": None, "pruned": []}
        if ce is not None:
            entry["certainty_equivalent"] = sign * ce[i]
        if k == DECISION:
            b = best[i]
            entry["best_branch"] = labels[b]
            entry["pruned"] = labels[first[i]:b] + labels[b + 1:first[i] + count[i]]
        out[nid] = entry
    return out


def _as_list(x) -> list:
    return x.tolist() if isinstance(x, np.ndarray) else x


def risk_profile(tree: FlatTree, rb: Rollback, max_points: int = 5000) -> dict:
    """Distribution of the plan's outcome: points, cumulative, chance of loss, extremes."""
    reach, acc = reach_probabilities(tree, rb.best)
    ends = np.flatnonzero((tree.kind == END) & (reach > 0))
    values = tree.sign * (acc[ends] + tree.payoff[ends])
    return profile_from_outcomes(values, reach[ends], tree.objective, max_points)


def profile_from_outcomes(values, probs, objective: str, max_points: int = 5000) -> dict:
    """Aggregate equal outcomes, sort ascending, and summarise."""
    values = np.asarray(values, dtype=float)
    probs = np.asarray(probs, dtype=float)
    uniq, inverse = np.unique(_rounded(values), return_inverse=True)
    mass = np.bincount(inverse, weights=probs, minlength=len(uniq))
    note = None
    if len(uniq) > max_points:
        # Keep the chart readable: merge neighbouring outcomes into equal-count groups.
        uniq, mass = _merge_groups(uniq, mass, max_points)
        note = f"outcomes merged into {max_points} groups for display"
    cumulative = np.cumsum(mass).tolist()
    expected = float(np.dot(values, probs))
    points, masses = uniq.tolist(), mass.tolist()  # Python floats: no conversion per point
    out = {
        "outcomes": [{"value": v, "probability": p} for v, p in zip(points, masses, strict=True)],
        "cumulative": [{"value": v, "probability": min(1.0, c)}
                       for v, c in zip(points, cumulative, strict=True)],
        "probability_of_loss": float(mass[uniq < 0].sum()) if objective == "max" else None,
        "worst": points[0] if objective == "max" else points[-1],
        "best": points[-1] if objective == "max" else points[0],
        "expected": expected,
    }
    if note:
        out["note"] = note
    return out



#: ``np.round(x, 9)`` multiplies by 1e9 first, so it overflows from about 1.8e299 on; a
#: double that large is a whole number anyway (every one beyond 2**52 is).
_ROUNDABLE = sys.float_info.max / 1e10


def _rounded(values: np.ndarray) -> np.ndarray:
    """Outcomes to 9 decimals, so that path totals a rounding step apart count as one;
    beyond ``_ROUNDABLE`` (within the amounts' limit) they are kept as they are."""
    if not len(values) or float(np.abs(values).max()) < _ROUNDABLE:
        return np.round(values, 9)
    small = np.abs(values) < _ROUNDABLE
    return np.where(small, np.round(np.where(small, values, 0.0), 9), values)


def _merge_groups(uniq: np.ndarray, mass: np.ndarray, groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Weighted mean value and total mass of ``groups`` runs of neighbouring outcomes.

    The runs are those of ``np.array_split`` (the first ``len % groups`` one longer),
    and each run is summed as ``np.average`` and ``ndarray.sum`` would sum it, as
    rows of a matrix instead of one call per run.
    """
    size, extra = divmod(len(uniq), groups)
    head = extra * (size + 1)
    weights = mass + 1e-300

    def run_sums(x: np.ndarray) -> np.ndarray:
        parts = [x[:head].reshape(extra, size + 1).sum(axis=1)] if extra else []
        if size:
            parts.append(x[head:].reshape(-1, size).sum(axis=1))
        return np.concatenate(parts)

    return run_sums(np.multiply(uniq, weights)) / run_sums(weights), run_sums(mass)


def learning_value(tree: FlatTree, node: int, base: Rollback, risk_tolerance=None) -> float:
    """Value of learning chance node ``node`` before the first decision (internal units)."""
    branches = list(_branches(tree, node))
    vals, probs = [], []
    for b in branches:
        p = float(tree.prob[b])
        if p <= 0:
            continue
        forced = tree.prob.copy()
        forced[branches] = 0.0
        forced[b] = 1.0
        vals.append(float(rollback(tree, risk_tolerance=risk_tolerance, prob=forced).value[
            tree.root]))
        probs.append(p)
    if risk_tolerance:
        with_info = certainty_equivalent(vals, probs, risk_tolerance)
    else:
        with_info = float(np.dot(vals, probs))
    return max(0.0, with_info - float(base.value[tree.root]))


def clairvoyant_value(tree: FlatTree, risk_tolerance=None) -> float:
    """Value of the tree when every chance node is revealed before the first decision.

    Works level by level like the rollback: the value distributions of all nodes at
    one depth are held in three flat arrays (owner node, value, probability), sorted
    by owner then value, so each depth costs a fixed number of numpy calls instead of
    a few per node.
    """
    if tree.kind[tree.root] == END:
        v, p = np.array([tree.payoff[tree.root]]), np.array([1.0])
    else:
        pool = _Pool.empty(tree.size)
        for a, b in reversed(tree.level_slices):
            if a < b:
                pool = _next_level(tree, pool, a, b)
        v, p = pool.value, pool.prob
    if risk_tolerance:
        return certainty_equivalent(v, p, risk_tolerance)
    return float(np.dot(v, p))


class _Pool:
    """Distributions of the nodes finished at the last level, one run per node."""

    __slots__ = ("count", "prob", "start", "value")

    def __init__(self, value, prob, start, count):
        self.value, self.prob = value, prob
        self.start, self.count = start, count

    @classmethod
    def empty(cls, n_nodes: int) -> _Pool:
        return cls(np.zeros(0), np.zeros(0), np.zeros(n_nodes, np.int64),
                   np.zeros(n_nodes, np.int64))


def _next_level(tree: FlatTree, pool: _Pool, a: int, b: int) -> _Pool:
    """Distributions of the parents of branches ``a:b`` from those of their children."""
    child = tree.child[a:b]
    leaf = tree.kind[child] == END
    counts = np.where(leaf, 1, pool.count[child])
    branch = np.repeat(np.arange(a, b), counts)
    # An end node never owns a run: its start stays 0, so its one entry reads position 0
    # (a placeholder, replaced by its payoff below).
    pos = spans(pool.start[child], counts)
    leaf_e = leaf[branch - a]
    if len(pool.value):
        value = np.where(leaf_e, tree.payoff[tree.child[branch]], pool.value[pos])
        prob = np.where(leaf_e, 1.0, pool.prob[pos])
    else:
        value, prob = tree.payoff[tree.child[branch]], np.ones(len(branch))
    value = value + tree.cash[branch]
    owner = tree.parent[branch]
    chance = tree.kind[owner] == CHANCE
    prob = np.where(chance, prob * tree.prob[branch], prob)
    order = np.lexsort((value, owner))
    owner, value, prob, branch, chance = (owner[order], value[order], prob[order],
                                          branch[order], chance[order])
    # one group per (owner, value); ``last`` is each group's last entry
    new = np.empty(len(owner), dtype=bool)
    new[0] = True
    new[1:] = (owner[1:] != owner[:-1]) | (value[1:] != value[:-1])
    starts = np.flatnonzero(new)
    last = np.append(starts[1:], len(owner)) - 1
    g_owner, g_value = owner[starts], value[starts]
    g_prob = np.add.reduceat(prob, starts)
    g_chance = chance[starts]
    if not g_chance.all():
        g_prob = np.where(g_chance, g_prob, _max_pmf(tree, owner, prob, branch, last, g_owner))
    keep = g_prob > 0
    g_owner, g_value, g_prob = g_owner[keep], g_value[keep], g_prob[keep]
    # Each node's run is read once, by its parent at the next level, so the per-node
    # offsets are overwritten in place rather than copied per level.
    owners, first_at, n_at = np.unique(g_owner, return_index=True, return_counts=True)
    pool.start[owners] = first_at
    pool.count[owners] = n_at
    return _Pool(g_value, g_prob, pool.start, pool.count)


def _max_pmf(tree: FlatTree, owner, prob, branch, last, g_owner) -> np.ndarray:
    """Probability of each (owner, value) group being the best of the owner's branches.

    The branches under a decision share no chance node, so they are independent:
    P(max <= v) is the product over branches of P(branch <= v), and the mass at v
    is the step of that product. Groups of chance owners get a meaningless value
    here; the caller keeps only those of decision owners.
    """
    local = branch - tree.first_branch[owner]
    seg_start = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    seg_of = np.repeat(np.arange(len(seg_start)), np.diff(np.append(seg_start, len(owner))))
    k_of = tree.branch_count[owner]
    cdf = np.ones(len(last))
    for j in range(int(k_of.max())):
        w = np.where(local == j, prob, 0.0)
        run = np.cumsum(w)
        before = np.where(seg_start > 0, run[seg_start - 1], 0.0)
        f_j = run[last] - before[seg_of[last]]
        cdf *= np.where(k_of[last] > j, f_j, 1.0)
    g_new = np.r_[True, g_owner[1:] != g_owner[:-1]]
    step = np.where(g_new, cdf, cdf - np.r_[0.0, cdf[:-1]])
    return np.clip(step, 0.0, None)


def _root_values(tree: FlatTree, prob_rows: np.ndarray, risk_tolerance=None) -> np.ndarray:
    """Root value for each row of branch probabilities, all rows rolled back together.

    Values only (no choices are kept), so ties need no rule here; ``rollback`` stays
    the reference, and the tests hold the two equal.
    """
    r = risk_tolerance
    rows = prob_rows.shape[0]
    value = np.tile(np.where(tree.kind == END, tree.payoff, 0.0), (rows, 1))
    for a, b in reversed(tree.level_slices):
        if a == b:
            continue
        parents_all = tree.parent[a:b]
        starts = np.concatenate(([0], np.flatnonzero(parents_all[1:] != parents_all[:-1]) + 1))
        parents = parents_all[starts]
        bv = tree.cash[a:b][None, :] + value[:, tree.child[a:b]]
        p = prob_rows[:, a:b]
        if r:
            seg = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, b - a)))
            # Segments with no live branch (decision nodes) come out NaN, and are not taken.
            chance = segment_certainty_equivalents(bv, p, starts, seg, r)
        else:
            chance = np.add.reduceat(p * bv, starts, axis=1)
        top = np.maximum.reduceat(bv, starts, axis=1)
        value[:, parents] = np.where((tree.kind[parents] == CHANCE)[None, :], chance, top)
    return value[:, tree.root]


def learning_values(tree: FlatTree, nodes, base: Rollback, risk_tolerance=None) -> list[float]:
    """``learning_value`` of several chance nodes at once: one batched rollback for all
    their revealed outcomes instead of one rollback per outcome."""
    nodes = np.asarray(nodes, dtype=np.int64)
    if not len(nodes):
        return []
    first, count = tree.first_branch[nodes], tree.branch_count[nodes]
    # One row per revealed outcome (node k, branch b of positive probability): the
    # tree's probabilities with node k's branches set to 0 and branch b to 1.
    branch = spans(first, count)
    live = tree.prob[branch] > 0
    owners, chosen = np.repeat(np.arange(len(nodes)), count)[live], branch[live]
    weights = tree.prob[chosen]
    rows = np.repeat(tree.prob[None, :], len(chosen), axis=0)
    per_row = count[owners]
    rows[np.repeat(np.arange(len(chosen)), per_row), spans(first[owners], per_row)] = 0.0
    rows[np.arange(len(chosen)), chosen] = 1.0
    revealed = _root_values(tree, rows, risk_tolerance)
    if risk_tolerance:
        with_info = [certainty_equivalent(revealed[owners == k], weights[owners == k],
                                          risk_tolerance) for k in range(len(nodes))]
    else:
        with_info = np.bincount(owners, weights=weights * revealed, minlength=len(nodes))
    base_value = float(base.value[tree.root])
    return [max(0.0, float(v) - base_value) for v in with_info]

