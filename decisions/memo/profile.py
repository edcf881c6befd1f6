"""The risk profile of the plan in force, which may not be the recommended one.

When the team chose one of the model's alternatives instead of the recommended
plan, the memo shows that alternative's distribution: the model is evaluated
again with the alternative as the only choice at the first decision (payoff
table: the alternative alone, no study; tree: the root's chosen branch alone).
A plan described in words only has no distribution in the model; the memo then
shows the recommended plan's and says so.
"""

from __future__ import annotations

import copy

import valuation
from valuation.errors import ValuationError

__all__ = ["plan_profile"]


def _only_alternative(document: dict, alternative: str) -> dict | None:
    doc = copy.deepcopy(document)
    if doc.get("kind") == "payoff_table":
        alts = [a for a in doc.get("alternatives", []) if a.get("name") == alternative]
        if not alts:
            return None
        doc["alternatives"], doc["studies"] = alts, []
        return doc
    nodes = {n.get("id"): n for n in doc.get("nodes", [])}
    root = nodes.get(doc.get("root"))
    if root is None or root.get("kind") != "decision":
        return None
    kept = [b for b in root.get("branches", []) if b.get("label") == alternative]
    if not kept:
        return None
    root["branches"] = kept
    # Nodes only the dropped branches reached would now be unreachable: leave them out.
    reached, stack = set(), [root["id"]]
    while stack:
        node_id = stack.pop()
        if node_id in reached or node_id not in nodes:
            continue
        reached.add(node_id)
        stack.extend(b.get("to") for b in nodes[node_id].get("branches", []))
    doc["nodes"] = [n for n in doc["nodes"] if n.get("id") in reached]
    return doc


def plan_profile(document: dict, results: dict, strategy: dict | None) -> tuple[dict, str]:
    """``(risk_profile, description)`` of the plan the memo reports on."""
    recommended = results.get("risk_profile") or {}
    if not strategy or strategy.get("recommended", True):
        return recommended, "the recommended plan"
    alternative = (strategy.get("plan") or {}).get("alternative")
    if alternative:
        doc = _only_alternative(document, alternative)
        if doc is not None:
            try:
                out = valuation.evaluate(doc, risk_tolerance=results.get("risk_tolerance"))
            except ValuationError:
                out = None
            if out is not None:
                return out["risk_profile"], f"the chosen plan ('{alternative}')"
    return recommended, ("the recommended plan (the chosen plan is described in words only, "
                         "so the model holds no distribution for it)")
