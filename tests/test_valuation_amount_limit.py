"""The amounts' limit: a model whose amounts could overflow a double is refused by name.

Project rule (``valuation.limits.AMOUNT_TOTAL_LIMIT``, 1e300): a tree's payoffs and cash
flows (after discounting), or a payoff table's payoffs and study costs (counted as its
equivalent tree holds them), must total less than the limit in absolute value. The
largest finite double is about 1.8e308 (IEEE 754 binary64; Python's
``sys.float_info.max``), so every path total, expected value and difference of two of
them (EVPI, EVSI) stays finite, and so does every number of a result document, which
JSON (the API, ``--json``) cannot otherwise carry. Values below are worked by hand with
the rollback and EVPI definitions (common practice: average out and fold back; EVPI is
the value with the state revealed minus the value without).
"""

from __future__ import annotations

import json
import math
import sys

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import valuation
from tests.strategies import payoff_tables, trees
from valuation import flattree
from valuation.checks import Problems
from valuation.errors import ModelValidationError, ParameterError
from valuation.flattree import _build_checked, _build_fast
from valuation.limits import AMOUNT_TOTAL_LIMIT
from valuation.parameters import list_parameters
from valuation.sensitivity import one_way, tornado, two_way

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

TREE_RULE = ("payoffs and cash flows (after discounting) must total less than 1e+300 in "
             "absolute value, so that no total or expected value overflows; they total {}, "
             "and this amount is the largest")
TABLE_RULE = ("payoffs (each counted once, and once more under every signal of every study, as "
              "in the equivalent tree) and study costs must total less than 1e+300 in absolute "
              "value, so that no total or expected value overflows; they total {}, and this "
              "amount is the largest")
BEYOND_A_DOUBLE = "more than a double holds (about 1.8e+308)"


def problems_of(doc) -> list[tuple[str, str]]:
    return [(p.location, p.message) for p in valuation.validate(doc)]


def non_finite(value, path="result"):
    """Every place in a result document that holds a float that is not finite."""
    if isinstance(value, float):
        return [] if math.isfinite(value) else [path]
    if isinstance(value, dict):
        return [p for key, item in value.items() for p in non_finite(item, f"{path}.{key}")]
    if isinstance(value, list):
        return [p for i, item in enumerate(value) for p in non_finite(item, f"{path}[{i}]")]
    return []


def assert_all_finite(result):
    assert non_finite(result) == []
    json.dumps(result, allow_nan=False)  # what a strict JSON renderer demands


def test_the_limit_leaves_a_wide_margin_below_the_largest_double():
    # Project rule: 1e300. IEEE 754 binary64: largest finite value (2 - 2**-52) * 2**1023.
    assert AMOUNT_TOTAL_LIMIT == 1e300
    assert sys.float_info.max == (2 - 2**-52) * 2.0**1023
    assert sys.float_info.max / AMOUNT_TOTAL_LIMIT > 1e8


# -- trees ------------------------------------------------------------------------------------


def venture(hot=6e299, cash=-1e299, cold=-1e299, **extra_hot):
    """Invented: go (a cash flow, then a 50-50 chance) or stay (0)."""
    return {"kind": "tree", "title": "venture (invented)", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [
            {"label": "go", "to": "c", "cash_flow": cash}, {"label": "stay", "to": "s"}]},
        {"id": "c", "kind": "chance", "branches": [
            {"label": "hot", "to": "h", "probability": 0.5},
            {"label": "cold", "to": "k", "probability": 0.5}]},
        {"id": "h", "kind": "end", "payoff": hot, **extra_hot},
        {"id": "k", "kind": "end", "payoff": cold},
        {"id": "s", "kind": "end", "payoff": 0}]}


class Amount(float):
    """A caller's own number type: a valid number the one-pass reader leaves to the checked one."""


def assert_venture_values(result):
    # go: -1e299 + 0.5 * 6e299 + 0.5 * (-1e299) = 1.5e299 > 0 = stay, so go; its outcomes
    # are 5e299 and -2e299. Hot revealed: go (5e299); cold revealed: stay (0), so
    # EVPI = 0.5 * 5e299 - 1.5e299 = 1e299. Worked by hand.
    assert result["policy"]["steps"][0]["choice"] == "go"
    assert result["expected_value"] == pytest.approx(1.5e299, rel=1e-12)
    assert result["evpi"] == pytest.approx(1e299, rel=1e-12)
    outcomes = result["risk_profile"]["outcomes"]
    assert [o["value"] for o in outcomes] == pytest.approx([-2e299, 5e299], rel=1e-12)
    assert_all_finite(result)


def test_a_tree_just_within_the_limit_is_evaluated_by_the_one_pass_reader():
    doc = venture()  # 1e299 + 6e299 + 1e299 = 8e299 in all
    assert _build_fast(doc) is not None
    assert_venture_values(valuation.evaluate(doc))


def test_a_tree_just_beyond_the_limit_is_refused_at_its_largest_amount():
    doc = venture(hot=8.1e299)  # 1e299 + 8.1e299 + 1e299 = 1.01e300
    assert _build_fast(doc) is None  # the one-pass reader leaves it to the checked reader
    expected = [("nodes[2].payoff", TREE_RULE.format("1.01e+300"))]
    assert problems_of(doc) == expected
    problems = Problems()
    assert _build_checked(doc, problems) is None
    assert [(p.location, p.message) for p in problems.as_list()] == expected
    with pytest.raises(ModelValidationError):
        valuation.evaluate(doc)


def test_the_checked_reader_applies_the_rule_to_what_the_one_pass_reader_declines():
    within, beyond = venture(hot=Amount(6e299)), venture(hot=Amount(8.1e299))
    assert _build_fast(within) is None and _build_fast(beyond) is None
    assert _build_checked(within, Problems()) is not None
    assert_venture_values(valuation.evaluate(within))
    assert problems_of(beyond) == [("nodes[2].payoff", TREE_RULE.format("1.01e+300"))]


def test_the_rule_is_reported_beside_a_structural_problem():
    doc = venture(hot=8.1e299)
    doc["nodes"].append({"id": "orphan", "kind": "end", "payoff": 1})  # reached by no branch
    assert problems_of(doc) == [
        ("nodes[5]", "node 'orphan' is not reachable from the root (an orphan or part of a cycle)"),
        ("nodes[2].payoff", TREE_RULE.format("1.01e+300"))]


def test_the_reported_sum_overflowing_a_double_names_the_first_largest_amount():
    # The reported defect: 1.5e308 + 1.5e308 is beyond a double (expected value was inf).
    doc = venture(hot=1.5e308, cash=1.5e308, cold=0)
    assert problems_of(doc) == [("nodes[0].branches[0].cash_flow",
                                 TREE_RULE.format(BEYOND_A_DOUBLE))]


def test_amounts_count_after_discounting_and_whatever_the_objective():
    # 1.2e300 in 10 years at 10% is worth 1.2e300 / 1.1**10 = 4.63e299 today: within.
    dated = venture(hot=1.2e300, time=10)
    dated["discount_rate"] = 0.1
    result = valuation.evaluate(dated)
    assert result["nodes"]["h"]["value"] == pytest.approx(1.2e300 / 1.1**10, rel=1e-12)
    assert_all_finite(result)
    dated["discount_rate"] = 0.0  # undiscounted: 1e299 + 1.2e300 + 1e299 = 1.4e300
    assert problems_of(dated) == [("nodes[2].payoff", TREE_RULE.format("1.4e+300"))]
    costs = venture(hot=8.1e299)
    costs["objective"] = "min"
    assert problems_of(costs) == [("nodes[2].payoff", TREE_RULE.format("1.01e+300"))]


# -- payoff tables ----------------------------------------------------------------------------


def bet(high=5e299, low=-2e299, sure=1e298, studies=()):
    """Invented: a bet (high or low, 50-50) against a small sure amount either way."""
    return {"kind": "payoff_table", "title": "bet (invented)",
            "states": [{"name": "up", "probability": 0.5}, {"name": "down", "probability": 0.5}],
            "alternatives": [{"name": "bet", "payoffs": {"up": high, "down": low}},
                             {"name": "hold", "payoffs": {"up": sure, "down": sure}}],
            "studies": list(studies)}


def oracle(cost):
    return {"name": "oracle", "cost": cost, "signals": ["says up", "says down"],
            "likelihoods": {"up": {"says up": 1, "says down": 0},
                            "down": {"says up": 0, "says down": 1}}}


def test_a_table_just_within_the_limit_is_evaluated():
    doc = bet()  # 5e299 + 2e299 + 1e298 + 1e298 = 7.2e299
    result = valuation.evaluate(doc)
    # bet: 0.5 * 5e299 - 0.5 * 2e299 = 1.5e299 > hold 1e298. Up revealed: bet (5e299);
    # down: hold (1e298). EVPI = 0.5 * 5e299 + 0.5 * 1e298 - 1.5e299 = 1.05e299 (by hand).
    assert result["without_information"]["best_alternative"] == "bet"
    assert result["expected_value"] == pytest.approx(1.5e299, rel=1e-12)
    assert result["evpi"] == pytest.approx(1.05e299, rel=1e-12)
    outcomes = result["risk_profile"]["outcomes"]
    assert [o["value"] for o in outcomes] == pytest.approx([-2e299, 5e299], rel=1e-12)
    assert result["nodes"]  # the equivalent tree is within the limit too
    assert_all_finite(result)


def test_a_table_just_beyond_the_limit_is_refused_at_its_largest_payoff():
    doc = bet(high=7.9e299)  # 7.9e299 + 2e299 + 2e298 = 1.01e300
    assert problems_of(doc) == [("alternatives[0].payoffs.up", TABLE_RULE.format("1.01e+300"))]
    with pytest.raises(ModelValidationError):
        valuation.evaluate(doc)


def test_a_study_counts_each_payoff_once_more_per_signal_as_the_equivalent_tree_does():
    # 7.2e299 once without the study and once under each of its two signals: 2.16e300.
    doc = bet(studies=[oracle(0)])
    assert problems_of(doc) == [("alternatives[0].payoffs.up", TABLE_RULE.format("2.16e+300"))]
    # A third of each payoff is within: 3 * 2.4e299 + a fee of 1e299 = 8.2e299. The oracle
    # is worth the EVPI, a third of the above: 3.5e298.
    doc = bet(high=5e299 / 3, low=-2e299 / 3, sure=1e298 / 3, studies=[oracle(1e299)])
    result = valuation.evaluate(doc)
    assert result["studies"][0]["evsi"] == pytest.approx(3.5e298, rel=1e-12)
    assert result["evpi"] == pytest.approx(3.5e298, rel=1e-12)
    assert result["nodes"]
    assert_all_finite(result)


def test_node_details_are_left_out_rather_than_failing_if_the_equivalent_tree_is_refused(
        monkeypatch):
    # The tree reader adds the same amounts in another order, so a table within rounding
    # of the limit could have its equivalent tree refused. A lower limit in the tree
    # reader alone stands in for that edge: the table is still evaluated, without details.
    monkeypatch.setattr(flattree, "AMOUNT_TOTAL_LIMIT", 5e299)
    result = valuation.evaluate(bet())  # 7.2e299 in all
    assert result["nodes"] == {}
    [warning] = result["warnings"]
    assert warning.startswith("node details omitted: nodes[6].payoff: payoffs and cash flows "
                              "(after discounting) must total less than ")
    assert "they total 7.2e+299" in warning
    assert result["evpi"] == pytest.approx(1.05e299, rel=1e-12)


def test_a_study_cost_can_be_the_largest_amount():
    doc = bet(high=1.0, low=-1.0, studies=[oracle(1.7e308)])
    assert problems_of(doc) == [("studies[0].cost", TABLE_RULE.format("1.7e+308"))]


def test_payoffs_of_opposite_sign_beyond_a_double_are_refused():
    # Their difference (the EVPI) would be 3.4e308: beyond a double.
    doc = bet(high=1.7e308, low=-1.7e308)
    assert problems_of(doc) == [("alternatives[0].payoffs.up", TABLE_RULE.format(BEYOND_A_DOUBLE))]


# -- sensitivity: the sweeps are held to the same limit ---------------------------------------


def test_a_sweep_beyond_the_limit_is_refused_naming_the_input_and_its_values():
    with pytest.raises(ParameterError) as refused:
        one_way(bet(), "alternatives[1].payoffs.up", [0.0, 5e299])
    # 7.2e299 - 1e298 + 5e299 = 1.21e300
    assert str(refused.value) == (
        "alternatives[1].payoffs.up: values from 0 to 5e+299 would bring the model's amounts "
        "to a total of 1.21e+300 in absolute value; they must total less than 1e+300 so that "
        "no total or expected value overflows; give a narrower range")
    assert_all_finite(one_way(bet(), "alternatives[1].payoffs.up", [0.0, 2.5e299]))  # 9.6e299


def test_a_two_way_grid_beyond_the_limit_names_both_inputs():
    doc = bet(high=3e299, low=-3e299)  # 6.2e299; each input alone to 3e299 stays within
    for name in ("alternatives[1].payoffs.up", "alternatives[1].payoffs.down"):
        assert_all_finite(one_way(doc, name, [0.0, 3e299]))
    with pytest.raises(ParameterError, match=r"^alternatives\[1\]\.payoffs\.up, alternatives\[1\]"
                                             r"\.payoffs\.down: values from 0 to 3e\+299 and from 0 "
                                             r"to 3e\+299 respectively would bring "):
        two_way(doc, "alternatives[1].payoffs.up", [0.0, 3e299],
                "alternatives[1].payoffs.down", [0.0, 3e299])


def test_a_tornado_whose_swing_goes_beyond_the_limit_is_refused():
    doc = bet()
    assert_all_finite(tornado(doc))  # 20% either way: at most 7.2e299 + 1e299 = 8.2e299
    with pytest.raises(ParameterError, match=r"^alternatives\[0\]\.payoffs\.up: values from 0 "
                                             r"to 1e\+300 would bring "):
        tornado(doc, swing=1.0)  # bet if up to 1e300: 1.22e300


def test_a_tree_sweep_counts_a_dated_amount_discounted():
    doc = venture(hot=1.2e300, time=10)
    doc["discount_rate"] = 0.1
    # 1e299 + 1e299 + 1.9e300 / 1.1**10 (7.33e299) = 9.33e299: within.
    assert_all_finite(one_way(doc, "nodes[2].payoff", [0.0, 1.9e300]))
    with pytest.raises(ParameterError, match=r"^nodes\[2\]\.payoff: values from 0 to 2\.2e\+300 "
                                             r"would bring the model's amounts to a total of 1\.048e\+300 "):
        one_way(doc, "nodes[2].payoff", [0.0, 2.2e300])  # 2e299 + 8.48e299


# -- property: within the limit, no number of a result is infinite or NaN ----------------------


def scaled(doc, fraction):
    """``doc`` with every amount multiplied so that they total ``fraction`` of the limit,
    counted as the rule counts them."""
    if doc["kind"] == "tree":
        places = [(n, "payoff", 1) for n in doc["nodes"] if n["kind"] == "end"]
        places += [(b, "cash_flow", 1) for n in doc["nodes"] for b in n.get("branches", [])
                   if "cash_flow" in b]
    else:
        copies = 1 + sum(len(study["signals"]) for study in doc["studies"])
        places = [(a["payoffs"], s, copies) for a in doc["alternatives"] for s in a["payoffs"]]
        places += [(study, "cost", 1) for study in doc["studies"]]
    total = sum(abs(item[key]) * weight for item, key, weight in places)
    if total:
        factor = fraction * AMOUNT_TOTAL_LIMIT / total
        for item, key, _ in places:
            item[key] = item[key] * factor
    return doc


fractions_of_the_limit = st.sampled_from([1e-310, 1e-3, 0.5, 0.99, 0.999999])
risk_tolerances = st.sampled_from([None, 5e-324, 1.0, 1e150, 1e299, 1e300, 1.7e308])


# A risk tolerance of 5e-324 divides spreads into inf on purpose: exp(-inf) is 0 (the CE is
# then the worst outcome), and numpy says so in a warning.
@pytest.mark.filterwarnings("ignore:overflow encountered in divide:RuntimeWarning")
@SETTINGS
@given(st.one_of(trees(max_depth=3, max_branches=3), payoff_tables()), fractions_of_the_limit,
       risk_tolerances, st.sampled_from(["max", "min"]))
def test_no_number_of_a_result_within_the_limit_is_infinite_or_nan(doc, fraction, r, objective):
    doc = scaled(doc, fraction)
    doc["objective"] = objective
    assert valuation.validate(doc) == []
    assert_all_finite(valuation.evaluate(doc, risk_tolerance=r))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(trees(max_depth=2, max_branches=3), payoff_tables(max_states=3, max_alternatives=3)),
       st.sampled_from([0.5, 0.999999]), st.sampled_from([None, 1.0, 1.7e308]),
       st.lists(st.floats(-sys.float_info.max, sys.float_info.max), min_size=1, max_size=3))
def test_a_sweep_is_finite_or_refused_by_name(doc, fraction, r, values):
    """Any sweep of a model within the limit, over any finite values: every number it
    returns is finite, or it is refused with the input and its values named."""
    doc = scaled(doc, fraction)
    money = [p["name"] for p in list_parameters(doc) if p["kind"] in ("payoff", "cost", "cash_flow")]
    for name in money[:3]:
        xs = [abs(v) for v in values] if name.endswith(".cost") else values  # a cost is >= 0
        try:
            assert_all_finite(one_way(doc, name, xs, risk_tolerance=r))
            assert_all_finite(tornado(doc, ranges={name: (min(xs), max(xs))}, parameters=[name],
                                      risk_tolerance=r))
        except ParameterError as exc:
            assert str(exc).startswith(f"{name}: values from "), exc
            assert "would bring the model's amounts to a total of" in str(exc)
