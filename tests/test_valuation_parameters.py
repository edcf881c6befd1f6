"""Naming and setting the inputs of a model (valuation.parameters).

Exact checks use ``fractions.Fraction`` arithmetic as the outside reference.
"""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.strategies import payoff_tables, trees
from valuation import evaluate, validate
from valuation.errors import ModelValidationError, ParameterError
from valuation.parameters import list_parameters, rescale_row, set_parameter

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
# Invented demo models (Northfield Heat Cooperative, Tellurion Surveys are invented).
TABLE = json.loads((FIXTURES / "heating_payoff_table.json").read_text())
TREE = json.loads((FIXTURES / "heating_tree.json").read_text())


def by_name(doc):
    return {p["name"]: p for p in list_parameters(doc)}


def test_payoff_table_inputs_are_named_by_their_location_with_readable_labels():
    params = by_name(TABLE)
    assert params["states[0].probability"] == {
        "name": "states[0].probability", "label": "P(hot reservoir)", "kind": "probability",
        "base": 0.4, "low_bound": 0.0, "high_bound": 1.0}
    assert params["alternatives[0].payoffs.cold reservoir"]["label"] == \
        "Deep geothermal well if cold reservoir"
    assert params["alternatives[0].payoffs.cold reservoir"]["base"] == -1_500_000
    assert params["studies[1].cost"] == {
        "name": "studies[1].cost", "label": "Cost of Exploratory borehole", "kind": "cost",
        "base": 450_000.0, "low_bound": 0.0, "high_bound": None}
    lik = params["studies[0].likelihoods.hot reservoir.favourable"]
    assert lik["label"] == "P(favourable | hot reservoir), Tellurion seismic survey"
    assert (lik["kind"], lik["base"]) == ("likelihood", 0.85)
    # 2 states + 3 x 2 payoffs + 2 costs + 2 x 2 + 2 x 3 likelihoods
    assert len(params) == 2 + 6 + 2 + 4 + 6


def test_tree_inputs_are_named_by_node_and_branch_index_in_document_order():
    params = by_name(TREE)
    assert params["nodes[1].branches[0].probability"]["label"] == "P(hot) at Reservoir temperature"
    assert params["nodes[0].branches[0].cash_flow"]["base"] == -1_600_000
    assert params["nodes[0].branches[0].cash_flow"]["kind"] == "cash_flow"
    assert params["nodes[4].payoff"] == {"name": "nodes[4].payoff", "label": "Payoff of east-high",
                                         "kind": "payoff", "base": 11_000_000.0,
                                         "low_bound": None, "high_bound": None}
    # decision branches carry no probability
    assert "nodes[0].branches[0].probability" not in params


def test_a_single_branch_chance_node_has_no_probability_to_vary():
    doc = {"kind": "tree", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "branches": [{"label": "only", "probability": 1, "to": "e"}]},
        {"id": "e", "kind": "end", "payoff": 5}]}
    assert "nodes[0].branches[0].probability" not in by_name(doc)
    assert "nodes[0].branches[0].cash_flow" in by_name(doc)


def test_setting_a_prior_rescales_the_other_states_proportionally():
    doc = {"kind": "payoff_table", "states": [{"name": "a", "probability": 0.5},
                                              {"name": "b", "probability": 0.3},
                                              {"name": "c", "probability": 0.2}],
           "alternatives": [{"name": "x", "payoffs": {"a": 1, "b": 2, "c": 3}}]}
    out = set_parameter(doc, "states[0].probability", 0.75)
    probs = [s["probability"] for s in out["states"]]
    # Exact: the others keep their 3:2 ratio and share 1 - 0.75 (fractions arithmetic).
    assert probs[0] == 0.75
    assert Fraction(probs[1]).limit_denominator(1000) == Fraction(3, 20)
    assert Fraction(probs[2]).limit_denominator(1000) == Fraction(1, 10)
    assert doc["states"][0]["probability"] == 0.5, "the input document is left unchanged"


def test_when_the_other_probabilities_are_all_zero_the_remainder_is_shared_equally():
    doc = {"kind": "tree", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "branches": [
            {"label": "x", "probability": 1.0, "to": "e1"},
            {"label": "y", "probability": 0.0, "to": "e2"},
            {"label": "z", "probability": 0.0, "to": "e3"}]},
        {"id": "e1", "kind": "end", "payoff": 1}, {"id": "e2", "kind": "end", "payoff": 2},
        {"id": "e3", "kind": "end", "payoff": 3}]}
    out = set_parameter(doc, "nodes[0].branches[0].probability", 0.4)
    assert [b["probability"] for b in out["nodes"][0]["branches"]] == [0.4, 0.3, 0.3]


def test_setting_a_likelihood_rescales_its_state_row_only():
    out = set_parameter(TABLE, "studies[1].likelihoods.hot reservoir.hot", 0.6)
    row = out["studies"][1]["likelihoods"]["hot reservoir"]
    # others were 0.15 : 0.05 = 3 : 1 and now share 0.4
    assert row == pytest.approx({"hot": 0.6, "lukewarm": 0.3, "cold": 0.1}, abs=1e-15)
    assert out["studies"][1]["likelihoods"]["cold reservoir"] == \
        TABLE["studies"][1]["likelihoods"]["cold reservoir"]


def test_setting_a_dated_cash_flow_changes_the_document_amount_before_discounting():
    out = set_parameter(TREE, "nodes[2].branches[0].cash_flow", -1_000_000)
    assert out["nodes"][2]["branches"][0]["cash_flow"] == -1_000_000
    assert out["nodes"][2]["branches"][0]["time"] == 2
    assert validate(out) == []


def test_setting_an_amount_changes_the_value_linearly():
    base = evaluate(TABLE)["without_information"]["expected_value"]
    out = set_parameter(TABLE, "alternatives[1].payoffs.cold reservoir", 800_000)
    # Shallow loop stays best: +100,000 in the cold state (P = 0.6) adds 60,000 (hand arithmetic).
    assert evaluate(out)["without_information"]["expected_value"] == pytest.approx(base + 60_000)


@pytest.mark.parametrize(("name", "value", "message"), [
    ("states[7].probability", 0.5,
     "states[7].probability: not an input of this model (list_parameters names every input)"),
    ("alternatives[0].payoffs.lukewarm reservoir", 1.0,
     "alternatives[0].payoffs.lukewarm reservoir: not an input of this model "
     "(list_parameters names every input)"),
    ("states[0].probability", 1.2, "states[0].probability: must be within [0, 1], got 1.2"),
    ("states[0].probability", -0.1, "states[0].probability: must be within [0, 1], got -0.1"),
    ("studies[0].cost", -5.0, "studies[0].cost: must be zero or more, got -5"),
    ("studies[0].cost", float("nan"), "studies[0].cost: must be a finite number, got nan"),
    ("studies[0].cost", "cheap", "studies[0].cost: must be a number, got 'cheap'"),
])
def test_bad_parameters_are_refused_with_a_message_naming_them(name, value, message):
    with pytest.raises(ParameterError) as info:
        set_parameter(TABLE, name, value)
    assert str(info.value) == message


def test_an_invalid_document_is_refused_with_its_located_problems():
    bad = json.loads(json.dumps(TABLE))
    bad["states"][0]["probability"] = 1.2
    with pytest.raises(ModelValidationError) as info:
        list_parameters(bad)
    assert "states[0].probability: must be within [0, 1], got 1.2" in [str(p) for p in
                                                                         info.value.problems]


@settings(max_examples=60, deadline=None)
@given(base=st.lists(st.integers(0, 9), min_size=2, max_size=6), data=st.data())
def test_a_rescaled_row_always_sums_to_one_and_keeps_the_others_ratios(base, data):
    if sum(base) == 0:
        base[0] = 1
    row = [b / sum(base) for b in base]
    pos = data.draw(st.integers(0, len(row) - 1))
    v = data.draw(st.floats(0, 1))
    out = rescale_row(row, pos, [v])[0]
    assert out[pos] == v
    assert abs(out.sum() - 1.0) <= 1e-12
    assert np.all(out >= 0)
    others = [k for k in range(len(row)) if k != pos]
    rest = sum(row[k] for k in others)
    if rest > 0 and v < 1:
        for k in others:  # ratio to the others' total is unchanged, up to rounding
            # Compared as amounts, not as ratios: the row's last-ulp correction (about
            # 1e-16) divided by a remainder 1 - v near 1e-16 (v one ulp below 1) makes any
            # ratio meaningless there, while the amounts stay within 1e-12.
            assert out[k] == pytest.approx(row[k] / rest * (1 - v), abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(doc=st.one_of(payoff_tables(), trees()), data=st.data())
def test_every_listed_probability_can_be_set_and_the_document_stays_valid(doc, data):
    params = [p for p in list_parameters(doc) if p["kind"] in ("probability", "likelihood")]
    if not params:
        return
    p = data.draw(st.sampled_from(params))
    v = data.draw(st.floats(0, 1))
    out = set_parameter(doc, p["name"], v)
    assert validate(out) == []
    assert by_name(out)[p["name"]]["base"] == v


def test_a_value_one_ulp_below_one_keeps_the_row_summing_to_one():
    # Found by hypothesis: with v = 1 - 2**-53 the remainder is about 1.1e-16 and the
    # last-ulp correction lands on one entry; the row must still sum to 1 with no
    # negative entry, and every other entry stays within 1e-12 of its share.
    row = [0.0, 1 / 3, 1 / 3, 1 / 3]
    v = 1 - 2 ** -53
    out = rescale_row(row, 0, [v])[0]
    assert out[0] == v and abs(out.sum() - 1.0) <= 1e-12 and np.all(out >= 0)
    assert all(abs(out[k] - (1 - v) / 3) <= 1e-12 for k in (1, 2, 3))
