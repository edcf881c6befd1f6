"""Hypothesis strategies for model documents, shared by the property tests, and a helper
that changes one entry of a document."""

import copy
from fractions import Fraction

from hypothesis import strategies as st

amounts = st.integers(min_value=-1000, max_value=1000)


@st.composite
def distributions(draw, size):
    """A probability vector of ``size`` rational entries (as Fractions) summing to 1."""
    weights = draw(st.lists(st.integers(0, 20), min_size=size, max_size=size))
    if sum(weights) == 0:
        weights[0] = 1
    total = sum(weights)
    return [Fraction(w, total) for w in weights]


@st.composite
def payoff_tables(draw, min_states=2, max_states=4, max_alternatives=4, with_study=True):
    n_states = draw(st.integers(min_states, max_states))
    n_alts = draw(st.integers(1, max_alternatives))
    states = [f"s{j}" for j in range(n_states)]
    prior = draw(distributions(n_states))
    doc = {
        "kind": "payoff_table", "title": "generated",
        "states": [{"name": s, "probability": float(p)} for s, p in zip(states, prior, strict=True)],
        "alternatives": [{"name": f"a{i}", "payoffs": {s: draw(amounts) for s in states}}
                         for i in range(n_alts)],
        "studies": [],
    }
    if with_study:
        n_signals = draw(st.integers(1, 3))
        signals = [f"g{k}" for k in range(n_signals)]
        doc["studies"].append({
            "name": "study", "cost": draw(st.integers(0, 200)), "signals": signals,
            "likelihoods": {s: {g: float(q) for g, q in zip(signals, draw(distributions(n_signals)),
                                                             strict=True)} for s in states},
        })
    return doc


@st.composite
def trees(draw, max_depth=3, max_branches=3):
    """A random general tree; probabilities are exact binary fractions so floats are exact too."""
    nodes = []
    counter = [0]

    def new_id():
        counter[0] += 1
        return f"n{counter[0]}"

    def build(depth):
        nid = new_id()
        if depth >= max_depth or (draw(st.booleans()) and depth > 0):
            nodes.append({"id": nid, "kind": "end", "payoff": draw(amounts)})
            return nid
        kind = draw(st.sampled_from(["decision", "chance"]))
        k = draw(st.integers(1, max_branches))
        branches = []
        if kind == "chance":
            parts = draw(st.lists(st.integers(0, 8), min_size=k, max_size=k))
            if sum(parts) == 0:
                parts[0] = 1
            # Renormalise to eighths so every probability is exactly representable.
            probs = _eighths(parts)
        for j in range(k):
            child = build(depth + 1)
            branch = {"label": f"b{j}", "to": child}
            cash = draw(st.sampled_from([0, 0, -50, 25]))
            if cash:
                branch["cash_flow"] = cash
            if kind == "chance":
                branch["probability"] = probs[j]
            branches.append(branch)
        nodes.append({"id": nid, "kind": kind, "name": nid, "branches": branches})
        return nid

    root = build(0)
    return {"kind": "tree", "title": "generated", "root": root, "nodes": nodes}


def _eighths(parts):
    total = sum(parts)
    raw = [p * 8 // total for p in parts]
    raw[0] += 8 - sum(raw)
    return [r / 8 for r in raw]


def with_value_at(doc: dict, path, value) -> dict:
    """A deep copy of ``doc`` with the entry at ``path`` (keys and indexes) set to ``value``."""
    changed = copy.deepcopy(doc)
    target = changed
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    return changed
