"""The memo's sections as platypus flowables, each from plain data.

Every figure is formatted with ``decisions.drawings.style.money`` (two decimals
and thousands separators, the API's value rounded to the cent), so a reader can
match the memo to the API figure by figure.
"""

from __future__ import annotations

from xml.sax.saxutils import escape

from reportlab.platypus import KeepTogether, Paragraph, Spacer, Table

import valuation
from decisions.drawings import charts
from decisions.drawings.render import to_pdf_flowable
from decisions.drawings.style import money, pct, pdf_safe, prob
from decisions.drawings.tree import tree_legend, tree_parts
from decisions.memo.profile import plan_profile
from decisions.memo.styles import CAUTION, S, table_style
from valuation.errors import ValuationError
from valuation.sensitivity import TIE_RULE_NOTE

__all__ = ["story", "title_block", "summary", "tree_section", "MAX_TABLE_ROWS"]

#: Tables longer than this show their first rows and say how many more the API holds.
MAX_TABLE_ROWS = 60
#: Columns of a Bayesian revision table beyond this are left to the API (the page is narrow).
MAX_SIGNAL_COLUMNS = 6


def t(text) -> str:
    """Plain text made safe for a Paragraph: standard-font characters, markup escaped."""
    return escape(pdf_safe("" if text is None else text))


def p(text, style="body") -> Paragraph:
    return Paragraph(text, S[style])


def cell(text, style="cell") -> Paragraph:
    return Paragraph(t(text), S[style])


def _table(rows, widths, *, numeric_from=None, header=True) -> Table:
    table = Table(rows, colWidths=widths, repeatRows=1 if header else 0, hAlign="LEFT")
    table.setStyle(table_style(header=header, numeric_from=numeric_from))
    return table


def _input_value(value, kind) -> str:
    """An input's value: probabilities to four places, amounts to the cent."""
    if value is None:
        return "n/a"
    if kind in ("probability", "likelihood"):
        return f"{float(value):.4f}"
    return money(value, "")


#: Plans in the break-even table are cut to this many characters (a large tree's plan
#: runs to pages; the one-way sweep in the API or the command line has it in full).
MAX_PLAN_CHARS = 160


def _short(text: str, limit: int = MAX_PLAN_CHARS) -> str:
    text = str(text or "")
    return text if len(text) <= limit else text[:limit - 1].rstrip() + "…"


def _cut_rows(rows: list, what: str) -> tuple[list, list]:
    if len(rows) <= MAX_TABLE_ROWS:
        return rows, []
    more = len(rows) - MAX_TABLE_ROWS
    return rows[:MAX_TABLE_ROWS], [p(f"… and {more:,} more {t(what)}, listed in full by the API.",
                                     "small")]


# ---- title block and summary ------------------------------------------------------------------

def title_block(data: dict, width: float) -> list:
    d, v = data["decision"], data["version"]
    head = data.get("audit_head") or {}
    rows = [
        ["Team", cell(d.get("team", ""))],
        ["Version", cell(f"{v['number']}" + (f" — {v['change_note']}" if v.get("change_note") else ""))],
        ["Version SHA-256", Paragraph(t(v["content_sha256"]), S["mono"])],
        ["Results SHA-256", Paragraph(t(v.get("results_sha256", "")), S["mono"])],
        ["Status", cell(d.get("status", ""))],
        ["Saved", cell(f"{v.get('created_at', '')} by {v.get('author', '')}")],
        ["Generated", cell(data["generated_at"])],
        ["Latest audit event", Paragraph(
            t(f"#{head['seq']} {head['hash']}") if head.get("hash") else t("none"), S["mono"])],
    ]
    return [
        p("Decision memo", "small"),
        p(t(d["title"]), "title"),
        _table(rows, [110, width - 110], header=False),
        p(t(CAUTION), "caution"),
    ]


def summary(data: dict, width: float) -> list:
    r = data["results"]
    cur = r.get("currency", "")
    what = "Expected cost" if r.get("objective") == "min" else "Expected value"
    out = [p("Summary", "h1"), p(f"<b>Recommended plan.</b> {t(r['policy']['text'])}")]
    rows = [["Figure", "Amount"],
            [cell(f"{what} of the recommended plan ({r.get('value_basis', 'expected value')})"),
             money(r["expected_value"], cur)]]
    if r.get("certainty_equivalent") is not None:
        rows.append([cell(f"Certainty equivalent (risk tolerance "
                          f"{money(r.get('risk_tolerance'), cur)})"),
                     money(r["certainty_equivalent"], cur)])
    wi = r.get("without_information") or {}
    if wi:
        label = "Value without information"
        if wi.get("best_alternative"):
            label += f" (choose '{wi['best_alternative']}')"
        rows.append([cell(label), money(wi.get("expected_value"), cur)])
        if wi.get("certainty_equivalent") is not None:
            rows.append([cell("Certainty equivalent without information"),
                         money(wi["certainty_equivalent"], cur)])
    rows.append([cell("Expected value of perfect information (EVPI)"), money(r.get("evpi"), cur)])
    out.append(_table(rows, [width - 150, 150], numeric_from=1))
    studies = r.get("studies") or []
    if studies:
        out.append(p("Value of each study", "h2"))
        srows = [["Study", "Fee", "EVSI", "Net value", "Efficiency", "Most worth paying"]]
        for s in studies:
            srows.append([cell(s["name"]), money(s.get("cost"), ""), money(s.get("evsi"), ""),
                          money(s.get("net_value"), ""), pct(s.get("efficiency")),
                          money(s.get("max_fee"), "")])
        out.append(_table(srows, [width - 5 * 78, 78, 78, 78, 78, 78], numeric_from=1))
        out.append(p(f"Amounts in {t(cur)}. Efficiency is EVSI as a share of EVPI. "
                     + " ".join(t(s.get("note", "")) for s in studies), "small"))
    out += _chosen_plan(data, width)
    alts = r.get("alternatives") or []
    if alts:
        out.append(p("Alternatives", "h2"))
        arows = [["Alternative", what]] + [[cell(a["name"]), money(a["expected_value"], cur)]
                                           for a in alts]
        has_ce = any("certainty_equivalent" in a for a in alts)
        if has_ce:
            arows[0].append("Certainty equivalent")
            for row, a in zip(arows[1:], alts, strict=True):
                row.append(money(a.get("certainty_equivalent"), cur))
        arows, more = _cut_rows(arows, "alternatives")
        widths = [width - 300, 150, 150] if has_ce else [width - 150, 150]
        out += [_table(arows, widths, numeric_from=1), *more]
    info = r.get("information_values") or []
    if info:
        out.append(p("Value of learning a chance node before deciding", "h2"))
        irows = [["Chance node", "Value"]] + [[cell(i["name"]), money(i["value"], cur)]
                                              for i in info]
        irows, more = _cut_rows(irows, "chance nodes")
        out += [_table(irows, [width - 150, 150], numeric_from=1), *more]
    return out


def _chosen_plan(data: dict, width: float) -> list:
    st = data.get("strategy")
    cur = data["results"].get("currency", "")
    if not st:
        return [p("<b>Chosen plan.</b> No plan has been recorded on this version yet.")]
    who = f" Recorded by {t(st.get('chosen_by', ''))} on {t(st.get('chosen_at', ''))}."
    if st.get("recommended"):
        return [p(f"<b>Chosen plan.</b> The recommended plan.{who}")]
    plan = st.get("plan") or {}
    described = plan.get("alternative") or plan.get("text") or ""
    return [
        p(f"<b>Chosen plan (differs from the recommended one).</b> {t(described)}.{who}"),
        p(f"<b>Justification.</b> {t(st.get('justification', ''))}"),
        p(f"<b>Value given up</b> against the recommended plan: "
          f"{t(money(st.get('value_given_up'), cur))}."),
    ]


# ---- the tree ------------------------------------------------------------------------------

def tree_section(data: dict, width: float, height: float, *,
                 pages: dict[int, int] | None = None, draw: bool = True) -> list:
    """The tree's parts, each a caption and a drawing kept together.

    ``pages`` (part -> page) lets the markers name pages; ``draw=False`` builds the
    same flowables without painting, for the trial layout that finds those pages.
    Each part's flowables carry ``tree_part`` (the part number) for that layout.
    """
    out = [p("Decision tree", "h1")]
    document, results = data.get("document"), data["results"]
    if not document:
        return [*out, p("The model document is not available; the tree is not drawn.")]
    try:
        tree_doc = valuation.expand(document)
    except ValuationError as exc:
        return [*out, p(f"The tree is not drawn: {t(exc)}")]
    details = results.get("nodes") or {}
    if not details:
        # Without node values nothing folds, and cutting a wide tree into parts took
        # minutes (the decision page leaves it out for the same reason).
        return [*out, p(f"The tree is not drawn: it has {len(tree_doc.get('nodes', [])):,} "
                        "nodes, more than the per-node detail limit, so its node values are "
                        "not in the stored results.")]
    parts = tree_parts(tree_doc, details, width=width, height=height - 70, pages=pages,
                       layout_only=not draw)
    out.append(to_pdf_flowable(tree_legend(width), draw=draw))
    for part in parts:
        drawing = to_pdf_flowable(part.drawing, draw=draw)
        caption = p(t(part.caption), "small")
        kept = KeepTogether([caption, drawing, Spacer(1, 6)])
        for flowable in (caption, drawing, kept):
            flowable.tree_part = part.number
        out.append(kept)
    return out


# ---- Bayesian revision ------------------------------------------------------------------------

def _ordered(keys, preferred: list | None) -> list:
    """``keys`` in the ``preferred`` order, any others after them in their own order."""
    keys = list(keys)
    first = [k for k in preferred or [] if k in keys]
    return first + [k for k in keys if k not in first]


def revision_section(data: dict, width: float) -> list:
    studies = data["results"].get("studies") or []
    if not studies:
        return []
    cur = data["results"].get("currency", "")
    out = [p("Bayesian revision", "h1"),
           p("For each study: the prior of each state, the study's likelihoods P(signal | state) "
             "and the joint probabilities; then, per signal, its probability, the revised "
             "(posterior) probabilities of the states and the best alternative after it.",
             "small")]
    # Orders come from the model document: results stored in PostgreSQL's jsonb come
    # back with their object keys re-sorted, the document's lists do not.
    doc = data.get("document") or {}
    doc_states = [st.get("name") for st in doc.get("states") or []]
    doc_signals = {st.get("name"): list(st.get("signals") or []) for st in doc.get("studies") or []}
    for s in studies:
        block = [p(t(s["name"]), "h2")]
        signals = _ordered(s.get("signal_probabilities") or {}, doc_signals.get(s["name"]))
        shown = signals[:MAX_SIGNAL_COLUMNS]
        joint = s.get("joint") or {}
        states = _ordered(joint, doc_states)
        prior = {st: sum(joint[st].values()) for st in states}
        head = ["State", "Prior"] + [f"P({sig} | state)" for sig in shown] + \
               [f"P(state, {sig})" for sig in shown]
        rows = [[cell(h, "cell_bold") for h in head]]
        for st in states:
            pr = prior[st]
            rows.append([cell(st), prob(pr)]
                        + [prob(joint[st][sig] / pr) if pr else "n/a" for sig in shown]
                        + [prob(joint[st][sig]) for sig in shown])
        rows, more = _cut_rows(rows, "states")
        n = len(head) - 1
        first = max(width - n * 58, 90)
        block += [_table(rows, [first] + [(width - first) / n] * n, numeric_from=1), *more]
        post_head = ["Signal", "P(signal)"] + [f"P({st} | signal)" for st in states[:4]] + \
                    ["Best alternative", "Value"]
        prows = [[cell(h, "cell_bold") for h in post_head]]
        for sig in signals:
            post = (s.get("posteriors") or {}).get(sig) or {}
            prows.append([cell(sig), prob(s["signal_probabilities"][sig])]
                         + [prob(post.get(st)) if post else "n/a" for st in states[:4]]
                         + [cell(s.get("best_alternative_by_signal", {}).get(sig) or "—"),
                            money((s.get("value_by_signal") or {}).get(sig), "")])
        prows, more2 = _cut_rows(prows, "signals")
        k = len(post_head)
        widths = [80, 52] + [54] * min(len(states), 4) + [0, 80]
        widths[-2] = max(width - sum(widths), 70)
        block += [Spacer(1, 4), _table(prows, widths[:k], numeric_from=1), *more2]
        notes = []
        if len(signals) > MAX_SIGNAL_COLUMNS:
            notes.append(f"The first table shows {MAX_SIGNAL_COLUMNS} of {len(signals)} signals.")
        if len(states) > 4:
            notes.append(f"The second table shows the posteriors of 4 of {len(states)} states.")
        if s.get("zero_probability_signals"):
            notes.append("Signals with probability zero: "
                         + ", ".join(s["zero_probability_signals"]) + ".")
        notes.append(f"Values in {cur}, fee of {money(s.get('cost'), cur)} included.")
        block.append(p(t(" ".join(notes)), "small"))
        out.append(KeepTogether(block))
    return out


# ---- risk profile and sensitivity ------------------------------------------------------------

def risk_section(data: dict, width: float) -> list:
    results = data["results"]
    cur = results.get("currency", "")
    profile, whose = plan_profile(data.get("document") or {}, results, data.get("strategy"))
    if not profile:
        return []
    out = [p("Risk profile", "h1"),
           p(f"Cumulative distribution of the outcome of {t(whose)}: the probability that the "
             f"outcome is at most the amount on the horizontal axis.", "small"),
           to_pdf_flowable(charts.risk_profile_chart(profile, currency=cur, width=width, title="",
                                                     objective=results.get("objective", "max")))]
    rows = [["Worst", "Expected", "Best", "Probability of loss"],
            [money(profile.get("worst"), cur), money(profile.get("expected"), cur),
             money(profile.get("best"), cur), pct(profile.get("probability_of_loss"))]]
    out.append(_table(rows, [width / 4] * 4, numeric_from=0))
    return out


def sensitivity_section(data: dict, width: float) -> list:
    out = [p("Sensitivity", "h1")]
    sens = data.get("sensitivity")
    if not sens or not (sens.get("tornado") or sens.get("one_way")):
        reason = (sens or {}).get("note")
        return [*out, p("Sensitivity not computed." + (f" {t(reason)}" if reason else ""))]
    results = data["results"]
    cur = results.get("currency", "")
    tornado = sens.get("tornado") or []
    if tornado:
        base = sens.get("base_value", results.get("expected_value"))
        out.append(to_pdf_flowable(charts.tornado_chart(tornado, base_value=base, currency=cur,
                                                        width=width)))
        rows = [["Input", "Low", "High", "Value at low", "Value at high", "Swing"]]
        for row in tornado[:15]:
            kind = row.get("kind")
            rows.append([cell(row.get("label") or row.get("name")),
                         _input_value(row["low"], kind), _input_value(row["high"], kind),
                         money(row["value_low"], ""),
                         money(row["value_high"], ""), money(row["swing"], "")])
        out.append(_table(rows, [width - 2 * 62 - 3 * 78, 62, 62, 78, 78, 78], numeric_from=1))
    sweeps = sens.get("one_way") or []
    be_rows = [["Input", "Break-even value", "Plan below", "Plan above"]]
    tie_rule = False
    for sweep in sweeps:
        for be in sweep.get("break_even") or []:
            value = _input_value(be["value"], sweep.get("kind"))
            tie_rule = tie_rule or bool(be.get("tie_rule"))
            be_rows.append([cell(sweep.get("label") or sweep.get("parameter")),
                            f"{value} (tie rule)" if be.get("tie_rule") else value,
                            cell(_short(be.get("from", ""))), cell(_short(be.get("to", "")))])
    out.append(p("Break-even values", "h2"))
    if len(be_rows) > 1:
        be_rows, more = _cut_rows(be_rows, "break-even values")
        out += [_table(be_rows, [width - 300, 80, 110, 110], numeric_from=None), *more]
        if tie_rule:
            out.append(p(TIE_RULE_NOTE, "small"))
    else:
        out.append(p("No input swept here changes the best plan within its range.", "small"))
    for sweep in sweeps[:4]:
        out.append(to_pdf_flowable(charts.sensitivity_chart(sweep, currency=cur, width=width)))
    if sens.get("note"):
        out.append(p(t(sens["note"]), "small"))
    return out


# ---- sources, sign-offs, outcomes --------------------------------------------------------------

def sources_section(data: dict, width: float) -> list:
    sources = [s for s in data.get("sources") or [] if s.get("calibration") or s.get("message")]
    if not sources:
        return []
    out = [p("Study sources: claimed and calibrated accuracy", "h1")]
    for src in sources:
        title = f"{src.get('name', 'Source')}" + (f" (study '{src['study']}')"
                                                  if src.get("study") else "")
        if not src.get("calibration"):
            out += [p(t(title), "h2"), p(t(src["message"]))]
            continue
        cal = src["calibration"]
        mass = cal.get("interval", 0.9)
        key = next((k for k in _first_cell(cal) if k.startswith("interval_")), None)
        chart_rows, rows = [], [["True state", "Signal", "Claimed", "Calibrated",
                                 f"{mass:.0%} interval", "Records"]]
        for state, block in (cal.get("states") or {}).items():
            for signal, c in block.get("signals", {}).items():
                low, high = (c.get(key) or [None, None]) if key else (None, None)
                chart_rows.append({"label": f"{state} -> {signal}", "claimed": c.get("claimed"),
                                   "calibrated": c.get("posterior_mean"), "low": low,
                                   "high": high})
                rows.append([cell(state), cell(signal), prob(c.get("claimed")),
                             prob(c.get("posterior_mean")),
                             f"{prob(low)} – {prob(high)}" if low is not None else "n/a",
                             str(c.get("count", ""))])
        rows, more = _cut_rows(rows, "cells")
        out += [p(t(title), "h2"),
                to_pdf_flowable(charts.accuracy_chart(chart_rows[:40], width=width)),
                _table(rows, [width - 330, 80, 55, 60, 95, 40], numeric_from=2), *more,
                p(t(f"Calibrated from {cal.get('records', 0)} past studies; the claim counts as "
                    f"{float(cal.get('prior_strength') or 0):g} studies of each state."), "small")]
        if src.get("message"):
            out.append(p(t(src["message"])))
    return out


def _first_cell(cal: dict) -> dict:
    for block in (cal.get("states") or {}).values():
        for c in (block.get("signals") or {}).values():
            return c
    return {}


def signoff_section(data: dict, width: float) -> list:
    out = [p("Sign-offs", "h1")]
    version_hash = data["version"]["content_sha256"]
    signoffs = data.get("signoffs") or []
    if signoffs:
        rows = [["Name", "Role", "Meaning", "Time (UTC)"]]
        spans = []
        for s in signoffs:
            bound = s.get("bound_sha256", "")
            mark = "" if bound == version_hash else " — DOES NOT MATCH this version's hash"
            rows.append([cell(s.get("printed_name")), cell(s.get("role")), cell(s.get("meaning")),
                         cell(s.get("signed_at"))])
            rows.append(["", Paragraph(t(f"bound to SHA-256 {bound}{mark}"), S["mono"]), "", ""])
            spans.append(("SPAN", (1, len(rows) - 1), (3, len(rows) - 1)))
        table = _table(rows, [width - 300, 110, 70, 120])
        table.setStyle(spans)
        out.append(table)
        reasons = [s for s in signoffs if s.get("reason")]
        for s in reasons:
            out.append(p(f"Reason given by {t(s.get('printed_name'))}: {t(s['reason'])}", "small"))
    else:
        out.append(p("No one has signed this version."))
    roles = (data.get("policy") or {}).get("roles") or {}
    pending = [(role, r["required"] - r["signed"]) for role, r in roles.items()
               if r["required"] > r["signed"]]
    if pending:
        out.append(p("<b>Pending:</b> " + "; ".join(
            f"{t(role)} — {n} more sign-off{'s' if n != 1 else ''}" for role, n in pending) + "."))
    elif roles:
        out.append(p("Every sign-off the policy asks for has been given."))
    return out


def outcomes_section(data: dict, width: float) -> list:
    outcomes = data.get("outcomes") or {}
    rows_in = outcomes.get("rows") or []
    if not rows_in:
        return []
    cur = data["results"].get("currency", "")
    out = [p("Outcomes: expected and realised", "h1"),
           to_pdf_flowable(charts.outcomes_chart(rows_in, currency=cur, width=width))]
    has_regret = any(r.get("regret") is not None for r in rows_in)
    rows = [["Item", "Expected", "Realised", "Difference"] + (["Regret"] if has_regret else [])]
    for r in rows_in:
        diff = (float(r["realised"]) - float(r["expected"])
                if r.get("realised") is not None and r.get("expected") is not None else None)
        row = [cell(r.get("label")), money(r.get("expected"), ""), money(r.get("realised"), ""),
               money(diff, "")]
        if has_regret:
            row.append(money(r.get("regret"), ""))
        rows.append(row)
    n = len(rows[0]) - 1
    rows, more = _cut_rows(rows, "outcomes")
    out += [_table(rows, [width - n * 95] + [95] * n, numeric_from=1), *more]
    if outcomes.get("probability") is not None:
        out.append(p(f"The model gave what happened a probability of {prob(outcomes['probability'])}."))
    if outcomes.get("regret") is not None:
        out.append(p(f"<b>Regret</b> (value the best plan in hindsight would have added): "
                     f"{t(money(outcomes['regret'], cur))}."))
    if outcomes.get("note"):
        out.append(p(t(outcomes["note"]), "small"))
    return out


def notes_section(data: dict) -> list:
    r = data["results"]
    notes = [f"Basis: {r.get('value_basis', 'expected value')}; criterion: "
             f"{str(r.get('criterion', 'expected_value')).replace('_', ' ')}."]
    for tie in r.get("ties") or []:
        notes.append(f"Tie at '{tie['node']}' between {', '.join(tie['branches'])}: "
                     f"'{tie['chosen']}' chosen (first in document order).")
    notes += list(r.get("warnings") or [])
    notes.append("Characters the PDF's standard fonts cannot show are printed as their base "
                 "letter or as their code point [U+XXXX].")
    return [p("Notes", "h1"), *[p(t(n), "small") for n in notes]]


def story(data: dict, *, frame_width: float, frame_height: float,
          tree_pages: dict[int, int] | None = None) -> list:
    w = frame_width
    return [
        *title_block(data, w),
        *summary(data, w),
        *tree_section(data, w, frame_height, pages=tree_pages),
        *revision_section(data, w),
        *risk_section(data, w),
        *sensitivity_section(data, w),
        *sources_section(data, w),
        *signoff_section(data, w),
        *outcomes_section(data, w),
        *notes_section(data),
    ]
