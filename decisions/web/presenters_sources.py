"""Rows for the study-source, review and portfolio pages, formatted once here.

Like ``decisions.web.presenters``: the services compute, this module only
formats (``money``, ``prob``, ``pct``) and draws the shared charts of
``decisions.drawings`` as inline SVG, so the page and the memo never disagree.
"""

from __future__ import annotations

from django.urls import reverse
from django.utils.safestring import mark_safe
from django.utils.timezone import template_localtime

from decisions.drawings.charts import accuracy_chart, calibration_chart, outcomes_chart
from decisions.drawings.render import to_svg
from decisions.web.presenters import money, pct, prob

__all__ = ["accuracy_rows", "comparison_view", "portfolio_view", "review_view", "score_rows",
           "svg", "trend_rows"]

#: Windows listed in the trend table (the newest); the chart-free table stays readable.
TREND_ROWS = 40


def svg(drawing, title: str, prefix: str):
    # to_svg re-serialises our own renderer's output and refuses DOCTYPE and entity
    # declarations (decisions/drawings/render.py), so the text is safe to inline.
    return mark_safe(to_svg(drawing, id_prefix=prefix, title=title))  # noqa: S308


def _interval(cell: dict) -> tuple[float | None, float | None]:
    bounds = next((v for k, v in cell.items() if k.startswith("interval_")), None)
    return (bounds[0], bounds[1]) if bounds else (None, None)


def accuracy_rows(cal: dict) -> tuple[list[dict], object]:
    """(table rows, accuracy chart SVG) of a calibration: one row per (state, signal)."""
    rows, chart = [], []
    for state, block in cal["states"].items():
        for signal, cell in block["signals"].items():
            low, high = _interval(cell)
            rows.append({
                "state": state, "signal": signal, "count": cell["count"],
                "state_records": block["records"],
                "claimed": prob(cell["claimed"]),
                "observed": prob(cell["observed"]) if cell.get("observed") is not None else "—",
                "calibrated": prob(cell["posterior_mean"]),
                "interval": f"{prob(low)} – {prob(high)}" if low is not None else "—",
                "most_likely": signal == block["most_likely_signal"],
                "below_claim": pct(block["prob_below_claim"])
                if signal == block["most_likely_signal"] else "",
            })
            chart.append({"label": f"says {signal} | {state}", "claimed": cell["claimed"],
                          "calibrated": cell["posterior_mean"], "low": low, "high": high})
    drawing = accuracy_chart(chart, title="Claimed vs calibrated accuracy "
                                          f"({cal['interval']:.0%} credible intervals)")
    return rows, svg(drawing, "Claimed vs calibrated accuracy with credible intervals", "acc")


def score_rows(scores: dict) -> list[dict]:
    claimed, calibrated = scores["claimed"], scores["calibrated"]

    def fmt(v, digits=3):
        return "—" if v is None else f"{v:.{digits}f}".replace("-", "−")

    return [
        {"name": "Hit rate (the most likely state under the signal came true)",
         "claimed": pct(claimed.get("hit_rate")), "calibrated": pct(calibrated.get("hit_rate"))},
        {"name": "Brier score (lower is better)", "claimed": fmt(claimed.get("brier")),
         "calibrated": fmt(calibrated.get("brier"))},
        {"name": "Log score (higher is better)", "claimed": fmt(claimed.get("log_score")),
         "calibrated": fmt(calibrated.get("log_score"))},
    ]


def trend_rows(trend: dict, states: list[str]) -> tuple[list[dict], int, list[dict]]:
    """The newest ``TREND_ROWS`` windows (oldest first), how many were left out, and one
    column head per state: the signal the claim makes most likely for it."""
    windows = trend.get("windows") or []
    shown = windows[-TREND_ROWS:]
    rows = []
    for w in shown:
        cells = []
        for state in states:
            block = w["states"][state]
            top = block["most_likely_signal"]
            cells.append({"signal": top, "mean": prob(block["signals"][top]["posterior_mean"]),
                          "below": pct(block["prob_below_claim"])})
        rows.append({"start": w["start_date"], "end": w["end_date"],
                     "hit_rate": pct(w["hit_rate"]),
                     "brier": f"{w['brier']:.3f}" if w.get("brier") is not None else "—",
                     "states": cells})
    heads = [{"state": state, "signal": shown[0]["states"][state]["most_likely_signal"]}
             for state in states] if shown else []
    return rows, len(windows) - len(shown), heads


def comparison_view(comparison: dict) -> dict | None:
    """Claimed vs calibrated figures of each sourced study of a version (None: nothing sourced)."""
    cur = comparison.get("currency") or ""
    studies = []
    for entry in comparison.get("studies") or []:
        if entry.get("source") is None:
            continue
        row = {"study": entry["study"], "source": entry["source"], "note": entry.get("note"),
               "flips": entry.get("flips", False), "message": entry.get("message", "")}
        for mode in ("claimed", "calibrated"):
            figures = entry.get(mode)
            if figures:
                row[mode] = {"evsi": money(figures["evsi"], cur),
                             "net_value": money(figures["net_value"], cur),
                             "pays": figures["pays_for_itself"],
                             "first_step": figures["recommended_first_step"] or "—",
                             "expected_value": money(figures["expected_value"], cur)}
        row["records"] = entry.get("records")
        studies.append(row)
    if not studies:
        return None
    return {"studies": studies, "flips": comparison.get("flips", False),
            "version": comparison.get("version")}


def review_view(data: dict, title: str) -> dict:
    cur = data["currency"]
    sound = data["sound_given_what_was_known"]
    hind = data["hindsight"]
    chart = outcomes_chart([{"label": title, "expected": data["expected_at_approval"],
                             "realised": data["realised"]}], currency=cur)
    return {
        "version": data["version"],
        "expected": money(data["expected_at_approval"], cur),
        "realised": money(data["realised"], cur),
        "difference": money(data["realised_minus_expected"], cur),
        "worse": (data["realised_minus_expected"] < 0) == (data["objective"] != "min"),
        "probability": prob(data["probability_of_what_happened"]),
        "probability_pct": pct(data["probability_of_what_happened"]),
        "path": [{"name": s.get("name") or s["node"], "node": s["node"], "kind": s["kind"],
                  "branch": s["branch"],
                  "probability": prob(s["probability"]) if s["kind"] == "chance" else ""}
                 for s in data["path"]],
        "sound": {"statement": sound["statement"],
                  "recommended": sound["recommended_plan_taken"],
                  "best": money(sound["best_expected_value_at_approval"], cur),
                  "chosen": money(sound["chosen_expected_value_at_approval"], cur),
                  "given_up": money(sound["value_given_up_at_approval"], cur)},
        "hindsight": {"statement": hind["statement"], "best_plan": hind["best_plan"],
                      "best": money(hind["best_plan_value"], cur),
                      "chosen": money(hind["chosen_plan_value"], cur),
                      "regret": money(hind["regret"], cur)},
        "outcome": data["outcome"],
        "chart": svg(chart, "Expected value at approval against the realised value", "outc"),
    }


#: The "over time" table lists at most this many outcomes, the most recent.
HISTORY_ROWS = 100


def portfolio_view(data: dict, outcomes: list, earlier: dict | None = None,
                   hidden: int = 0) -> dict:
    """The service's portfolio figures and the outcomes in force (oldest first) as rows.

    ``earlier`` maps a currency to the (expected, realised) sums of the outcomes
    before ``outcomes`` that are not listed (``hidden`` of them), so running
    totals still count every outcome.
    """
    cal = data["calibration"]
    running: dict[str, list[float]] = {cur: list(sums) for cur, sums in (earlier or {}).items()}
    history = []
    # Running totals cover every outcome, but only the most recent rows are listed:
    # a team with thousands of decisions would otherwise get a page of thousands of rows.
    listed_from = max(0, len(outcomes) - HISTORY_ROWS)
    for n, o in enumerate(outcomes):
        sums = running.setdefault(o.currency, [0.0, 0.0])
        sums[0] += o.expected_value
        sums[1] += o.realised_value
        if n < listed_from:
            continue
        # Link and date made here, once per row: the page's over-time table has up to
        # HISTORY_ROWS rows, and a {% url %} tag and a date filter in each were most
        # of the page's rendering time.
        history.append({"date": template_localtime(o.recorded_at).date().isoformat(),
                        "url": reverse("web-review", args=[o.decision.pk]),
                        "title": o.decision.title,
                        "expected": money(o.expected_value, o.currency),
                        "realised": money(o.realised_value, o.currency),
                        "difference": money(o.realised_value - o.expected_value, o.currency),
                        "probability": prob(o.path_probability),
                        "cum_expected": money(sums[0], o.currency),
                        "cum_realised": money(sums[1], o.currency)})
    currencies = sorted({o.currency for o in outcomes})
    charts = []
    for cur in currencies:
        rows = [{"label": f"{o.recorded_at:%Y-%m-%d} {o.decision.title}",
                 "expected": o.expected_value, "realised": o.realised_value}
                for o in outcomes if o.currency == cur][-30:]
        charts.append(svg(outcomes_chart(rows, currency=cur,
                                         title=f"Expected vs realised ({cur or 'no currency'})"),
                          f"Expected against realised value of each decision, in {cur}",
                          f"port-{cur or 'x'}"))
    table = [{"range": f"{b['lower']:.2f} – {b['upper']:.2f}", "count": b["count"],
              "mean_forecast": prob(b["mean_forecast"]),
              "observed": prob(b["observed_frequency"])} for b in cal["table"]]
    calibration = {
        "forecasts": cal["forecasts"],
        "brier": f"{cal['brier']:.3f}" if cal.get("brier") is not None else "—",
        "reliability": f"{cal['reliability']:.4f}" if "reliability" in cal else "—",
        "resolution": f"{cal['resolution']:.4f}" if "resolution" in cal else "—",
        "uncertainty": f"{cal['uncertainty']:.4f}" if "uncertainty" in cal else "—",
        "table": table,
        "chart": svg(calibration_chart(cal["table"], title="Calibration of the team's "
                                                           "probabilities"),
                     "Observed frequency against forecast probability by bin", "calib")
        if cal["forecasts"] else None,
    }
    sources = []
    for s in data["sources"]:
        if "error" in s:
            sources.append({"id": s["id"], "name": s["name"], "error": s["error"], "states": []})
            continue
        states = []
        for state, cell in s["states"].items():
            bounds = cell.get("interval_90")
            states.append({"state": state, "signal": cell["signal"],
                           "claimed": prob(cell["claimed"]),
                           "observed": prob(cell["observed"]) if cell["observed"] is not None
                           else "—",
                           "calibrated": prob(cell["posterior_mean"]),
                           "interval": f"{prob(bounds[0])} – {prob(bounds[1])}" if bounds else "—",
                           "records": cell["records"],
                           "below": pct(cell["prob_below_claim"])})
        sources.append({"id": s["id"], "name": s["name"], "records": s["records"],
                        "prior_strength": f"{s['prior_strength']:g}", "states": states})
    totals = [{"currency": t["currency"], "decisions": t["decisions"],
               "expected": money(t["expected"], t["currency"]),
               "realised": money(t["realised"], t["currency"]),
               "difference": money(t["realised_minus_expected"], t["currency"]),
               "mean_probability": prob(t["mean_probability_of_what_happened"])}
              for t in data["totals"]]
    return {"totals": totals, "history": history, "history_hidden": listed_from + hidden,
            "charts": charts, "calibration": calibration,
            "sources": sources}
