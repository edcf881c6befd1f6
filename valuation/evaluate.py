"""Entry points of the core: validate, evaluate and expand model documents.

``evaluate`` returns one plain-JSON result document (see the README, "Result
document") whatever the kind of model, so the command line, the REST API, the
pages and the memo all show the same figures.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from valuation import small_tree
from valuation.checks import Problems, describe
from valuation.errors import ModelValidationError, Problem
from valuation.expand import NO_STUDY, expand_table, expanded_size
from valuation.flattree import CHANCE, DECISION, FlatTree, build_tree, rollback
from valuation.limits import DETAIL_NODE_LIMIT, EXPAND_NODE_LIMIT, INFORMATION_NODE_LIMIT
from valuation.table import PayoffTable, parse_payoff_table
from valuation.table_eval import TableValues, near_best, value_table
from valuation.tree_eval import (
    clairvoyant_value,
    learning_value,
    learning_values,
    node_details,
    plan_steps,
    plan_text,
    profile_from_outcomes,
    risk_profile,
)
from valuation.utility import check_risk_tolerance

__all__ = ["validate", "evaluate", "expand", "parse", "MAX_LEARNING_NODES"]

#: Value of learning is reported for at most this many chance nodes, the shallowest first.
MAX_LEARNING_NODES = 25


def parse(doc: Any) -> PayoffTable | FlatTree:
    """Validate ``doc`` and return its parsed form; raise ModelValidationError listing every problem."""
    problems = Problems()
    if not isinstance(doc, dict):
        raise ModelValidationError([Problem("", f"a model must be a JSON object, got {describe(doc)}")])
    kind = doc.get("kind")
    if kind == "payoff_table":
        model = parse_payoff_table(doc, problems)
    elif kind == "tree":
        model = build_tree(doc, problems)
    else:
        problems.add("kind", f"must be 'payoff_table' or 'tree', got {describe(kind)}")
        model = None
    problems.raise_if_any()
    assert model is not None
    return model


def validate(doc: Any) -> list[Problem]:
    """Every problem of ``doc`` (an empty list when it is valid)."""
    try:
        parse(doc)
    except ModelValidationError as exc:
        return exc.problems
    return []


def expand(doc: Any) -> dict:
    """The general-tree document equivalent to ``doc`` (a tree is returned unchanged)."""
    model = parse(doc)
    if isinstance(model, PayoffTable):
        return expand_table(model)
    return doc


def evaluate(doc: Any, *, risk_tolerance: float | None = None) -> dict:
    """Validate and evaluate a model document; return the result document.

    Parameters
    ----------
    doc : dict
        A payoff table or a general tree (see the README).
    risk_tolerance : float, optional
        Exponential-utility risk tolerance R in money; when given, choices maximise
        the certainty equivalent and EVPI, EVSI and net values are exact buying prices.

    Raises
    ------
    ModelValidationError
        Listing every problem with its location.
    ParameterError
        For a risk tolerance that is not a positive finite number.
    """
    r = check_risk_tolerance(risk_tolerance)
    model = parse(doc)
    if isinstance(model, PayoffTable):
        return _evaluate_table(model, r)
    return _evaluate_tree(model, r)


def _header(model, r) -> dict:
    rate = model.discount_rate
    basis = f"present value at {rate * 100:.4g}% a year" if rate else "expected value"
    return {
        "kind": "payoff_table" if isinstance(model, PayoffTable) else "tree",
        "title": model.title,
        "currency": model.currency,
        "objective": model.objective,
        "discount_rate": rate,
        "value_basis": basis if model.objective == "max" else basis.replace("value", "cost"),
        "criterion": "exponential_utility" if r else "expected_value",
        "risk_tolerance": r,
        "warnings": [],
    }


# -- payoff tables ----------------------------------------------------------------------


def _evaluate_table(t: PayoffTable, r) -> dict:
    tv = value_table(t, r)
    s = t.sign
    out = _header(t, r)
    chosen = tv.chosen_option
    if chosen == 0:
        plan_ev = float(tv.ev_by_alternative[tv.best])
    else:
        plan_ev = tv.studies[chosen - 1].plan_ev - t.studies[chosen - 1].cost
    out["expected_value"] = s * plan_ev
    if r:
        out["certainty_equivalent"] = s * float(tv.option_values[chosen])
    out["policy"] = _table_policy(t, tv)
    without = {"expected_value": s * float(tv.ev_by_alternative[tv.best]),
               "best_alternative": t.alternatives[tv.best]}
    if r:
        without["certainty_equivalent"] = s * tv.value_without
    out["without_information"] = without
    out["evpi"] = tv.evpi
    out["alternatives"] = [_alternative_entry(t, tv, i, r) for i in range(len(t.alternatives))]
    out["studies"] = [_study_entry(t, tv, k) for k in range(len(t.studies))]
    out["information_values"] = []
    out["risk_profile"] = _table_risk_profile(t, tv)
    out["ties"] = _table_ties(t, tv)
    out["nodes"] = _table_nodes(t, r, out["warnings"])
    return out


def _alternative_entry(t, tv: TableValues, i, r) -> dict:
    entry = {"name": t.alternatives[i], "expected_value": t.sign * float(tv.ev_by_alternative[i])}
    if r:
        entry["certainty_equivalent"] = t.sign * float(tv.ce_by_alternative[i])
    return entry


def _table_policy(t: PayoffTable, tv: TableValues) -> dict:
    best0 = t.alternatives[tv.best]
    steps = []
    if tv.chosen_option == 0:
        if t.studies:
            steps.append({"node": "study-choice", "name": "Study", "choice": NO_STUDY, "when": []})
        steps.append({"node": "decide", "name": "Alternative", "choice": best0, "when": []})
        text = (f"Commission no study; choose '{best0}'." if t.studies else f"Choose '{best0}'.")
        return {"text": text, "steps": steps}
    k = tv.chosen_option - 1
    study, sv = t.studies[k], tv.studies[k]
    steps.append({"node": "study-choice", "name": "Study", "choice": study.name, "when": []})
    clauses = []
    for g, sig in enumerate(study.signals):
        if sv.best_by_signal[g] < 0:
            continue
        alt = t.alternatives[sv.best_by_signal[g]]
        steps.append({"node": f"study{k}/g{g}/decide", "name": f"Alternative after '{sig}'",
                      "choice": alt,
                      "when": [{"node": f"study{k}/signal", "name": f"{study.name}: signal",
                                "outcome": sig}]})
        clauses.append(f"if '{sig}' then '{alt}'")
    return {"text": f"Commission '{study.name}'; " + "; ".join(clauses) + ".", "steps": steps}


def _study_entry(t: PayoffTable, tv: TableValues, k: int) -> dict:
    study, sv = t.studies[k], tv.studies[k]
    s = t.sign
    rev = sv.revision
    live = ~rev.zero_signals
    best_name = t.alternatives[tv.best]
    net = sv.evsi - study.cost
    if not sv.changes_decision:
        note = (f"Worth nothing: whatever it reports, '{best_name}' stays the best choice, "
                "so the study cannot change the decision.")
    elif net > 0:
        note = f"Pays for itself: worth up to {sv.evsi:,.2f}, costs {study.cost:,.2f}."
    else:
        note = (f"Does not pay for itself: worth at most {sv.evsi:,.2f} but costs "
                f"{study.cost:,.2f}.")
    zero = [sig for g, sig in enumerate(study.signals) if rev.zero_signals[g]]
    if zero:
        note += f" Signals that cannot occur under this prior: {', '.join(zero)}."
    return {
        "name": study.name,
        "cost": study.cost,
        "evsi": sv.evsi,
        "net_value": net,
        "efficiency": (sv.evsi / tv.evpi) if tv.evpi > 0 else None,
        "max_fee": sv.evsi,
        "signal_probabilities": {sig: float(rev.signal_probability[g])
                                 for g, sig in enumerate(study.signals)},
        "posteriors": {sig: ({st: float(rev.posterior[j, g]) for j, st in enumerate(t.states)}
                             if live[g] else None)
                       for g, sig in enumerate(study.signals)},
        "joint": {st: {sig: float(rev.joint[j, g]) for g, sig in enumerate(study.signals)}
                  for j, st in enumerate(t.states)},
        "best_alternative_by_signal": {sig: (t.alternatives[sv.best_by_signal[g]] if live[g]
                                             else None) for g, sig in enumerate(study.signals)},
        "value_by_signal": {sig: (s * float(sv.value_by_signal[g]) if live[g] else None)
                            for g, sig in enumerate(study.signals)},
        "expected_value_with_study": s * float(tv.option_values[k + 1]),
        "changes_decision": sv.changes_decision,
        "note": note,
        "zero_probability_signals": zero,
        "source": study.source,
    }


def _table_risk_profile(t: PayoffTable, tv: TableValues) -> dict:
    x = t.sign * t.payoffs
    if tv.chosen_option == 0:
        values, probs = x[tv.best], t.prior
    else:
        k = tv.chosen_option - 1
        sv, cost = tv.studies[k], t.studies[k].cost
        vals, ps = [], []
        for g in np.flatnonzero(sv.best_by_signal >= 0):
            vals.append(x[sv.best_by_signal[g]] - cost)
            ps.append(sv.revision.joint[:, g])
        values, probs = np.concatenate(vals), np.concatenate(ps)
    return profile_from_outcomes(t.sign * values, probs, t.objective)


def _table_ties(t: PayoffTable, tv: TableValues) -> list[dict]:
    ties = []
    # ``near_best`` is the rule that made the choice (``first_best``), so the names
    # listed are the ones it weighed as tied.
    if tv.best_tie:
        tied = [t.alternatives[i] for i in near_best(tv.criterion_by_alternative).tolist()]
        ties.append({"node": "decide", "branches": tied, "chosen": t.alternatives[tv.best]})
    if tv.option_tie:
        names = [NO_STUDY] + [s.name for s in t.studies]
        tied = [names[i] for i in near_best(tv.option_values).tolist()]
        ties.append({"node": "study-choice", "branches": tied, "chosen": names[tv.chosen_option]})
    return ties


def _table_nodes(t: PayoffTable, r, warnings: list[str]) -> dict:
    if expanded_size(t) > min(DETAIL_NODE_LIMIT, EXPAND_NODE_LIMIT):
        warnings.append(f"node details omitted: the expanded tree has more than "
                        f"{DETAIL_NODE_LIMIT:,} nodes")
        return {}
    problems = Problems()
    tree = build_tree(expand_table(t), problems)
    if tree is None:
        # Only a table whose amounts total within rounding of AMOUNT_TOTAL_LIMIT: its tree
        # adds the same amounts up in another order (see table._check_amount_total).
        warnings.append(f"node details omitted: {problems.as_list()[0]}")
        return {}
    return node_details(tree, rollback(tree, risk_tolerance=r), r)


# -- general trees -------------------------------------------------------------------


class _TreeForm:
    """A tree as numpy arrays or, when small, as lists, with each evaluation step for that form.

    valuation.small_tree gives the same figures to the last bit on Python lists, which
    a tree of a few hundred nodes reads faster than arrays; ``as_lists`` decides which
    trees it takes. The choice is made here once, so the evaluation reads the same
    either way; ``view`` is the form the element-by-element steps read.
    """

    def __init__(self, tree: FlatTree, r):
        self.tree, self.r = tree, r
        self.lists = small_tree.as_lists(tree, r)
        self.view = tree if self.lists is None else self.lists

    def rollback(self):
        if self.lists is None:
            return rollback(self.tree, risk_tolerance=self.r)
        return small_tree.rollback(self.lists, self.r)

    def clairvoyant_value(self) -> float:
        if self.lists is not None and small_tree.clairvoyant_on_lists(self.lists):
            return small_tree.clairvoyant_value(self.lists, self.r)
        return clairvoyant_value(self.tree, self.r)

    def chance_nodes_by_depth(self) -> list[int]:
        if self.lists is not None:
            return small_tree.chance_nodes_by_depth(self.lists)
        tree = self.tree
        chance = np.flatnonzero(tree.kind == CHANCE)
        return chance[np.argsort(tree.depth[chance], kind="stable")].tolist()

    def learning_values(self, chance: list[int], rb) -> list[float]:
        if self.lists is None:
            return learning_values(self.tree, chance, rb, self.r)
        return small_tree.learning_values(self.lists, chance, float(rb.value[self.tree.root]),
                                          self.r)

    def risk_profile(self, rb) -> dict:
        if self.lists is None:
            return risk_profile(self.tree, rb)
        return small_tree.risk_profile(self.lists, rb)

    def tied_nodes(self, rb, limit: int) -> list[int]:
        if self.lists is None:
            return np.flatnonzero(rb.tie)[:limit].tolist()
        return [i for i, t in enumerate(rb.tie) if t][:limit]


def _evaluate_tree(tree: FlatTree, r) -> dict:
    form = _TreeForm(tree, r)
    view = form.view
    rb = form.rollback()
    s = tree.sign
    out = _header(tree, r)
    root = tree.root
    ev_root = float((rb.expected if rb.expected is not None else rb.value)[root])
    out["expected_value"] = s * ev_root
    if r:
        out["certainty_equivalent"] = s * float(rb.value[root])
    steps, truncated = plan_steps(view, rb)
    if truncated:
        out["warnings"].append(f"the plan lists its first {len(steps)} decisions only")
    out["policy"] = {"text": plan_text(steps, truncated), "steps": steps}
    out["alternatives"] = _root_alternatives(view, rb, r)
    best_root = (tree.labels[int(rb.best[root])] if view.kind[root] == DECISION else None)
    without = {"expected_value": s * ev_root, "best_alternative": best_root}
    if r:
        without["certainty_equivalent"] = s * float(rb.value[root])
    out["without_information"] = without
    out["studies"] = []
    if tree.size <= INFORMATION_NODE_LIMIT:
        out["evpi"] = max(0.0, form.clairvoyant_value() - float(rb.value[root]))
        out["information_values"] = _learning_values(form, rb, out["warnings"])
    else:
        out["evpi"] = None
        out["information_values"] = []
        out["warnings"].append(f"EVPI and the value of learning each chance node are computed "
                               f"for trees of up to {INFORMATION_NODE_LIMIT:,} nodes")
    out["risk_profile"] = form.risk_profile(rb)
    out["ties"] = [{"node": tree.ids[i], "chosen": tree.labels[int(rb.best[i])],
                    "branches": _tied_labels(view, rb, i)} for i in form.tied_nodes(rb, 100)]
    if tree.size <= DETAIL_NODE_LIMIT:
        out["nodes"] = node_details(view, rb, r)
    else:
        out["nodes"] = {}
        out["warnings"].append(f"node details omitted for trees over {DETAIL_NODE_LIMIT:,} nodes")
    return out


def _root_alternatives(tree: FlatTree, rb, r) -> list[dict]:
    root = tree.root
    if tree.kind[root] != DECISION:
        return []
    f, c = int(tree.first_branch[root]), int(tree.branch_count[root])
    out = []
    ev = rb.expected if rb.expected is not None else rb.value
    for b in range(f, f + c):
        child = int(tree.child[b])
        entry = {"name": tree.labels[b],
                 "expected_value": tree.sign * float(tree.cash[b] + ev[child])}
        if r:
            entry["certainty_equivalent"] = tree.sign * float(tree.cash[b] + rb.value[child])
        out.append(entry)
    return out


def _tied_labels(tree: FlatTree, rb, node: int) -> list[str]:
    f, c = int(tree.first_branch[node]), int(tree.branch_count[node])
    vals = [tree.cash[b] + rb.value[tree.child[b]] for b in range(f, f + c)]
    # The rollback's own rule, so the branches listed are the ones it weighed as tied.
    return [tree.labels[f + j] for j in near_best(vals).tolist()]


def _learning_values(form: _TreeForm, rb, warnings: list[str]) -> list[dict]:
    chance = form.chance_nodes_by_depth()
    if len(chance) > MAX_LEARNING_NODES:
        warnings.append(f"value of learning reported for the {MAX_LEARNING_NODES} chance nodes "
                        "nearest the root only")
        chance = chance[:MAX_LEARNING_NODES]
    values = form.learning_values(chance, rb)
    tree = form.tree
    return [{"node": tree.ids[i], "name": tree.names[i], "value": v}
            for i, v in zip(chance, values, strict=True)]


def value_of_learning(doc: Any, node_id: str, *, risk_tolerance: float | None = None) -> float:
    """Value of learning the outcome of chance node ``node_id`` before the first decision."""
    r = check_risk_tolerance(risk_tolerance)
    model = parse(doc)
    if isinstance(model, PayoffTable):
        model = parse(expand_table(model))
    try:
        node = model.ids.index(node_id)
    except ValueError:
        raise ModelValidationError([Problem("node", f"no node with id {node_id!r}")]) from None
    if model.kind[node] != CHANCE:
        raise ModelValidationError([Problem("node", f"{node_id!r} is not a chance node")])
    return learning_value(model, node, rollback(model, risk_tolerance=r), r)
