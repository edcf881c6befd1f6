"""Turn a version's stored result document into rows the templates print as they are.

Formatting lives here, not in template filters, so every page formats a figure
the same way and the templates stay free of arithmetic. Nothing is recomputed:
every figure comes from the results saved with the version (what was signed).
"""

from __future__ import annotations

import json
import math
from typing import Any

__all__ = ["money", "prob", "pct", "results_view", "tree_rows", "diff_rows"]


def money(value: Any, currency: str = "") -> str:
    if value is None:
        return "—"
    if not isinstance(value, int | float) or not math.isfinite(value):
        return str(value)
    text = f"{value:,.0f}".replace("-", "−")
    return f"{text} {currency}".strip()


def prob(value: Any) -> str:
    if value is None:
        return "—"
    return f"{float(value):.3f}"


def pct(value: Any) -> str:
    if value is None:
        return "—"
    return f"{float(value) * 100:.1f} %"


def _study_rows(results: dict, cur: str) -> list[dict]:
    rows = []
    for study in results.get("studies") or []:
        signals = list((study.get("signal_probabilities") or {}).keys())
        states = list((study.get("joint") or {}).keys())
        revision = []
        for signal in signals:
            posterior = (study.get("posteriors") or {}).get(signal) or {}
            revision.append({
                "signal": signal,
                "probability": prob(study["signal_probabilities"].get(signal)),
                "joint": [prob((study["joint"].get(s) or {}).get(signal)) for s in states],
                "posterior": [prob(posterior.get(s)) for s in states],
                "best": (study.get("best_alternative_by_signal") or {}).get(signal) or "—",
                "value": money((study.get("value_by_signal") or {}).get(signal), cur),
            })
        source = study.get("source") or None
        rows.append({
            "name": study.get("name"),
            "cost": money(study.get("cost"), cur),
            "evsi": money(study.get("evsi"), cur),
            "net_value": money(study.get("net_value"), cur),
            "net_positive": (study.get("net_value") or 0) > 0,
            "efficiency": pct(study.get("efficiency")),
            "max_fee": money(study.get("max_fee"), cur),
            "with_study": money(study.get("expected_value_with_study"), cur),
            "changes_decision": study.get("changes_decision"),
            "note": study.get("note") or "",
            "states": states,
            "revision": revision,
            "zero_signals": study.get("zero_probability_signals") or [],
            "source": source,
        })
    return rows


def results_view(results: dict) -> dict:
    """The figures of the decision page, formatted, straight from the stored results."""
    cur = results.get("currency") or ""
    without = results.get("without_information") or {}
    best_alternative = without.get("best_alternative")
    risk = results.get("risk_profile") or {}
    return {
        "currency": cur,
        "objective": results.get("objective", "max"),
        "is_cost": results.get("objective") == "min",
        "value_basis": results.get("value_basis") or "expected value",
        "expected_value": money(results.get("expected_value"), cur),
        "certainty_equivalent": money(results.get("certainty_equivalent"), cur)
        if results.get("certainty_equivalent") is not None else None,
        "risk_tolerance": money(results.get("risk_tolerance"), cur)
        if results.get("risk_tolerance") is not None else None,
        "without_information": money(without.get("expected_value"), cur),
        "best_alternative": best_alternative,
        "evpi": money(results.get("evpi"), cur),
        "plan": (results.get("policy") or {}).get("text") or "",
        "alternatives": [
            {"name": a.get("name"), "value": money(a.get("expected_value"), cur),
             "ce": money(a.get("certainty_equivalent"), cur) if "certainty_equivalent" in a else None,
             "best": a.get("name") == best_alternative}
            for a in results.get("alternatives") or []
        ],
        "studies": _study_rows(results, cur),
        "information_values": [
            {"name": iv.get("name"), "node": iv.get("node"), "value": money(iv.get("value"), cur)}
            for iv in results.get("information_values") or []
        ],
        "risk": {
            # outcomes and cumulative list the same sorted values, position by position
            "rows": [{"value": money(o["value"], cur), "probability": prob(o["probability"]),
                      "cumulative": prob(c["probability"])}
                     for o, c in zip(risk.get("outcomes") or [], risk.get("cumulative") or [],
                                     strict=False)],
            "probability_of_loss": pct(risk.get("probability_of_loss")),
            "worst": money(risk.get("worst"), cur),
            "best": money(risk.get("best"), cur),
            "expected": money(risk.get("expected"), cur),
        } if risk else None,
        "ties": results.get("ties") or [],
        "warnings": results.get("warnings") or [],
    }


def tree_rows(tree: dict, results: dict, *, limit: int = 400) -> tuple[list[dict], bool]:
    """The tree as indented rows: branch, node, probability, value, marks.

    ``tree`` is the model's general tree (``valuation.expand``): a payoff table is
    shown as the equivalent tree the core evaluated, so the node ids match the
    stored ``results["nodes"]``. ``limit`` bounds the page for very large models;
    the second value says whether rows were left out.
    """
    cur = results.get("currency") or ""
    nodes = {n["id"]: n for n in tree.get("nodes", [])}
    info = results.get("nodes") or {}
    rows: list[dict] = []
    truncated = False

    def visit(node_id: str, depth: int, branch: dict | None, parent: dict | None,
              on_plan: bool) -> None:
        nonlocal truncated
        if len(rows) >= limit:
            truncated = True
            return
        node = nodes.get(node_id, {})
        result = info.get(node_id, {})
        label = branch.get("label") if branch else None
        parent_result = info.get(parent["id"], {}) if parent else {}
        pruned = bool(parent and parent.get("kind") == "decision"
                      and label in (parent_result.get("pruned") or []))
        best = bool(parent and parent.get("kind") == "decision"
                    and parent_result.get("best_branch") == label)
        here_on_plan = on_plan and not pruned
        rows.append({
            "depth": depth,
            "indent": f"{depth * 1.4:.1f}rem",
            "branch": label,
            "kind": node.get("kind", "end"),
            # end nodes of an expanded table have only generated ids: show none
            "name": node.get("name") or ("" if node.get("kind") == "end" else node_id),
            "id": node_id,
            "probability": prob(branch.get("probability")) if branch and "probability" in branch
            else "",
            "cash_flow": money(branch.get("cash_flow"), cur) if branch and branch.get("cash_flow")
            else "",
            "value": money(result.get("value"), cur),
            "payoff": money(node.get("payoff"), cur) if node.get("kind") == "end" else "",
            "pruned": pruned,
            "best": best and here_on_plan,
            "on_plan": here_on_plan,
        })
        for child in node.get("branches") or []:
            visit(child["to"], depth + 1, child, node, here_on_plan)

    visit(tree["root"], 0, None, None, True)
    return rows, truncated


def _short(value: Any) -> str:
    if isinstance(value, float | int) and not isinstance(value, bool):
        return f"{value:,.6g}" if isinstance(value, float) else f"{value:,}"
    if isinstance(value, dict | list):
        text = json.dumps(value, ensure_ascii=False, sort_keys=True)
        return text if len(text) <= 160 else text[:157] + "…"
    return "" if value is None else str(value)


def diff_rows(diff: dict) -> list[dict]:
    """The core's structured diff as table rows: where, what kind, old, new."""
    return [{"path": c["path"], "change": c["change"], "category": c.get("category", ""),
             "old": _short(c.get("old")), "new": _short(c.get("new"))}
            for c in diff.get("changes", [])]
