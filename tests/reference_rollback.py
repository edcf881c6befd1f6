"""A plain recursive rollback, straight from the model document: the reference.

It shares no code with ``valuation.flattree``: it walks the document's nodes by
id, averages chance nodes by adding ``probability * value`` left to right in
document order, and takes at a decision node the first branch (document order)
within the tie tolerance of the best, which is the standard "average out and
fold back" procedure (Raiffa, *Decision Analysis*, 1968, ch. 2). The tolerance
(1e-9 relative, at least 1e-9 absolute) is the documented one of
``valuation.limits.TIE_TOLERANCE``, restated here on purpose.
"""

from __future__ import annotations

import math
import sys

__all__ = ["reference_rollback"]

TIE_TOLERANCE = 1e-9


def reference_rollback(doc: dict, risk_tolerance: float | None = None) -> tuple[dict, dict, dict]:
    """Values (more is better: costs negated), chosen branch index and tie flag by node id."""
    nodes = {node["id"]: node for node in doc["nodes"]}
    sign = 1.0 if doc.get("objective", "max") == "max" else -1.0
    rate = doc.get("discount_rate")
    values: dict[str, float] = {}
    choice: dict[str, int] = {}
    tie: dict[str, bool] = {}

    def discounted(amount, time) -> float:
        if not rate or not time:
            return float(amount)
        return float(amount) / (1.0 + rate) ** float(time)

    def fold(nid: str) -> float:
        node = nodes[nid]
        if node["kind"] == "end":
            v = sign * discounted(node["payoff"], node.get("time"))
        else:
            outcomes = [sign * discounted(br.get("cash_flow", 0), br.get("time")) + fold(br["to"])
                        for br in node["branches"]]
            if node["kind"] == "chance":
                probs = [float(br["probability"]) for br in node["branches"]]
                v = _certainty_equivalent(outcomes, probs, risk_tolerance) if risk_tolerance \
                    else _mean(outcomes, probs)
            else:
                top = max(outcomes)
                tol = TIE_TOLERANCE * max(1.0, abs(top))
                near = [j for j, x in enumerate(outcomes) if x >= top - tol]
                choice[nid], tie[nid] = near[0], len(near) > 1
                v = top
        values[nid] = v
        return v

    old = sys.getrecursionlimit()
    sys.setrecursionlimit(max(old, 2000))
    try:
        fold(doc["root"])
    finally:
        sys.setrecursionlimit(old)
    return values, choice, tie


def _mean(outcomes: list[float], probs: list[float]) -> float:
    total = probs[0] * outcomes[0]
    for p, x in zip(probs[1:], outcomes[1:], strict=True):
        total += p * x
    return total


def _certainty_equivalent(outcomes, probs, r) -> float:
    """Exponential-utility CE: -r log E[exp(-x / r)], shifted by the minimum for stability."""
    live = [(p, x) for p, x in zip(probs, outcomes, strict=True) if p > 0]
    m = min(x for _, x in live)
    return m - r * math.log(sum(p * math.exp(-(x - m) / r) for p, x in live))
