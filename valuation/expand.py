"""Expand a payoff table into the equivalent general tree, for inspection and drawing.

Order of the tree: the study choice first (only when there are studies), then the
study's signal, then the alternative, then the state. State probabilities under a
signal are the posteriors; under "No study" the prior. Node ids are stable for a
given table shape, so outcomes recorded against them survive new versions.
"""

from __future__ import annotations

from valuation.bayes import revise
from valuation.errors import ModelValidationError, Problem
from valuation.limits import EXPAND_NODE_LIMIT
from valuation.table import PayoffTable

__all__ = ["expand_table", "expanded_size", "NO_STUDY"]

NO_STUDY = "No study"


def expanded_size(t: PayoffTable) -> int:
    """Number of nodes the expanded tree would have."""
    per_decision = 1 + len(t.alternatives) * (1 + len(t.states))
    total = per_decision
    for s in t.studies:
        total += 1 + len(s.signals) * per_decision
    return total + (1 if t.studies else 0)


def _clip(p) -> float:
    """A computed probability may land a rounding step outside [0, 1] (1.0000000000000002)."""
    return min(1.0, max(0.0, float(p)))


def _decision_block(t, prefix, probs, nodes, title):
    """A decision over the alternatives, each followed by a chance node over the states."""
    decide = f"{prefix}decide"
    branches = []
    for i, alt in enumerate(t.alternatives):
        chance = f"{prefix}a{i}"
        branches.append({"label": alt, "to": chance})
        state_branches = []
        for j, state in enumerate(t.states):
            end = f"{prefix}a{i}/s{j}"
            state_branches.append({"label": state, "probability": _clip(probs[j]), "to": end})
            nodes.append({"id": end, "kind": "end", "payoff": float(t.payoffs[i, j])})
        nodes.append({"id": chance, "kind": "chance", "name": "State", "branches": state_branches})
    nodes.append({"id": decide, "kind": "decision", "name": title, "branches": branches})
    return decide


def expand_table(t: PayoffTable) -> dict:
    """Return the general-tree document equivalent to the payoff table ``t``."""
    size = expanded_size(t)
    if size > EXPAND_NODE_LIMIT:
        raise ModelValidationError([Problem(
            "", f"the expanded tree would have {size:,} nodes, more than the "
                f"{EXPAND_NODE_LIMIT:,} shown; the table itself is still evaluated")])
    nodes: list[dict] = []
    root = _decision_block(t, "", t.prior, nodes, "Alternative")
    if t.studies:
        fee_sign = -1.0 if t.objective == "max" else 1.0
        choice = [{"label": NO_STUDY, "to": root}]
        for k, study in enumerate(t.studies):
            rev = revise(t.prior, study.likelihoods)
            signal_node = f"study{k}/signal"
            signal_branches = []
            for g, sig in enumerate(study.signals):
                probs = t.prior if rev.zero_signals[g] else rev.posterior[:, g]
                sub = _decision_block(t, f"study{k}/g{g}/", probs, nodes,
                                      f"Alternative after '{sig}'")
                signal_branches.append({"label": sig, "to": sub,
                                        "probability": _clip(rev.signal_probability[g])})
            nodes.append({"id": signal_node, "kind": "chance", "name": f"{study.name}: signal",
                          "branches": signal_branches})
            branch = {"label": study.name, "to": signal_node}
            if study.cost:
                branch["cash_flow"] = fee_sign * study.cost
            choice.append(branch)
        nodes.append({"id": "study-choice", "kind": "decision", "name": "Study",
                      "branches": choice})
        root = "study-choice"
    nodes.reverse()  # parents before children reads better
    return {"kind": "tree", "title": t.title, "currency": t.currency,
            "objective": t.objective, "root": root, "nodes": nodes}
