"""Readable text report of a result document, for the command line."""

from __future__ import annotations

__all__ = ["render_text", "CAUTION"]

CAUTION = ("Figures are model outputs resting on the stated assumptions; weigh them with "
           "professional judgment and your organisation's own approval rules.")


def _money(value, currency: str) -> str:
    if value is None:
        return "n/a"
    return f"{value:,.2f} {currency}".strip()


def _pct(value) -> str:
    return "n/a" if value is None else f"{value * 100:.1f}%"


def render_text(result: dict) -> str:
    """Render the result document as an aligned plain-text report."""
    cur = result.get("currency", "")
    what = "expected cost" if result["objective"] == "min" else "expected value"
    lines = [
        f"{result['title']}",
        "=" * len(result["title"]),
        f"Basis: {result['value_basis']}; criterion: {result['criterion'].replace('_', ' ')}"
        + (f" (risk tolerance {_money(result['risk_tolerance'], cur)})"
           if result.get("risk_tolerance") else ""),
        "",
        f"Recommended plan: {result['policy']['text']}",
        f"{what.capitalize()} of the plan: {_money(result['expected_value'], cur)}",
    ]
    if "certainty_equivalent" in result:
        lines.append(f"Certainty equivalent:         {_money(result['certainty_equivalent'], cur)}")
    wi = result["without_information"]
    lines.append(f"Without information:          {_money(wi['expected_value'], cur)}"
                 + (f" (choose '{wi['best_alternative']}')" if wi.get("best_alternative") else ""))
    lines.append(f"EVPI:                         {_money(result['evpi'], cur)}")
    if result["alternatives"]:
        lines += ["", "Alternatives"]
        width = max(len(a["name"]) for a in result["alternatives"])
        for alt in result["alternatives"]:
            ce = (f"   CE {_money(alt['certainty_equivalent'], cur)}"
                  if "certainty_equivalent" in alt else "")
            lines.append(f"  {alt['name']:<{width}}  {_money(alt['expected_value'], cur):>24}{ce}")
    for study in result["studies"]:
        lines += ["", f"Study: {study['name']} (fee {_money(study['cost'], cur)})",
                  f"  EVSI {_money(study['evsi'], cur)}; net value {_money(study['net_value'], cur)};"
                  f" efficiency {_pct(study['efficiency'])}; most worth paying "
                  f"{_money(study['max_fee'], cur)}",
                  f"  {study['note']}"]
        for sig, p in study["signal_probabilities"].items():
            best = study["best_alternative_by_signal"][sig]
            post = study["posteriors"][sig]
            post_text = (", ".join(f"{st} {q:.4f}" for st, q in post.items())
                         if post else "impossible signal")
            lines.append(f"  P({sig}) = {p:.4f}  posterior: {post_text}"
                         + (f"  -> {best}" if best else ""))
    for info in result.get("information_values", []):
        lines.append(f"Value of learning '{info['name']}' first: {_money(info['value'], cur)}")
    rp = result["risk_profile"]
    lines += ["", f"Risk profile: worst {_money(rp['worst'], cur)}, best {_money(rp['best'], cur)}"
              + (f", probability of loss {_pct(rp['probability_of_loss'])}"
                 if rp.get("probability_of_loss") is not None else "")]
    for tie in result["ties"]:
        lines.append(f"Tie at '{tie['node']}' between {', '.join(tie['branches'])}: "
                     f"chose '{tie['chosen']}' (first in document order)")
    for warning in result["warnings"]:
        lines.append(f"Note: {warning}")
    lines += ["", CAUTION]
    return "\n".join(lines) + "\n"
