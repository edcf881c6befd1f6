"""Evaluate many variants of one model at once: the batch axis of sensitivity analysis.

A sweep changes one or two inputs over many points. Instead of a Python loop
over points, the inputs are laid out with an extra leading axis (the batch):
payoff tables as ``batch x alternatives x states`` payoffs, ``batch x states``
priors and ``batch x states x signals`` likelihoods; trees as
``batch x branches`` probabilities and cash flows and ``batch x nodes`` end
payoffs. One pass of array operations then values every point.

The formulas are those of ``valuation.table_eval.value_table`` (preposterior
analysis, Raiffa & Schlaifer 1961) and ``valuation.flattree.rollback`` (average
out and fold back, Raiffa 1968, ch. 2), including their tie rule (the first
alternative in document order within ``TIE_TOLERANCE`` of the best wins), so
each row equals what ``valuation.evaluate`` gives for that point; the tests
check it point by point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from valuation.expand import NO_STUDY
from valuation.flattree import CHANCE, DECISION, END, FlatTree
from valuation.limits import TIE_TOLERANCE
from valuation.parameters import Parameter, rescale_row
from valuation.table import PayoffTable
from valuation.utility import log_expectations, segment_certainty_equivalents

__all__ = ["Setting", "BatchValues", "evaluate_batch", "plan_value", "plan_label", "first_choice_label"]

#: Rows are evaluated in chunks holding at most about this many array cells, so a
#: large model swept over many points never needs its whole batch in memory at once.
CHUNK_CELLS = 4_000_000

#: One input set to one value per row: ``values[m]`` goes to row ``rows[m]``.
Setting = tuple[Parameter, np.ndarray, np.ndarray]


@dataclass
class BatchValues:
    """Values of every row, in the objective's units (costs for "min").

    ``value`` is the criterion (the certainty equivalent when a risk tolerance is
    given, else the expected value); ``plan`` a small integer array per row that
    identifies the best plan (equal rows = same plan); ``first`` the index of the
    first choice (table: option 0 = no study, k = study k; tree: root branch, -1
    when the root is not a decision); ``alternative`` the best alternative without
    information (tables; the root's choice for trees). ``curves`` holds the
    criterion value of each alternative / option per row.
    """

    value: np.ndarray
    expected: np.ndarray
    certainty_equivalent: np.ndarray | None
    plan: np.ndarray
    first: np.ndarray
    alternative: np.ndarray
    curves: dict[str, np.ndarray]


def _first_best(values: np.ndarray, axis: int) -> np.ndarray:
    """Index of the first value within the tie tolerance of the best along ``axis``.

    Same rule as ``valuation.table_eval.first_best``, one row at a time.
    """
    top = np.max(values, axis=axis, keepdims=True)
    tol = TIE_TOLERANCE * np.maximum(1.0, np.abs(top))
    return np.argmax(values >= top - tol, axis=axis)


# -- payoff tables -------------------------------------------------------------------------


def _table_arrays(t: PayoffTable, settings: list[Setting], r0: int, r1: int):
    n = r1 - r0
    prior = np.repeat(t.prior[None, :], n, axis=0)
    payoffs = np.repeat(t.payoffs[None, :, :], n, axis=0)
    costs = np.repeat(np.array([[s.cost for s in t.studies]]), n, axis=0).reshape(n, len(t.studies))
    liks = [np.repeat(s.likelihoods[None, :, :], n, axis=0) for s in t.studies]
    for spec, rows, values in settings:
        keep = (rows >= r0) & (rows < r1)
        if not keep.any():
            continue
        local, vals = rows[keep] - r0, values[keep]
        kind = spec.target[0]
        if kind == "prior":
            prior[local] = rescale_row(spec.row_base, spec.position, vals)
        elif kind == "payoff":
            payoffs[local, spec.target[1], spec.target[2]] = vals
        elif kind == "cost":
            costs[local, spec.target[1]] = vals
        else:  # likelihood
            _, k, j, _g = spec.target
            liks[k][local, j, :] = rescale_row(spec.row_base, spec.position, vals)
    return prior, payoffs, costs, liks


def _ce_rows(x: np.ndarray, p: np.ndarray, r: float, axis: int) -> np.ndarray:
    """Certainty equivalent along ``axis`` (the states, or the signals of a study), as
    ``table_eval._lottery_ce``.

    Outcomes of probability 0 are left out, and the minimum of the others is
    factored out so that no exponential overflows; the logarithm is
    ``utility.log_expectations``'s (exact for a large R, see there).
    """
    live = p > 0
    m = np.min(np.where(live, x, np.inf), axis=axis, keepdims=True)
    with np.errstate(over="ignore", invalid="ignore"):
        exponent = np.where(live, -(x - m) / r, 0.0)
    p = np.where(live, p, 0.0)
    # (Where not live the exponent is 0, so its exp and expm1 are finite, times p = 0.)
    log_total = log_expectations(np.sum(p, axis=axis), np.sum(p * np.exp(exponent), axis=axis),
                                 np.sum(p * np.expm1(exponent), axis=axis))
    # A signal of probability 0 has no live state: its NaN is masked by the caller.
    return np.squeeze(m, axis=axis) - r * log_total


def _table_batch(t: PayoffTable, prior, payoffs, costs, liks, r: float | None) -> BatchValues:
    s = t.sign
    n = payoffs.shape[0]
    x = s * payoffs
    ev = np.matmul(x, prior[:, :, None])[:, :, 0]
    crit = _ce_rows(x, prior[:, None, :], r, axis=2) if r else ev
    best0 = _first_best(crit, axis=1)
    rows = np.arange(n)
    v0 = crit[rows, best0]
    options = [v0]
    plans_ev = [ev[rows, best0]]
    by_signal = []
    for k, lik in enumerate(liks):
        joint = prior[:, :, None] * lik
        ps = joint.sum(axis=1)  # batch x signals
        live = ps > 0
        jv = np.matmul(x, joint)  # batch x alternatives x signals
        safe = np.where(live, ps, 1.0)
        if r:
            post = joint / safe[:, None, :]
            sig_crit = _ce_rows(x[:, :, :, None], post[:, None, :, :], r, axis=2)
        else:
            sig_crit = jv / safe[:, None, :]
        sig_crit = np.where(live[:, None, :], sig_crit, 0.0)
        best = np.where(live, _first_best(sig_crit, axis=1), -1)
        safe_best = np.maximum(best, 0)
        value_by_signal = np.take_along_axis(sig_crit, safe_best[:, None, :], axis=1)[:, 0, :]
        if r:
            free = _ce_rows(value_by_signal, ps, r, axis=1)  # over the signals that can occur
        else:
            free = np.sum(np.where(live, ps * value_by_signal, 0.0), axis=1)
        plan_ev = np.sum(np.where(live, np.take_along_axis(jv, safe_best[:, None, :], axis=1)[:, 0, :],
                                  0.0), axis=1)
        # A study that cannot change the decision is worth exactly nothing (as value_table).
        changes = np.any(live & (best != best0[:, None]), axis=1)
        free = np.where(changes, free, v0)
        options.append(free - costs[:, k])
        plans_ev.append(plan_ev - costs[:, k])
        by_signal.append(best)
    opt = np.stack(options, axis=1)
    chosen = _first_best(opt, axis=1)
    expected = np.stack(plans_ev, axis=1)[rows, chosen]
    width = 2 + max((len(st.signals) for st in t.studies), default=0)
    plan = np.full((n, width), -1, dtype=np.int64)
    plan[:, 0] = chosen
    plan[:, 1] = np.where(chosen == 0, best0, -1)
    for k, best in enumerate(by_signal):
        pick = chosen == k + 1
        plan[pick, 2:2 + best.shape[1]] = best[pick]
    curves = {f"alternative:{a}": s * crit[:, i] for i, a in enumerate(t.alternatives)}
    if t.studies:
        names = [NO_STUDY] + [st.name for st in t.studies]
        curves.update({f"option:{nm}": s * opt[:, i] for i, nm in enumerate(names)})
    value = s * opt[rows, chosen]
    return BatchValues(value if r else s * expected, s * expected, value if r else None, plan,
                       chosen, best0, curves)


def _table_label(t: PayoffTable, key) -> str:
    chosen = int(key[0])
    if chosen == 0:
        alt = t.alternatives[int(key[1])]
        return f"{NO_STUDY}; {alt}" if t.studies else alt
    study = t.studies[chosen - 1]
    parts = [f"{sig}: {t.alternatives[int(key[2 + g])]}" for g, sig in enumerate(study.signals)
             if key[2 + g] >= 0]
    return f"{study.name}; " + ", ".join(parts)


# -- trees -------------------------------------------------------------------------------


def _tree_arrays(tree: FlatTree, settings: list[Setting], r0: int, r1: int):
    n = r1 - r0
    prob = np.repeat(tree.prob[None, :], n, axis=0)
    cash = np.repeat(tree.cash[None, :], n, axis=0)
    payoff = np.repeat(tree.payoff[None, :], n, axis=0)
    s = tree.sign
    for spec, rows, values in settings:
        keep = (rows >= r0) & (rows < r1)
        if not keep.any():
            continue
        local, vals = rows[keep] - r0, values[keep]
        kind = spec.target[0]
        if kind == "prob":
            prob[np.ix_(local, spec.row)] = rescale_row(spec.row_base, spec.position, vals)
            continue
        # Same arithmetic as flattree._discount, so a batched row equals a parsed document.
        amount = s * (vals / spec.divisor if spec.divisor else vals)
        if kind == "cash":
            cash[local, spec.target[1]] = amount
        else:
            payoff[local, spec.target[1]] = amount
    return prob, cash, payoff


def _segments(tree: FlatTree, a: int, b: int) -> np.ndarray:
    parents = tree.parent[a:b]
    return np.concatenate(([0], np.flatnonzero(parents[1:] != parents[:-1]) + 1))


def _tree_batch(tree: FlatTree, prob, cash, payoff, r: float | None,
                forced: np.ndarray | None = None) -> BatchValues:
    """Batched rollback; ``forced`` (per node, branch index or -1) fixes some decisions."""
    n = prob.shape[0]
    is_end = tree.kind == END
    value = np.where(is_end[None, :], payoff, 0.0)
    expected = value.copy() if r else None
    best = np.full((n, tree.size), -1, dtype=np.int64)
    for a, b in reversed(tree.level_slices):
        if a == b:
            continue
        starts = _segments(tree, a, b)
        parents = tree.parent[a:b][starts]
        seg = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, b - a)))
        child = tree.child[a:b]
        p = prob[:, a:b]
        bv = cash[:, a:b] + value[:, child]
        is_chance = tree.kind[parents] == CHANCE
        if r:
            # Decision segments (no live branch) come out NaN here and take ``top`` below.
            chance_value = segment_certainty_equivalents(bv, p, starts, seg, r)
        else:
            chance_value = np.add.reduceat(p * bv, starts, axis=1)
        # Decision: the first branch (document order) within the tie tolerance of the best.
        top = np.maximum.reduceat(bv, starts, axis=1)
        tol = TIE_TOLERANCE * np.maximum(1.0, np.abs(top))
        near = bv >= (top - tol)[:, seg]
        idx = np.where(near, np.arange(b - a)[None, :], b - a)
        choice = np.minimum.reduceat(idx, starts, axis=1) + a
        if forced is not None:
            fixed = np.flatnonzero(~is_chance & (forced[parents] >= 0))
            if len(fixed):
                choice[:, fixed] = forced[parents[fixed]][None, :]
                top[:, fixed] = bv[:, forced[parents[fixed]] - a]
        node_value = np.where(is_chance[None, :], chance_value, top)
        value[:, parents] = node_value
        dec = ~is_chance
        best[:, parents[dec]] = choice[:, dec]
        if expected is not None:
            ev_b = cash[:, a:b] + expected[:, child]
            ev_node = np.add.reduceat(p * ev_b, starts, axis=1)
            picked = np.take_along_axis(ev_b, np.maximum(choice - a, 0), axis=1)
            expected[:, parents] = np.where(is_chance[None, :], ev_node, picked)
    root = tree.root
    plan = _tree_plan(tree, best, prob)
    first = best[:, root] - (tree.first_branch[root] if tree.kind[root] == DECISION else 0)
    curves = {}
    if tree.kind[root] == DECISION:
        f, c = int(tree.first_branch[root]), int(tree.branch_count[root])
        for j in range(c):
            bb = f + j
            curves[f"alternative:{tree.labels[bb]}"] = tree.sign * (cash[:, bb] + value[:, tree.child[bb]])
    else:
        first = np.full(n, -1, dtype=np.int64)
    ev_root = (expected if expected is not None else value)[:, root]
    ce = tree.sign * value[:, root] if r else None
    return BatchValues(ce if r else tree.sign * ev_root, tree.sign * ev_root, ce, plan, first,
                       first, curves)


def _tree_plan(tree: FlatTree, best: np.ndarray, prob: np.ndarray) -> np.ndarray:
    """Chosen branch of every decision the plan reaches (-1 where not reached)."""
    n = best.shape[0]
    reached = np.zeros((n, tree.size), dtype=bool)
    reached[:, tree.root] = True
    for a, b in tree.level_slices:
        if a == b:
            continue
        par = tree.parent[a:b]
        is_dec = (tree.kind[par] == DECISION)[None, :]
        chosen = best[:, par] == np.arange(a, b)[None, :]
        # As in tree_eval.plan_steps: chance branches of probability 0 lead nowhere.
        go = np.where(is_dec, chosen, prob[:, a:b] > 0)
        reached[:, tree.child[a:b]] = reached[:, par] & go
    decisions = _decision_order(tree)
    return np.where(reached[:, decisions], best[:, decisions], -1)


def _decision_order(tree: FlatTree) -> np.ndarray:
    dec = np.flatnonzero(tree.kind == DECISION)
    return dec[np.argsort(tree.depth[dec], kind="stable")]


def _tree_label(tree: FlatTree, key) -> str:
    parts = []
    for node, b in zip(_decision_order(tree), key, strict=True):
        if b < 0:
            continue
        label = tree.labels[int(b)]
        parts.append(label if node == tree.root else f"{tree.names[node]}: {label}")
    return "; ".join(parts) if parts else "(no decision)"


# -- entry points --------------------------------------------------------------------------


def row_cells(model: PayoffTable | FlatTree, risk_tolerance: float | None = None) -> int:
    """Array cells one row of a batch takes (an estimate, to size chunks and rounds)."""
    if isinstance(model, PayoffTable):
        widest = max((len(s.signals) for s in model.studies), default=1)
        factor = 2 * widest if risk_tolerance else widest
        return len(model.alternatives) * len(model.states) * (2 + factor)
    return 4 * model.size + 4 * len(model.parent)


def evaluate_batch(model: PayoffTable | FlatTree, settings: list[Setting], n_rows: int,
                   risk_tolerance: float | None = None) -> BatchValues:
    """Value ``n_rows`` variants of ``model``: row m has every setting aimed at row m applied.

    Rows are evaluated in chunks of at most about ``CHUNK_CELLS`` array cells.
    """
    r = risk_tolerance
    step = max(1, CHUNK_CELLS // max(row_cells(model, r), 1))
    # A tornado holds one setting per input: hand each chunk only the settings aimed at its
    # rows, or the chunks x settings loop costs more than the arithmetic.
    first_row = np.array([int(rows.min()) if len(rows) else n_rows for _, rows, _ in settings])
    last_row = np.array([int(rows.max()) if len(rows) else -1 for _, rows, _ in settings])
    parts = []
    for r0 in range(0, n_rows, step):
        r1 = min(n_rows, r0 + step)
        mine = [settings[m] for m in np.flatnonzero((first_row < r1) & (last_row >= r0))]
        if isinstance(model, PayoffTable):
            parts.append(_table_batch(model, *_table_arrays(model, mine, r0, r1), r))
        else:
            parts.append(_tree_batch(model, *_tree_arrays(model, mine, r0, r1), r))
    if len(parts) == 1:
        return parts[0]
    return BatchValues(
        np.concatenate([p.value for p in parts]),
        np.concatenate([p.expected for p in parts]),
        None if r is None else np.concatenate([p.certainty_equivalent for p in parts]),
        np.concatenate([p.plan for p in parts]),
        np.concatenate([p.first for p in parts]),
        np.concatenate([p.alternative for p in parts]),
        {k: np.concatenate([p.curves[k] for p in parts]) for k in parts[0].curves},
    )


def plan_value(model: PayoffTable | FlatTree, settings: list[Setting], n_rows: int, key,
               risk_tolerance: float | None = None) -> np.ndarray:
    """Value (the criterion, objective units) of following the fixed plan ``key`` in every row.

    Used to locate break-even values exactly: where two plans are worth the same. A
    decision the plan does not reach (or a signal it did not expect) is taken at its best.
    """
    r = risk_tolerance
    key = np.asarray(key)
    if isinstance(model, PayoffTable):
        return _table_plan_value(model, *_table_arrays(model, settings, 0, n_rows), key, r)
    forced = np.full(model.size, -1, dtype=np.int64)
    decisions = _decision_order(model)
    forced[decisions] = key
    bv = _tree_batch(model, *_tree_arrays(model, settings, 0, n_rows), r, forced)
    return bv.value


def _table_plan_value(t: PayoffTable, prior, payoffs, costs, liks, key, r) -> np.ndarray:
    s = t.sign
    x = s * payoffs
    chosen = int(key[0])
    if chosen == 0:
        alt = int(key[1])
        if r:
            return s * _ce_rows(x[:, alt, :], prior, r, axis=1)
        return s * np.matmul(x, prior[:, :, None])[:, alt, 0]
    k = chosen - 1
    joint = prior[:, :, None] * liks[k]
    ps = joint.sum(axis=1)
    live = ps > 0
    safe = np.where(live, ps, 1.0)
    jv = np.matmul(x, joint)
    if r:
        sig_crit = _ce_rows(x[:, :, :, None], (joint / safe[:, None, :])[:, None, :, :], r, axis=2)
    else:
        sig_crit = jv / safe[:, None, :]
    sig_crit = np.where(live[:, None, :], sig_crit, 0.0)
    n_sig = ps.shape[1]
    choice = np.asarray(key[2:2 + n_sig], dtype=np.int64)
    pick = np.where(choice[None, :] >= 0, choice[None, :], _first_best(sig_crit, axis=1))
    value_by_signal = np.take_along_axis(sig_crit, pick[:, None, :], axis=1)[:, 0, :]
    if r:
        free = _ce_rows(value_by_signal, ps, r, axis=1)  # over the signals that can occur
    else:
        free = np.sum(np.where(live, np.take_along_axis(jv, pick[:, None, :], axis=1)[:, 0, :], 0.0),
                      axis=1)
    return s * (free - costs[:, k])


def plan_label(model: PayoffTable | FlatTree, key) -> str:
    """Compact text of the plan identified by ``key`` (one row of ``BatchValues.plan``).

    Payoff table: ``"No study; Deep geothermal well"`` or
    ``"Tellurion seismic survey; favourable: Deep geothermal well, unfavourable: Stay on gas"``.
    Tree: the root's choice, then ``"decision name: choice"`` for each later decision the
    plan reaches, shallowest first.
    """
    if isinstance(model, PayoffTable):
        return _table_label(model, key)
    return _tree_label(model, key)


def first_choice_label(model: PayoffTable | FlatTree, index: int) -> str | None:
    """The first choice: the option (no study / a study) of a table, the root's choice of a tree."""
    if isinstance(model, PayoffTable):
        if not model.studies:
            return None
        return NO_STUDY if index == 0 else model.studies[index - 1].name
    if index < 0:
        return None
    return model.labels[int(model.first_branch[model.root]) + int(index)]
