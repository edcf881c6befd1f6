"""valuation.diff: structured differences between model documents."""

import copy

from hypothesis import given, settings
from hypothesis import strategies as st

from tests.strategies import payoff_tables
from valuation.diff import diff_documents, leaf_paths


@settings(max_examples=60, deadline=None)
@given(payoff_tables())
def test_a_document_compared_with_itself_has_no_changes(doc):
    result = diff_documents(doc, copy.deepcopy(doc))
    assert result["identical"] and result["changes"] == []


@settings(max_examples=60, deadline=None)
@given(payoff_tables(), st.data())
def test_every_changed_leaf_appears_once(doc, data):
    leaves = {p: v for p, v in leaf_paths(doc).items() if isinstance(v, int | float)
              and not isinstance(v, bool)}
    chosen = data.draw(st.sets(st.sampled_from(sorted(leaves)), min_size=1, max_size=3))
    new = copy.deepcopy(doc)
    for path in chosen:
        _set(new, path, leaves[path] + 1)
    reported = {c["path"] for c in diff_documents(doc, new)["changes"]}
    assert reported == set(chosen)


def _set(doc, path, value):
    """Set the leaf at a diff path such as ``states[name=s0].probability``."""
    import re

    node, parts = doc, re.findall(r"[^.\[\]]+|\[[^\]]+\]", path)
    for i, part in enumerate(parts):
        last = i == len(parts) - 1
        if part.startswith("["):
            inner = part[1:-1]
            if "=" in inner:
                key, name = inner.split("=", 1)
                index = next(j for j, item in enumerate(node) if item.get(key) == name)
            else:
                index = int(inner)
            if last:
                node[index] = value
            else:
                node = node[index]
        elif last:
            node[part] = value
        else:
            node = node[part]


def test_tree_changes_name_the_nodes_and_categories():
    old = {"kind": "tree", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [{"label": "go", "to": "c"}]},
        {"id": "c", "kind": "chance", "branches": [{"label": "hi", "probability": 0.4, "to": "e"},
                                                   {"label": "lo", "probability": 0.6, "to": "f"}]},
        {"id": "e", "kind": "end", "payoff": 10}, {"id": "f", "kind": "end", "payoff": 0}]}
    new = copy.deepcopy(old)
    new["nodes"][1]["branches"][0]["probability"] = 0.5
    new["nodes"][1]["branches"][1]["probability"] = 0.5
    new["nodes"][2]["payoff"] = 12
    new["nodes"].append({"id": "g", "kind": "end", "payoff": 1})
    result = diff_documents(old, new)
    assert result["summary"] == {"probabilities": 2, "payoffs": 1, "structure": 1, "other": 0}
    assert result["nodes"] == {"added": ["g"], "removed": [], "changed": ["c", "e"]}
    assert {"path": "nodes[id=c].branches[label=hi].probability", "change": "changed",
            "old": 0.4, "new": 0.5, "category": "probabilities"} in result["changes"]


def test_reordering_named_items_is_not_a_change():
    a = {"states": [{"name": "x", "probability": 0.5}, {"name": "y", "probability": 0.5}]}
    b = {"states": list(reversed(a["states"]))}
    assert diff_documents(a, b)["identical"]
