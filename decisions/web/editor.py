"""The payoff-table editor: form fields <-> model document, and problems <-> fields.

What was typed is kept as typed (strings) in a small "raw" structure, so a page
re-rendered after a validation error or after adding a row loses nothing. The
document handed to the services carries numbers where the text reads as a
number and the text itself otherwise: the valuation core is the one validator
and its message (``alternatives[0].payoffs.hot: must be a number, got 'abc'``)
is shown beside the field it names.
"""

from __future__ import annotations

import json
import re
from typing import Any

__all__ = ["apply_action", "blank_raw", "document_from_raw", "layout", "locate_problems",
           "parse_json_text", "raw_from_document", "raw_from_post"]

MAX_ROWS = 40  # a page, not a spreadsheet: larger models belong to the JSON editor or the API
_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d+)?$")


def blank_raw() -> dict:
    return {"title": "", "currency": "EUR", "objective": "max", "discount_rate": "",
            "states": [{"name": "", "probability": ""} for _ in range(2)],
            "alternatives": [{"name": "", "payoffs": ["", ""]} for _ in range(2)],
            "studies": []}


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return str(value)


def raw_from_document(doc: dict) -> dict:
    """Fill the editor from a stored payoff-table document."""
    states = [s.get("name", "") for s in doc.get("states", [])]
    raw = {
        "title": _text(doc.get("title")), "currency": _text(doc.get("currency") or "EUR"),
        "objective": doc.get("objective", "max"), "discount_rate": _text(doc.get("discount_rate")),
        "states": [{"name": _text(s.get("name")), "probability": _text(s.get("probability"))}
                   for s in doc.get("states", [])],
        "alternatives": [{"name": _text(a.get("name")),
                          "payoffs": [_text((a.get("payoffs") or {}).get(s)) for s in states]}
                         for a in doc.get("alternatives", [])],
        "studies": [],
    }
    for study in doc.get("studies") or []:
        signals = [_text(x) for x in study.get("signals") or []]
        lik = study.get("likelihoods") or {}
        raw["studies"].append({
            "name": _text(study.get("name")), "cost": _text(study.get("cost")),
            "signals": signals,
            "lik": [[_text((lik.get(s) or {}).get(sig)) for sig in signals] for s in states],
        })
    return raw


def _count(post, key: str, default: int = 0) -> int:
    try:
        return max(0, min(MAX_ROWS, int(post.get(key, default))))
    except (TypeError, ValueError):
        return default


def raw_from_post(post) -> dict:
    n_states, n_alts, n_studies = (_count(post, "n_states"), _count(post, "n_alts"),
                                   _count(post, "n_studies"))
    raw = {
        "title": post.get("title", ""), "currency": post.get("currency", ""),
        "objective": post.get("objective", "max"), "discount_rate": post.get("discount_rate", ""),
        "states": [{"name": post.get(f"state-{i}-name", ""),
                    "probability": post.get(f"state-{i}-probability", "")}
                   for i in range(n_states)],
        "alternatives": [{"name": post.get(f"alt-{j}-name", ""),
                          "payoffs": [post.get(f"alt-{j}-payoff-{i}", "") for i in range(n_states)]}
                         for j in range(n_alts)],
        "studies": [],
    }
    for k in range(n_studies):
        n_signals = _count(post, f"study-{k}-n_signals")
        raw["studies"].append({
            "name": post.get(f"study-{k}-name", ""), "cost": post.get(f"study-{k}-cost", ""),
            "signals": [post.get(f"study-{k}-signal-{s}", "") for s in range(n_signals)],
            "lik": [[post.get(f"study-{k}-lik-{i}-{s}", "") for s in range(n_signals)]
                    for i in range(n_states)],
        })
    return raw


def apply_action(raw: dict, action: str) -> dict:
    """Add or remove a row or a column; everything else typed stays where it was."""
    parts = action.split("-")
    verb, what, idx = parts[0], parts[1] if len(parts) > 1 else "", parts[2:]
    states, alts, studies = raw["states"], raw["alternatives"], raw["studies"]
    try:
        nums = [int(x) for x in idx]
    except ValueError:
        return raw
    if verb == "add" and what == "state" and len(states) < MAX_ROWS:
        states.append({"name": "", "probability": ""})
        for a in alts:
            a["payoffs"].append("")
        for st in studies:
            st["lik"].append(["" for _ in st["signals"]])
    elif verb == "remove" and what == "state" and nums and 0 <= nums[0] < len(states):
        i = nums[0]
        del states[i]
        for a in alts:
            del a["payoffs"][i]
        for st in studies:
            del st["lik"][i]
    elif verb == "add" and what == "alt" and len(alts) < MAX_ROWS:
        alts.append({"name": "", "payoffs": ["" for _ in states]})
    elif verb == "remove" and what == "alt" and nums and 0 <= nums[0] < len(alts):
        del alts[nums[0]]
    elif verb == "add" and what == "study" and len(studies) < MAX_ROWS:
        studies.append({"name": "", "cost": "", "signals": ["", ""],
                        "lik": [["", ""] for _ in states]})
    elif verb == "remove" and what == "study" and nums and 0 <= nums[0] < len(studies):
        del studies[nums[0]]
    elif verb == "add" and what == "signal" and nums and 0 <= nums[0] < len(studies):
        st = studies[nums[0]]
        if len(st["signals"]) < MAX_ROWS:
            st["signals"].append("")
            for row in st["lik"]:
                row.append("")
    elif (verb == "remove" and what == "signal" and len(nums) == 2
          and 0 <= nums[0] < len(studies) and 0 <= nums[1] < len(studies[nums[0]]["signals"])):
        st = studies[nums[0]]
        del st["signals"][nums[1]]
        for row in st["lik"]:
            del row[nums[1]]
    return raw


def _number(text: str) -> Any:
    """A number when the text reads as one; the text itself otherwise (the core names it)."""
    cleaned = (text or "").strip().replace("\u2009", "").replace(" ", "").replace("_", "")
    cleaned = cleaned.replace("\u2212", "-")
    if _THOUSANDS.match(cleaned):
        cleaned = cleaned.replace(",", "")
    try:
        value = float(cleaned)
    except ValueError:
        return text
    if not (value == value and abs(value) != float("inf")):  # NaN or infinity: let the core refuse
        return text
    return int(value) if value.is_integer() and "." not in cleaned and "e" not in cleaned.lower() \
        else value


def document_from_raw(raw: dict) -> tuple[dict, dict[str, str]]:
    """The model document and a map from each document location to its form field."""
    fields: dict[str, str] = {"title": "title", "currency": "currency", "objective": "objective",
                              "discount_rate": "discount_rate", "states": "section-states",
                              "alternatives": "section-alternatives", "studies": "section-studies"}
    state_names = [s["name"].strip() for s in raw["states"]]
    doc: dict[str, Any] = {"kind": "payoff_table", "title": raw["title"].strip(),
                           "currency": raw["currency"].strip(), "objective": raw["objective"],
                           "states": [], "alternatives": []}
    if raw["discount_rate"].strip():
        doc["discount_rate"] = _number(raw["discount_rate"])
    for i, s in enumerate(raw["states"]):
        doc["states"].append({"name": state_names[i], "probability": _number(s["probability"])})
        fields[f"states[{i}]"] = f"state-{i}-name"
        fields[f"states[{i}].name"] = f"state-{i}-name"
        fields[f"states[{i}].probability"] = f"state-{i}-probability"
    for j, a in enumerate(raw["alternatives"]):
        payoffs = {}
        for i, cell in enumerate(a["payoffs"]):
            payoffs[state_names[i]] = _number(cell)
            fields[f"alternatives[{j}].payoffs.{state_names[i]}"] = f"alt-{j}-payoff-{i}"
        doc["alternatives"].append({"name": a["name"].strip(), "payoffs": payoffs})
        fields[f"alternatives[{j}]"] = f"alt-{j}-name"
        fields[f"alternatives[{j}].name"] = f"alt-{j}-name"
    if raw["studies"]:
        doc["studies"] = []
    for k, st in enumerate(raw["studies"]):
        signals = [x.strip() for x in st["signals"]]
        lik: dict[str, dict[str, Any]] = {}
        for i, row in enumerate(st["lik"]):
            lik[state_names[i]] = {}
            fields[f"studies[{k}].likelihoods.{state_names[i]}"] = f"study-{k}-section"
            for s, cell in enumerate(row):
                lik[state_names[i]][signals[s]] = _number(cell)
                fields[f"studies[{k}].likelihoods.{state_names[i]}.{signals[s]}"] = \
                    f"study-{k}-lik-{i}-{s}"
        for s in range(len(signals)):
            fields[f"studies[{k}].signals[{s}]"] = f"study-{k}-signal-{s}"
        fields.update({f"studies[{k}]": f"study-{k}-section",
                       f"studies[{k}].name": f"study-{k}-name",
                       f"studies[{k}].cost": f"study-{k}-cost",
                       f"studies[{k}].signals": f"study-{k}-section",
                       f"studies[{k}].likelihoods": f"study-{k}-section"})
        doc["studies"].append({"name": st["name"].strip(), "cost": _number(st["cost"]),
                               "signals": signals, "likelihoods": lik})
    return doc, fields


def locate_problems(problems, fields: dict[str, str] | None = None,
                    strip: str = "document.") -> tuple[dict[str, list[str]], list[str]]:
    """Sort ``(location, message)`` problems into per-field lists and a general list.

    A problem lands on the field of the longest known location it starts with
    (``states[1].probability`` -> ``state-1-probability``); the rest are shown
    above the form with their location, so none is lost.
    """
    by_field: dict[str, list[str]] = {}
    general: list[str] = []
    known = sorted((fields or {}).items(), key=lambda kv: -len(kv[0]))
    for location, message in problems:
        loc = location[len(strip):] if strip and location.startswith(strip) else location
        target = None
        for key, field in known:
            if loc == key or loc.startswith((key + ".", key + "[")):
                target = field
                break
        text = f"{loc}: {message}" if loc else message
        if target:
            by_field.setdefault(target, []).append(text)
        else:
            general.append(text)
    return by_field, general


def _cell(name: str, value: str, errors: dict, label: str, cls: str = "cell") -> dict:
    return {"name": name, "id": f"f-{name}", "value": value, "errors": errors.get(name, []),
            "label": label, "cls": cls}


def layout(raw: dict, errors: dict[str, list[str]]) -> dict:
    """Everything the editor template prints: each cell's name, value, label and messages."""
    names = [s["name"].strip() or f"state {i + 1}" for i, s in enumerate(raw["states"])]
    states = [{"index": i,
               "name": _cell(f"state-{i}-name", s["name"], errors, f"Name of state {i + 1}", "wide"),
               "probability": _cell(f"state-{i}-probability", s["probability"], errors,
                                    f"Prior probability of {names[i]}", "narrow")}
              for i, s in enumerate(raw["states"])]
    alts = []
    for j, a in enumerate(raw["alternatives"]):
        alt_name = a["name"].strip() or f"alternative {j + 1}"
        alts.append({"index": j,
                     "name": _cell(f"alt-{j}-name", a["name"], errors, f"Name of alternative {j + 1}",
                                   "wide"),
                     "payoffs": [_cell(f"alt-{j}-payoff-{i}", v, errors,
                                       f"Payoff of {alt_name} if {names[i]}")
                                 for i, v in enumerate(a["payoffs"])]})
    studies = []
    for k, st in enumerate(raw["studies"]):
        sig_names = [x.strip() or f"signal {s + 1}" for s, x in enumerate(st["signals"])]
        studies.append({
            "index": k,
            "section_errors": errors.get(f"study-{k}-section", []),
            "name": _cell(f"study-{k}-name", st["name"], errors, f"Name of study {k + 1}", "wide"),
            "cost": _cell(f"study-{k}-cost", st["cost"], errors, f"Cost of study {k + 1}"),
            "n_signals": len(st["signals"]),
            "signals": [_cell(f"study-{k}-signal-{s}", x, errors, f"Signal {s + 1} of study {k + 1}",
                              "narrow-text") for s, x in enumerate(st["signals"])],
            "rows": [{"state": names[i],
                      "cells": [_cell(f"study-{k}-lik-{i}-{s}", v, errors,
                                      f"Probability of {sig_names[s]} if {names[i]}", "narrow")
                                for s, v in enumerate(row)]}
                     for i, row in enumerate(st["lik"])],
        })
    return {
        "title": _cell("title", raw["title"], errors, "Model title", "wide"),
        "currency": _cell("currency", raw["currency"], errors, "Currency", "narrow"),
        "objective": raw["objective"], "objective_errors": errors.get("objective", []),
        "discount_rate": _cell("discount_rate", raw["discount_rate"], errors, "Discount rate",
                               "narrow"),
        "states": states, "state_names": names, "alternatives": alts, "studies": studies,
        "n_states": len(states), "n_alts": len(alts), "n_studies": len(studies),
        "section_errors": {k: errors.get(f"section-{k}", [])
                           for k in ("states", "alternatives", "studies")},
    }


def parse_json_text(text: str) -> tuple[Any, list[tuple[str, str]]]:
    """Parse the JSON editor's text; a syntax error names its line and column."""

    def refuse_constant(name):
        raise ValueError(f"{name} is not a number JSON allows")

    try:
        return json.loads(text, parse_constant=refuse_constant), []
    except json.JSONDecodeError as exc:
        return None, [("document", f"not valid JSON at line {exc.lineno}, column {exc.colno}: "
                                   f"{exc.msg}")]
    except ValueError as exc:
        return None, [("document", str(exc))]
