"""Inline SVG of the tree and the charts, drawn by decisions.drawings (the memo's code).

The same reportlab drawings go into the PDF memo, so the page and the memo never
disagree. Sensitivity is computed from the version's stored document by the
valuation core (pure, read-only); every other figure comes from stored results.
"""

from __future__ import annotations

from django.utils.safestring import mark_safe

from decisions.drawings.charts import risk_profile_chart, sensitivity_chart, tornado_chart
from decisions.drawings.render import to_svg
from decisions.drawings.tree import tree_drawings, tree_legend
from decisions.services.memo import too_large_for_sensitivity
from valuation.errors import ValuationError
from valuation.limits import DETAIL_NODE_LIMIT
from valuation.sensitivity import TIE_RULE_NOTE, one_way, tornado

__all__ = ["figures"]

MAX_TREE_PARTS = 6  # the page shows the first parts; the table below lists every node


def _svg(drawing, title: str, prefix: str):
    # to_svg parses and re-serialises our own renderer's output and refuses DOCTYPE and
    # entity declarations, so the text is safe to inline.
    return mark_safe(to_svg(drawing, id_prefix=prefix, title=title))  # noqa: S308


def figures(document: dict, results: dict, *, tree: dict | None,
            chosen_input: str | None) -> dict:
    """SVG of the tree parts, the risk profile, the tornado and one chosen one-way sweep.

    ``tree`` is the model as a general tree (``valuation.expand``), or None when that
    tree is too large to write out (then it is not drawn).
    """
    cur = results.get("currency") or ""
    out: dict = {"tree_svgs": [], "risk_svg": None, "tornado_svg": None, "oneway_svg": None,
                 "inputs": [], "chosen_input": None, "sensitivity_error": None,
                 "tornado_rows": [], "sensitivity_note": None, "drawing_note": None}
    details = results.get("nodes") or {}
    if tree is not None and not details:
        # Above the per-node detail limit the stored results hold no node values: nothing
        # is marked pruned, nothing folds, and cutting such a wide tree into parts took
        # minutes (a 5 x 5 table with 800 signals: 41 s). The memo leaves it out too.
        out["drawing_note"] = (f"the tree has {len(tree.get('nodes', [])):,} nodes, more than "
                               f"the {DETAIL_NODE_LIMIT:,} whose values are stored")
        tree = None
    parts = tree_drawings(tree, details) if tree is not None else []
    out["tree_total"] = len(parts)
    out["tree_svgs"] = [_svg(d, f"Decision tree, part {i + 1} of {len(parts)}", f"tree{i}")
                        for i, d in enumerate(parts[:MAX_TREE_PARTS])]
    out["legend_svg"] = _svg(tree_legend(), "Key to the tree drawing", "legend")
    if results.get("risk_profile"):
        out["risk_svg"] = _svg(risk_profile_chart(results["risk_profile"], currency=cur,
                                                  objective=results.get("objective", "max")),
                               "Risk profile of the recommended plan", "risk")
    # The memo's rule: a tornado re-evaluates the model once per input, so a large model
    # would hold the page (and a server worker) up for minutes.
    out["sensitivity_note"] = too_large_for_sensitivity(document, "while the page is drawn")
    if out["sensitivity_note"]:
        return out
    risk_tolerance = results.get("risk_tolerance")
    try:
        rows = tornado(document, risk_tolerance=risk_tolerance)
    except ValuationError as exc:
        out["sensitivity_error"] = str(exc)
        return out
    out["tornado_rows"] = rows
    out["inputs"] = [(r["name"], r["label"]) for r in rows]
    if rows:
        base = results.get("certainty_equivalent", results.get("expected_value"))
        out["tornado_svg"] = _svg(tornado_chart(rows, base_value=base, currency=cur),
                                  "Tornado chart", "tornado")
        names = [r["name"] for r in rows]
        chosen = chosen_input if chosen_input in names else names[0]
        out["chosen_input"] = chosen
        try:
            sweep = one_way(document, chosen, risk_tolerance=risk_tolerance)
        except ValuationError as exc:
            out["sensitivity_error"] = str(exc)
        else:
            out["oneway_svg"] = _svg(sensitivity_chart(sweep, currency=cur),
                                     f"One-way sensitivity to {sweep.get('label')}", "oneway")
            out["break_even"] = sweep.get("break_even") or []
            if any(b.get("tie_rule") for b in out["break_even"]):
                out["tie_rule_note"] = TIE_RULE_NOTE
    return out
