"""Every validation rule: the bad input, and the exact message with its location."""

import copy
import json
from pathlib import Path

import pytest

import valuation
from valuation.errors import ModelValidationError

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
TABLE = json.loads((FIXTURES / "heating_payoff_table.json").read_text())
TREE = json.loads((FIXTURES / "heating_tree.json").read_text())


def messages(doc):
    return [str(p) for p in valuation.validate(doc)]


def changed(base, path, value):
    """Copy of ``base`` with the item at ``path`` (a list of keys) set or deleted."""
    doc = copy.deepcopy(base)
    target = doc
    for key in path[:-1]:
        target = target[key]
    if value is DELETE:
        del target[path[-1]]
    else:
        target[path[-1]] = value
    return doc


DELETE = object()

TABLE_CASES = [
    (["states", 0, "probability"], 1.2, "states[0].probability: must be within [0, 1], got 1.2"),
    (["states", 0, "probability"], -0.1, "states[0].probability: must be within [0, 1], got -0.1"),
    (["states", 0, "probability"], float("nan"), "states[0].probability: must be a finite number, got nan"),
    (["states", 0, "probability"], float("inf"), "states[0].probability: must be a finite number, got inf"),
    (["states", 0, "probability"], "0.4", "states[0].probability: must be a number, got '0.4'"),
    (["states", 0, "probability"], True, "states[0].probability: must be a number, got True"),
    (["states", 0, "probability"], 0.5,
     "states: state probabilities must sum to 1 (within 1e-06), got 1.1"),
    (["states", 1, "name"], "hot reservoir", "states[1].name: duplicate state name 'hot reservoir'"),
    (["states", 1, "name"], "", "states[1].name: state name must be a non-empty text, got ''"),
    (["states"], [], "states: must be a non-empty list of {name, probability}"),
    (["alternatives"], [], "alternatives: must be a non-empty list of {name, payoffs}"),
    (["alternatives", 0, "payoffs", "lukewarm"], 5, "alternatives[0].payoffs.lukewarm: unknown state 'lukewarm'"),
    (["alternatives", 0, "payoffs", "hot reservoir"], DELETE,
     "alternatives[0].payoffs: missing payoff for state 'hot reservoir'"),
    (["alternatives", 2, "name"], "Shallow ground loop",
     "alternatives[2].name: duplicate alternative name 'Shallow ground loop'"),
    (["alternatives", 1, "payoffs", "cold reservoir"], float("-inf"),
     "alternatives[1].payoffs.cold reservoir: must be a finite number, got -inf"),
    (["studies", 0, "cost"], -5, "studies[0].cost: must be zero or more, got -5"),
    (["studies", 0, "signals"], [], "studies[0].signals: must be a non-empty list of signal names"),
    (["studies", 0, "signals"], ["favourable", "favourable"],
     "studies[0].signals[1]: duplicate signal 'favourable'"),
    (["studies", 0, "likelihoods", "hot reservoir", "favourable"], 0.9,
     "studies[0].likelihoods.hot reservoir: likelihoods of a state must sum to 1 (within 1e-06), got 1.05"),
    (["studies", 0, "likelihoods", "hot reservoir", "so-so"], 0.0,
     "studies[0].likelihoods.hot reservoir.so-so: unknown signal 'so-so'"),
    (["studies", 0, "likelihoods", "tepid"], {"favourable": 1, "unfavourable": 0},
     "studies[0].likelihoods.tepid: unknown state 'tepid'"),
    (["studies", 0, "likelihoods", "cold reservoir"], DELETE,
     "studies[0].likelihoods: missing likelihoods for state 'cold reservoir'"),
    (["studies", 1, "name"], "Tellurion seismic survey",
     "studies[1].name: duplicate study name 'Tellurion seismic survey'"),
    (["objective"], "maximum", "objective: must be 'max' (profits) or 'min' (costs), got 'maximum'"),
    (["kind"], "table", "kind: must be 'payoff_table' or 'tree', got 'table'"),
    (["states", 0, "probabilty"], 0.4, "states[0].probabilty: unknown field (allowed: description, name, probability)"),
    (["discount_rate"], 0.05, "discount_rate: a payoff table has no dated cash flows; use a tree"),
]


@pytest.mark.parametrize(("path", "value", "expected"), TABLE_CASES,
                         ids=[c[2].split(":")[0] + "-" + str(i) for i, c in enumerate(TABLE_CASES)])
def test_payoff_table_rule_is_reported_with_its_location(path, value, expected):
    assert expected in messages(changed(TABLE, path, value))


TREE_CASES = [
    (["nodes", 1, "branches", 0, "probability"], 0.5,
     "nodes[1].branches: probabilities must sum to 1 (within 1e-06), got 1.1"),
    (["nodes", 1, "branches", 0, "probability"], 1.5, "nodes[1].branches[0].probability: must be within [0, 1], got 1.5"),
    (["nodes", 1, "id"], "heat-source", "nodes[1].id: duplicate id 'heat-source' (also nodes[0])"),
    (["nodes", 0, "branches"], [], "nodes[0].branches: a decision node needs at least one branch"),
    (["nodes", 0, "branches", 1, "label"], "Deep geothermal well",
     "nodes[0].branches[1].label: duplicate label 'Deep geothermal well' in node 'heat-source'"),
    (["nodes", 0, "branches", 2, "to"], "nowhere", "nodes[0].branches[2].to: must be the id of a node, got 'nowhere'"),
    (["nodes", 0, "branches", 2, "to"], "conductivity",
     "nodes[8]: node 'conductivity' is the target of 2 branches; a tree may not share subtrees "
     "(copy the subtree under new ids)"),
    (["nodes", 4, "payoff"], None, "nodes[4].payoff: must be a number, got None"),
    (["nodes", 4, "kind"], "leaf", "nodes[4].kind: must be 'decision', 'chance' or 'end', got 'leaf'"),
    (["nodes", 0, "branches", 0, "probability"], 0.5,
     "nodes[0].branches[0].probability: only branches of a chance node carry a probability"),
    (["nodes", 0, "branches", 0, "time"], -1, "nodes[0].branches[0].time: must be within [0, 200] years, got -1"),
    (["discount_rate"], 6, "discount_rate: must be a yearly fraction within [0, 1] (8% is 0.08), got 6"),
    (["root"], "missing", "root: must be the id of a node, got 'missing'"),
    (["nodes"], [], "nodes: must be a non-empty list of nodes"),
]


@pytest.mark.parametrize(("path", "value", "expected"), TREE_CASES,
                         ids=[c[2].split(":")[0] + "-" + str(i) for i, c in enumerate(TREE_CASES)])
def test_tree_rule_is_reported_with_its_location(path, value, expected):
    assert expected in messages(changed(TREE, path, value))


def test_a_cycle_is_refused():
    doc = changed(TREE, ["nodes", 3, "branches", 0, "to"], "heat-source")
    found = messages(doc)
    assert "root: the root 'heat-source' is the target of a branch (a cycle)" in found


def test_an_orphan_node_is_refused():
    doc = copy.deepcopy(TREE)
    doc["nodes"].append({"id": "stray", "kind": "end", "payoff": 1})
    assert ("nodes[14]: node 'stray' is not reachable from the root (an orphan or part of a cycle)"
            in messages(doc))


def test_a_cycle_away_from_the_root_is_refused():
    doc = copy.deepcopy(TREE)
    doc["nodes"] += [
        {"id": "loop-a", "kind": "chance", "branches": [{"label": "x", "probability": 1, "to": "loop-b"}]},
        {"id": "loop-b", "kind": "chance", "branches": [{"label": "y", "probability": 1, "to": "loop-a"}]},
    ]
    found = messages(doc)
    assert any("'loop-a' is not reachable from the root" in m for m in found)


def test_every_problem_is_reported_not_only_the_first():
    doc = changed(TABLE, ["states", 0, "probability"], 2)
    doc = changed(doc, ["alternatives", 0, "payoffs", "cold reservoir"], "lots")
    doc = changed(doc, ["studies", 0, "cost"], -1)
    found = messages(doc)
    assert len(found) >= 3


def test_a_deep_tree_is_refused_at_the_documented_limit():
    nodes = [{"id": f"n{i}", "kind": "decision", "branches": [{"label": "go", "to": f"n{i + 1}"}]}
             for i in range(600)]
    nodes.append({"id": "n600", "kind": "end", "payoff": 1})
    found = messages({"kind": "tree", "title": "deep", "root": "n0", "nodes": nodes})
    assert found == ["nodes: the tree is deeper than 500 levels"]


def test_a_non_object_document_is_refused():
    assert messages([1, 2]) == ["a model must be a JSON object, got [1, 2]"]


def test_evaluate_raises_with_every_problem():
    with pytest.raises(ModelValidationError) as info:
        valuation.evaluate(changed(TABLE, ["states", 0, "probability"], 7))
    assert [p.location for p in info.value.problems] == ["states[0].probability"]


def test_a_bad_risk_tolerance_is_refused():
    with pytest.raises(valuation.ParameterError, match="risk_tolerance: must be a positive finite number"):
        valuation.evaluate(TABLE, risk_tolerance=-5)


def test_problem_lists_are_capped_and_say_how_many_more():
    doc = copy.deepcopy(TREE)
    for i in range(300):
        doc["nodes"].append({"id": f"x{i}", "kind": "end", "payoff": "bad"})
    found = messages(doc)
    assert len(found) == 201
    assert found[-1] == "... and 100 more problems not listed"


def test_demo_fixtures_are_valid():
    assert messages(TABLE) == []
    assert messages(TREE) == []
