"""Properties every valuation must have, over generated models (hypothesis).

Facts of the trade tested here: 0 <= EVSI <= EVPI (Raiffa & Schlaifer, Applied
Statistical Decision Theory, 1961; Howard, IEEE Trans. SSC-2(1), 1966); free
information never lowers expected utility (Good, Br. J. Phil. Sci. 17(4), 1967);
signal probabilities average the posteriors back to the prior (Bayes' theorem).
Rollback is compared with brute-force enumeration of every policy in exact
rational arithmetic (``fractions``), an implementation independent of the core.
"""

import itertools
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import valuation
from tests.strategies import payoff_tables, trees
from valuation.limits import TIE_TOLERANCE
from valuation.utility import certainty_equivalent

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@SETTINGS
@given(payoff_tables())
def test_evsi_is_between_zero_and_evpi(doc):
    result = valuation.evaluate(doc)
    study = result["studies"][0]
    assert study["evsi"] >= 0
    assert study["evsi"] <= result["evpi"] + 1e-9 * max(1, abs(result["evpi"]))


@SETTINGS
@given(payoff_tables(), st.floats(min_value=50, max_value=5000))
def test_free_information_never_lowers_certainty_equivalent(doc, tolerance):
    result = valuation.evaluate(doc, risk_tolerance=tolerance)
    study = result["studies"][0]
    assert study["evsi"] >= 0
    assert result["evpi"] >= 0
    assert study["evsi"] <= result["evpi"] + 1e-7 * max(1, abs(result["evpi"]))


@SETTINGS
@given(payoff_tables(with_study=False))
def test_a_perfectly_reliable_study_is_worth_the_evpi(doc):
    states = [s["name"] for s in doc["states"]]
    doc["studies"] = [{"name": "oracle", "cost": 0, "signals": [f"says {s}" for s in states],
                       "likelihoods": {s: {f"says {t}": float(s == t) for t in states}
                                       for s in states}}]
    result = valuation.evaluate(doc)
    assert result["studies"][0]["evsi"] == pytest.approx(result["evpi"], abs=1e-9)


@SETTINGS
@given(payoff_tables(), st.data())
def test_a_study_with_identical_likelihood_rows_is_worth_nothing(doc, data):
    study = doc["studies"][0]
    row = data.draw(st.sampled_from(list(study["likelihoods"].values())))
    study["likelihoods"] = {s: dict(row) for s in study["likelihoods"]}
    assert valuation.evaluate(doc)["studies"][0]["evsi"] == 0.0


@SETTINGS
@given(payoff_tables())
def test_posteriors_sum_to_one_and_average_back_to_the_prior(doc):
    study = valuation.evaluate(doc)["studies"][0]
    prior = {s["name"]: s["probability"] for s in doc["states"]}
    averaged = dict.fromkeys(prior, 0.0)
    for signal, post in study["posteriors"].items():
        if post is None:
            assert study["signal_probabilities"][signal] == 0
            continue
        assert sum(post.values()) == pytest.approx(1.0)
        for state, q in post.items():
            averaged[state] += study["signal_probabilities"][signal] * q
    assert averaged == pytest.approx(prior)


@SETTINGS
@given(payoff_tables())
def test_table_and_its_expanded_tree_have_the_same_value(doc):
    table = valuation.evaluate(doc)
    tree = valuation.evaluate(valuation.expand(doc))
    assert tree["expected_value"] == pytest.approx(table["expected_value"], abs=1e-7)


@SETTINGS
@given(payoff_tables())
def test_minimising_costs_mirrors_maximising_profits(doc):
    mirrored = dict(doc, objective="min",
                    alternatives=[{"name": a["name"], "payoffs": {s: -v for s, v in a["payoffs"].items()}}
                                  for a in doc["alternatives"]])
    # Under "min" a study fee is still money out, so it adds to the cost: the mirror of
    # a profit table with fee c is a cost table with fee c.
    profit = valuation.evaluate(doc)
    cost = valuation.evaluate(mirrored)
    assert cost["expected_value"] == pytest.approx(-profit["expected_value"], abs=1e-9)
    assert cost["evpi"] == pytest.approx(profit["evpi"], abs=1e-9)
    assert cost["studies"][0]["evsi"] == pytest.approx(profit["studies"][0]["evsi"], abs=1e-9)


def brute_force_value(doc) -> Fraction:
    """Best expected value over every policy, in exact rational arithmetic."""
    nodes = {n["id"]: n for n in doc["nodes"]}
    decisions = [n for n in doc["nodes"] if n["kind"] == "decision"]

    def value(nid, policy):
        node = nodes[nid]
        if node["kind"] == "end":
            return Fraction(node["payoff"])
        if node["kind"] == "decision":
            br = node["branches"][policy[nid]]
            return Fraction(br.get("cash_flow", 0)) + value(br["to"], policy)
        return sum(Fraction(br["probability"]) * (Fraction(br.get("cash_flow", 0))
                                                   + value(br["to"], policy))
                   for br in node["branches"])

    choices = [range(len(n["branches"])) for n in decisions]
    best = None
    for combo in itertools.product(*choices):
        policy = {n["id"]: c for n, c in zip(decisions, combo, strict=True)}
        v = value(doc["root"], policy)
        best = v if best is None or v > best else best
    return best


@settings(max_examples=80, deadline=None)
@given(trees())
def test_rollback_equals_brute_force_enumeration_in_exact_arithmetic(doc):
    result = valuation.evaluate(doc)
    assert result["expected_value"] == pytest.approx(float(brute_force_value(doc)), abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(trees())
def test_risk_profile_of_the_plan_averages_to_its_expected_value(doc):
    result = valuation.evaluate(doc)
    rp = result["risk_profile"]
    probs = [o["probability"] for o in rp["outcomes"]]
    assert sum(probs) == pytest.approx(1.0)
    mean = sum(o["value"] * o["probability"] for o in rp["outcomes"])
    assert mean == pytest.approx(result["expected_value"], abs=1e-6)
    assert rp["worst"] <= rp["best"]


@settings(max_examples=40, deadline=None)
@given(trees())
def test_value_of_information_on_a_tree_is_never_negative_nor_above_evpi(doc):
    result = valuation.evaluate(doc)
    assert result["evpi"] >= 0
    for info in result["information_values"]:
        assert 0 <= info["value"] <= result["evpi"] + 1e-9


@settings(max_examples=40, deadline=None)
@given(trees(), st.floats(min_value=10, max_value=10_000))
def test_tree_certainty_equivalent_never_exceeds_expected_value(doc, tolerance):
    result = valuation.evaluate(doc, risk_tolerance=tolerance)
    assert result["certainty_equivalent"] <= result["expected_value"] + 1e-7


def test_learning_a_node_matches_rolling_back_each_revealed_outcome():
    # Independent check: reorder the tree by hand so the chance node comes first.
    doc = {"kind": "tree", "title": "t", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [{"label": "risky", "to": "c"},
                                                      {"label": "safe", "to": "e3"}]},
        {"id": "c", "kind": "chance", "branches": [{"label": "up", "probability": 0.3, "to": "e1"},
                                                    {"label": "down", "probability": 0.7, "to": "e2"}]},
        {"id": "e1", "kind": "end", "payoff": 100}, {"id": "e2", "kind": "end", "payoff": -20},
        {"id": "e3", "kind": "end", "payoff": 30}]}
    # Without information: risky 16 vs safe 30 -> 30. Knowing first: 0.3*100 + 0.7*30 = 51.
    assert valuation.value_of_learning(doc, "c") == pytest.approx(21)
    assert valuation.evaluate(doc)["evpi"] == pytest.approx(21)


def test_discounting_applies_the_yearly_rate_to_dated_amounts():
    doc = {"kind": "tree", "title": "t", "discount_rate": 0.1, "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [
            {"label": "invest", "to": "e1", "cash_flow": -100, "time": 0}]},
        {"id": "e1", "kind": "end", "payoff": 121, "time": 2}]}
    result = valuation.evaluate(doc)
    assert result["expected_value"] == pytest.approx(0.0, abs=1e-12)  # 121 / 1.1**2 = 100
    assert result["value_basis"] == "present value at 10% a year"


def test_ties_are_broken_by_document_order_and_reported():
    doc = {"kind": "tree", "title": "t", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "name": "Pick", "branches": [
            {"label": "first", "to": "e1"}, {"label": "second", "to": "e2"}]},
        {"id": "e1", "kind": "end", "payoff": 5}, {"id": "e2", "kind": "end", "payoff": 5}]}
    result = valuation.evaluate(doc)
    assert result["policy"]["steps"][0]["choice"] == "first"
    assert result["ties"] == [{"node": "d", "chosen": "first", "branches": ["first", "second"]}]
    assert result["nodes"]["d"]["pruned"] == ["second"]


def test_a_reported_tie_lists_exactly_the_branches_within_the_tie_tolerance():
    # Our own rule (valuation.limits.TIE_TOLERANCE, relative to the best value): the
    # branches a tie lists must be the ones the rollback weighed as tied, so one just
    # inside the tolerance is listed and one just outside is not.
    top = 1000.0
    inside = top - 0.5 * TIE_TOLERANCE * top
    outside = top - 3.0 * TIE_TOLERANCE * top
    doc = {"kind": "tree", "title": "t", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "name": "Pick", "branches": [
            {"label": "best", "to": "e1"}, {"label": "inside", "to": "e2"},
            {"label": "outside", "to": "e3"}]},
        {"id": "e1", "kind": "end", "payoff": top}, {"id": "e2", "kind": "end", "payoff": inside},
        {"id": "e3", "kind": "end", "payoff": outside}]}
    result = valuation.evaluate(doc)
    assert result["ties"] == [{"node": "d", "chosen": "best", "branches": ["best", "inside"]}]
    doc["nodes"][2]["payoff"] = outside
    assert valuation.evaluate(doc)["ties"] == []


def test_a_payoff_table_tie_lists_exactly_the_alternatives_within_the_tie_tolerance():
    # The same rule for a payoff table's alternatives (valuation.table_eval.first_best).
    top = 1000.0
    doc = {"kind": "payoff_table", "title": "t", "states": [{"name": "x", "probability": 1.0}],
           "alternatives": [
               {"name": "best", "payoffs": {"x": top}},
               {"name": "inside", "payoffs": {"x": top - 0.5 * TIE_TOLERANCE * top}},
               {"name": "outside", "payoffs": {"x": top - 3.0 * TIE_TOLERANCE * top}}]}
    ties = valuation.evaluate(doc)["ties"]
    assert ties == [{"node": "decide", "branches": ["best", "inside"], "chosen": "best"}]


def test_a_signal_that_cannot_occur_is_flagged_not_divided_by():
    doc = {"kind": "payoff_table", "title": "t",
           "states": [{"name": "x", "probability": 1.0}, {"name": "y", "probability": 0.0}],
           "alternatives": [{"name": "a", "payoffs": {"x": 1, "y": 0}},
                            {"name": "b", "payoffs": {"x": 0, "y": 1}}],
           "studies": [{"name": "s", "cost": 0, "signals": ["p", "q"],
                        "likelihoods": {"x": {"p": 1, "q": 0}, "y": {"p": 0, "q": 1}}}]}
    study = valuation.evaluate(doc)["studies"][0]
    assert study["zero_probability_signals"] == ["q"]
    assert study["posteriors"]["q"] is None
    assert study["best_alternative_by_signal"]["q"] is None
    assert "cannot occur" in study["note"]


def test_numbers_in_the_result_are_plain_floats():
    result = valuation.evaluate(valuation.expand(
        {"kind": "payoff_table", "title": "t", "states": [{"name": "x", "probability": 1}],
         "alternatives": [{"name": "a", "payoffs": {"x": 3}}]}))

    def walk(value):
        if isinstance(value, dict):
            for v in value.values():
                walk(v)
        elif isinstance(value, list):
            for v in value:
                walk(v)
        else:
            assert not isinstance(value, np.generic), value

    walk(result)


def test_a_signal_probability_a_rounding_step_above_one_still_expands():
    # Found by hypothesis: four states whose prior sums to 1 in exact arithmetic but whose
    # joint column sums to 1.0000000000000002 in floating point.
    doc = {"kind": "payoff_table", "title": "t",
           "states": [{"name": f"s{i}", "probability": p} for i, p in
                      enumerate([0.1, 0.2, 0.3, 0.4])],
           "alternatives": [{"name": "a", "payoffs": {f"s{i}": i for i in range(4)}}],
           "studies": [{"name": "s", "cost": 0, "signals": ["only"],
                        "likelihoods": {f"s{i}": {"only": 1.0} for i in range(4)}}]}
    tree = valuation.expand(doc)
    assert valuation.validate(tree) == []
    assert valuation.evaluate(doc, risk_tolerance=50)["studies"][0]["evsi"] == 0.0


@settings(max_examples=60, deadline=None)
@given(trees(), st.one_of(st.none(), st.floats(min_value=10, max_value=10_000)))
def test_batched_learning_values_equal_one_rollback_per_outcome(doc, tolerance):
    from valuation.checks import Problems
    from valuation.flattree import CHANCE, build_tree, rollback
    from valuation.tree_eval import learning_value, learning_values

    tree = build_tree(doc, Problems())
    base = rollback(tree, risk_tolerance=tolerance)
    nodes = [int(i) for i in np.flatnonzero(tree.kind == CHANCE)]
    batched = learning_values(tree, nodes, base, tolerance)
    single = [learning_value(tree, i, base, tolerance) for i in nodes]
    assert batched == pytest.approx(single, abs=1e-7)


def brute_force_clairvoyant_value(doc) -> Fraction:
    """Expected value when every chance node's outcome is known before any choice.

    Enumerates every joint outcome of all chance nodes in exact rational arithmetic;
    given one, the tree is deterministic and each decision takes its best branch.
    Independent of the core's distribution arithmetic (definition of EVPI with each
    chance node its own uncertainty: Howard, IEEE Trans. SSC-2(1), 1966).
    """
    nodes = {n["id"]: n for n in doc["nodes"]}
    chances = [n for n in doc["nodes"] if n["kind"] == "chance"]

    def value(nid, outcome):
        node = nodes[nid]
        if node["kind"] == "end":
            return Fraction(node["payoff"])
        if node["kind"] == "chance":
            br = node["branches"][outcome[nid]]
            return Fraction(br.get("cash_flow", 0)) + value(br["to"], outcome)
        return max(Fraction(br.get("cash_flow", 0)) + value(br["to"], outcome)
                   for br in node["branches"])

    total = Fraction(0)
    for combo in itertools.product(*[range(len(n["branches"])) for n in chances]):
        outcome = {n["id"]: c for n, c in zip(chances, combo, strict=True)}
        weight = Fraction(1)
        for n, c in zip(chances, combo, strict=True):
            weight *= Fraction(n["branches"][c]["probability"])
        if weight:
            total += weight * value(doc["root"], outcome)
    return total


@settings(max_examples=80, deadline=None)
@given(trees())
def test_tree_evpi_equals_enumerating_every_joint_outcome_in_exact_arithmetic(doc):
    result = valuation.evaluate(doc)
    expected = brute_force_clairvoyant_value(doc) - brute_force_value(doc)
    assert result["evpi"] == pytest.approx(float(expected), abs=1e-9)


@settings(max_examples=30, deadline=None)
@given(trees(max_depth=4, max_branches=3))
def test_tree_evpi_on_deeper_trees_equals_enumeration(doc):
    chances = sum(1 for n in doc["nodes"] if n["kind"] == "chance")
    if chances > 8:  # 3^8 joint outcomes is the most this check enumerates
        return
    result = valuation.evaluate(doc)
    expected = brute_force_clairvoyant_value(doc) - brute_force_value(doc)
    assert result["evpi"] == pytest.approx(float(expected), abs=1e-9)


lotteries = st.integers(1, 8).flatmap(lambda n: st.tuples(
    st.lists(st.floats(-1e9, 1e9, allow_subnormal=False), min_size=n, max_size=n),
    st.lists(st.integers(0, 100), min_size=n, max_size=n).filter(any)))
risk_tolerances = st.floats(-3, 308).map(lambda e: 10.0 ** e)


@settings(max_examples=300, deadline=None)
@given(lotteries, risk_tolerances, risk_tolerances)
def test_certainty_equivalent_is_between_worst_and_expected_and_grows_with_tolerance(
        lottery, r1, r2):
    # Common practice (Pratt 1964; Howard 1988): under exponential utility a risk averter's
    # CE lies between the worst outcome and the expected value, and falls as the risk
    # tolerance R falls; it tends to the expected value as R grows. "Within rounding":
    # 1e-12 of the largest outcome, plus what the exponents (x - m) / R cannot hold once
    # they fall below the smallest normal double: there their spacing is 2**-1074 (IEEE 754
    # subnormals), so R * E[T] is known to about R * 2**-1074 only (seen at a spread of
    # 1.7e-85 with R = 1e227).
    values, weights = lottery
    probs = [w / sum(weights) for w in weights]
    worst = min(v for v, p in zip(values, probs, strict=True) if p > 0)
    expected = sum(p * v for v, p in zip(values, probs, strict=True)) / sum(probs)
    low, high = sorted((r1, r2))
    slack = 1e-12 * max(abs(v) for v in values) + 4 * high * 2.0 ** -1074
    ce_low = certainty_equivalent(values, probs, low)
    ce_high = certainty_equivalent(values, probs, high)
    for ce in (ce_low, ce_high):
        assert worst - slack <= ce <= expected + slack
    assert ce_low <= ce_high + slack
