"""Sensitivity analysis (valuation.sensitivity): sweeps, break-even values, tornado, two-way grid.

Outside references: the published examples of /work/shared/reference/check-values.md
(section named beside each check; break-even values there are "computed" from the
published inputs, not printed in the sources), and the plain reference path that
evaluates every point one by one through ``valuation.evaluate``.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.strategies import payoff_tables, trees
from valuation import evaluate
from valuation.errors import ModelValidationError, ParameterError
from valuation.evaluate import parse
from valuation.limits import TIE_TOLERANCE
from valuation.parameters import RESCALING_NOTE, list_parameters, set_parameter
from valuation.sensitivity import one_way, tornado, two_way

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
# Invented demo models (Northfield Heat Cooperative, Tellurion Surveys are invented).
TABLE = json.loads((FIXTURES / "heating_payoff_table.json").read_text())
TREE = json.loads((FIXTURES / "heating_tree.json").read_text())


def table(states, alternatives, studies=()):
    return {"kind": "payoff_table", "title": "check",
            "states": [{"name": n, "probability": p} for n, p in states],
            "alternatives": [{"name": n, "payoffs": dict(pay)} for n, pay in alternatives],
            "studies": list(studies)}


# check-values.md sec. 3 (Hillier & Lieberman prototype example; memory, high confidence).
OIL_LEASE = table([("oil", 0.25), ("dry", 0.75)],
                  [("Drill", {"oil": 700, "dry": -100}), ("Sell", {"oil": 90, "dry": 90})])
OIL_SURVEY = {"name": "Seismic survey", "cost": 30, "signals": ["favourable", "unfavourable"],
              "likelihoods": {"oil": {"favourable": 0.6, "unfavourable": 0.4},
                              "dry": {"favourable": 0.2, "unfavourable": 0.8}}}
# check-values.md sec. 1 (Samuelson & Marks, ch. 13; inputs seen).
SEISMIC = table([("wet", 0.4), ("dry", 0.6)],
                [("Drill", {"wet": 600_000, "dry": -200_000}),
                 ("Don't drill", {"wet": 0, "dry": 0})])
SEISMIC_TREE = {"kind": "tree", "title": "seismic", "root": "d", "nodes": [
    {"id": "d", "kind": "decision", "name": "Drill?", "branches": [
        {"label": "Drill", "to": "c"}, {"label": "Don't drill", "to": "none"}]},
    {"id": "c", "kind": "chance", "name": "Well", "branches": [
        {"label": "wet", "probability": 0.4, "to": "wet"},
        {"label": "dry", "probability": 0.6, "to": "dry"}]},
    {"id": "wet", "kind": "end", "payoff": 600_000}, {"id": "dry", "kind": "end", "payoff": -200_000},
    {"id": "none", "kind": "end", "payoff": 0}]}


# -- the plain reference: one evaluate() per point -----------------------------------------


def reference_label(doc, result):
    """The plan label built from evaluate()'s policy steps (same format as the sweeps)."""
    steps = result["policy"]["steps"]
    if doc["kind"] == "payoff_table":
        if not doc.get("studies"):
            return steps[0]["choice"]
        if steps[0]["choice"] == "No study":
            return f"No study; {steps[1]['choice']}"
        return f"{steps[0]['choice']}; " + ", ".join(
            f"{s['when'][0]['outcome']}: {s['choice']}" for s in steps[1:])
    tree = parse(doc)
    ordered = sorted(steps, key=lambda s: (tree.depth[tree.ids.index(s["node"])],
                                           tree.ids.index(s["node"])))
    parts = [s["choice"] if s["node"] == doc["root"] else f"{s['name']}: {s['choice']}"
             for s in ordered]
    return "; ".join(parts) if parts else "(no decision)"


def reference_points(doc, name, xs, r=None):
    out = []
    for x in xs:
        result = evaluate(set_parameter(doc, name, float(x)), risk_tolerance=r)
        value = result["certainty_equivalent"] if r else result["expected_value"]
        out.append((value, reference_label(doc, result), result))
    return out


def close(a, b, rel=1e-9):
    return abs(a - b) <= rel * max(1.0, abs(a), abs(b))


def assert_matches_reference(doc, name, xs, r=None):
    res = one_way(doc, name, xs, risk_tolerance=r)
    ref = reference_points(doc, name, res["x"], r)
    for m, (value, label, result) in enumerate(ref):
        assert close(res["value"][m], value), (res["x"][m], res["value"][m], value)
        assert close(res["expected_value"][m], result["expected_value"])
        assert res["plan"][m] == label, (res["x"][m], res["plan"][m], label)
        for alt in result["alternatives"]:
            key = "certainty_equivalent" if r else "expected_value"
            assert close(res["curves"]["alternatives"][alt["name"]][m], alt[key])
    return res


# -- published break-even values ----------------------------------------------------------


def test_oil_lease_drilling_breaks_even_at_p_oil_190_over_800():
    # sec. 3 inputs: 700 p - 100 (1 - p) = 90  =>  p = 190/800 = 0.2375 (computed).
    res = one_way(OIL_LEASE, "states[0].probability")
    assert len(res["break_even"]) == 1
    be = res["break_even"][0]
    assert abs(be["value"] - 190 / 800) <= 1e-9 * 0.2375
    assert (be["from"], be["to"]) == ("Sell", "Drill")
    assert be["problem_value"] == pytest.approx(90, abs=1e-6)


def test_seismic_example_drilling_beats_not_drilling_above_p_wet_one_quarter():
    # sec. 1 inputs: 600,000 p = 200,000 (1 - p)  =>  p = 0.25 (computed).
    for doc, name in ((SEISMIC, "states[0].probability"),
                      (SEISMIC_TREE, "nodes[1].branches[0].probability")):
        res = one_way(doc, name, points=17)
        assert [b["value"] for b in res["break_even"]] == [pytest.approx(0.25, rel=1e-9)]
        assert res["break_even"][0]["to"] == "Drill"


def test_oil_lease_survey_is_worth_buying_up_to_its_evsi_of_53():
    # sec. 3: EV with free survey 153, EMV 100, so EVSI = 53: the survey is chosen while its
    # fee is below 53 and dropped above it.
    doc = dict(OIL_LEASE, studies=[OIL_SURVEY])
    res = one_way(doc, "studies[0].cost", points=11, low=0, high=100)
    assert [b["value"] for b in res["break_even"]] == [pytest.approx(53, rel=1e-9)]
    be = res["break_even"][0]
    assert be["from"] == "Seismic survey; favourable: Drill, unfavourable: Sell"
    assert be["to"] == "No study; Drill"
    assert (be["first_choice_from"], be["first_choice_to"]) == ("Seismic survey", "No study")
    assert res["value"][0] == pytest.approx(153)  # sec. 3: free survey 153


def test_oil_lease_selling_price_break_even_equals_the_emv_of_drilling():
    # sec. 3: EMV of drilling 100, so selling wins once its payoff passes 100 in both states;
    # sweeping its payoff if oil only: 0.25 x + 0.75 * 90 = 100 => x = 130 (computed).
    res = one_way(OIL_LEASE, "alternatives[1].payoffs.oil", points=21, low=0, high=400)
    assert [b["value"] for b in res["break_even"]] == [pytest.approx(130, rel=1e-9)]
    assert (res["break_even"][0]["from"], res["break_even"][0]["to"]) == ("Drill", "Sell")


# -- batched equals one by one ------------------------------------------------------------


@pytest.mark.parametrize("doc", [TABLE, TREE], ids=["table", "tree"])
@pytest.mark.parametrize("r", [None, 2_000_000.0])
def test_every_input_of_the_demo_models_sweeps_like_evaluate_one_by_one(doc, r):
    for p in list_parameters(doc):
        xs = ([0.0, 0.3, 0.55, 1.0] if p["kind"] in ("probability", "likelihood")
              else [p["base"] - 1e6, p["base"], p["base"] + 2.5e6])
        if p["kind"] == "cost":
            xs = [0.0, p["base"], 900_000.0]
        assert_matches_reference(doc, p["name"], xs, r)


@settings(max_examples=60, deadline=None)
@given(doc=st.one_of(payoff_tables(), trees()), data=st.data(),
       r=st.sampled_from([None, None, 80.0, 1000.0]))
def test_batched_sweep_equals_evaluating_each_point(doc, data, r):
    params = list_parameters(doc)
    p = data.draw(st.sampled_from(params))
    if p["kind"] in ("probability", "likelihood"):
        xs = data.draw(st.lists(st.sampled_from([0.0, 0.125, 0.25, 0.5, 0.75, 1.0]), min_size=1,
                                max_size=4))
    else:
        xs = data.draw(st.lists(st.integers(0 if p["kind"] == "cost" else -1000, 1000),
                                min_size=1, max_size=4))
    assert_matches_reference(doc, p["name"], xs, r)


def competing_curves(doc, be, curves):
    """The two curves that must cross at a break-even, or None when it lies deeper in the plan."""
    a, b = be["first_choice_from"], be["first_choice_to"]
    if a is not None and a != b:
        return curves.get("options", curves["alternatives"]), a, b
    if doc["kind"] == "payoff_table":
        alt = [label.removeprefix("No study; ") for label in (be["from"], be["to"])]
        if not any("; " in label for label in alt):
            return curves["alternatives"], alt[0], alt[1]
    return None


@settings(max_examples=40, deadline=None)
@given(doc=st.one_of(payoff_tables(), trees()), data=st.data(),
       r=st.sampled_from([None, None, 300.0]))
def test_at_a_break_even_value_the_two_plans_are_worth_the_same(doc, data, r):
    p = data.draw(st.sampled_from(list_parameters(doc)))
    res = one_way(doc, p["name"], points=9, risk_tolerance=r)
    for be in res["break_even"]:
        x = be["value"]
        at = one_way(doc, p["name"], [x], risk_tolerance=r)
        pair = competing_curves(doc, be, at["curves"])
        if pair is not None:
            group, a, b = pair
            assert close(group[a][0], group[b][0], rel=1e-7), (x, group)
        # the two plans are worth the same there, and the problem's value is continuous
        assert_worth_the_same(be)
        assert close(be["problem_value"], at["value"][0], rel=1e-7)


def assert_worth_the_same(be):
    """Equal to rounding where the plans cross; within the tie tolerance where they never do.

    A plan that stays within TIE_TOLERANCE (relative to the best value) of another
    loses to it by the tie rule until the values shrink enough for the gap to count;
    that hand-over is a change of plan with no crossing (hypothesis found one: two
    plans 1.6e-7 apart at a value of 159.65).
    """
    if be["tie_rule"]:
        gap = abs(be["value_from"] - be["value_to"])
        top = max(abs(be["value_from"]), abs(be["value_to"]), 1.0)
        assert 0.0 < gap <= TIE_TOLERANCE * top * (1 + 1e-6), be
    else:
        assert close(be["value_from"], be["value_to"], rel=1e-9), be


def test_a_hand_over_by_the_tie_rule_is_reported_as_such():
    # Two alternatives a constant 2e-9 apart in every state: the later one is better,
    # but within the tie tolerance (1e-9 x the best value, at least 1e-9) the first
    # wins. The gap counts once the best value falls under 2, that is P(s1) > 0.8.
    # Worked by hand from the tie rule (common practice: a relative tolerance).
    doc = table([("s1", 0.5), ("s2", 0.5)],
                [("First", {"s1": 0.0, "s2": 10.0}), ("Later", {"s1": 2e-9, "s2": 10.0 + 2e-9})])
    res = one_way(doc, "states[0].probability", points=11)
    [be] = res["break_even"]
    assert be["tie_rule"] is True
    assert (be["from"], be["to"]) == ("First", "Later")
    assert be["value"] == pytest.approx(0.8, abs=1e-6)
    assert be["value_to"] - be["value_from"] == pytest.approx(2e-9, rel=1e-6)
    assert_worth_the_same(be)


def test_a_distant_crossing_does_not_move_a_tie_rule_hand_over():
    # Invented: the later alternative is exactly equal at P(s1) = 0.25 and better by less
    # than the tie tolerance up to P(s1) = 11/14 (its gap 4e-9 p - 1e-9 reaches 1e-9 x
    # the best value 10 (1 - p) there), so the best plan changes at 11/14 whatever the
    # grid; the crossing at 0.25 is not where it changes. Worked by hand from the tie
    # rule (common practice: a relative tolerance).
    doc = table([("s1", 0.5), ("s2", 0.5)],
                [("First", {"s1": 0.0, "s2": 10.0}), ("Later", {"s1": 3e-9, "s2": 10.0 - 1e-9})])
    for points in (2, 3, 11):
        [be] = one_way(doc, "states[0].probability", points=points)["break_even"]
        assert be["tie_rule"] is True, points
        assert be["value"] == pytest.approx(11 / 14, abs=1e-6), points


def test_a_sweep_across_nearly_the_whole_allowed_range_finds_its_break_even():
    # B is worth (x - 1e298) / 2 against A's 0: they cross at x = 1e298 exactly, inside a
    # sweep from -9.8e299 to 9.8e299, where the amounts total up to 9.9e299, just within
    # AMOUNT_TOTAL_LIMIT (1e300). Worked by hand.
    doc = table([("s1", 0.5), ("s2", 0.5)],
                [("A", {"s1": 0.0, "s2": 0.0}), ("B", {"s1": 1e298, "s2": -1e298})])
    [be] = one_way(doc, "alternatives[1].payoffs.s1", [-9.8e299, 9.8e299])["break_even"]
    assert be["tie_rule"] is False
    assert be["value"] == pytest.approx(1e298, rel=1e-12)


def test_a_range_wider_than_a_double_is_refused_by_name():
    doc = table([("s1", 0.5), ("s2", 0.5)],
                [("A", {"s1": 0.0, "s2": 0.0}), ("B", {"s1": 0.0, "s2": 1e299})])
    with pytest.raises(ParameterError, match=r"^alternatives\[1\]\.payoffs\.s1: the range from "
                                             r"-1e\+308 to 1e\+308 is wider than a double"):
        one_way(doc, "alternatives[1].payoffs.s1", low=-1e308, high=1e308)


def test_a_tornado_over_no_inputs_has_no_rows():
    assert tornado(TABLE, parameters=[]) == []


def test_an_exact_crossing_is_not_marked_as_a_tie():
    # Drill is worth 800 p - 100 and selling 90: they cross at p = 19/80 exactly.
    res = one_way(OIL_LEASE, "states[0].probability", points=11)
    [be] = res["break_even"]
    assert be["tie_rule"] is False
    assert be["value"] == pytest.approx(19 / 80, rel=1e-12)
    assert be["value_from"] == pytest.approx(90.0, rel=1e-12)
    assert_worth_the_same(be)


def test_break_evens_lie_between_the_grid_points_whose_plans_differ():
    res = one_way(TABLE, "states[0].probability", points=11)
    plans = res["plan"]
    changes = [m for m in range(len(plans) - 1) if plans[m] != plans[m + 1]]
    assert len(res["break_even"]) == len(changes) == 2
    for be, m in zip(res["break_even"], changes, strict=True):
        assert res["x"][m] < be["value"] < res["x"][m + 1]
        assert (be["from"], be["to"]) == (plans[m], plans[m + 1])
        below = one_way(TABLE, "states[0].probability", [be["value"] * (1 - 1e-8)])["plan"][0]
        above = one_way(TABLE, "states[0].probability", [be["value"] * (1 + 1e-8)])["plan"][0]
        assert (below, above) == (be["from"], be["to"])


def test_two_changes_between_neighbouring_points_are_both_found():
    # With only the end points, P(hot) from 0 to 1 passes two changes of plan (no study ->
    # seismic survey -> no study); the sweep must report both, not just the first.
    res = one_way(TABLE, "states[0].probability", [0.0, 1.0])
    wide = one_way(TABLE, "states[0].probability", points=401)
    assert [round(b["value"], 9) for b in res["break_even"]] == \
        [round(b["value"], 9) for b in wide["break_even"]]
    assert len(res["break_even"]) >= 2


def test_a_sweep_reports_curves_first_choices_and_the_rescaling_note():
    res = one_way(TABLE, "states[0].probability", points=5)
    assert res["x"] == [0.0, 0.25, 0.5, 0.75, 1.0]
    assert set(res["curves"]["alternatives"]) == {"Deep geothermal well", "Shallow ground loop",
                                                 "Stay on gas"}
    assert set(res["curves"]["options"]) == {"No study", "Tellurion seismic survey",
                                            "Exploratory borehole"}
    assert res["first_choice"][0] == "No study"
    assert res["best_alternative"][0] == "Shallow ground loop"
    assert res["best_alternative"][-1] == "Deep geothermal well"
    assert res["note"] == RESCALING_NOTE
    assert one_way(TABLE, "studies[0].cost")["note"] == ""
    json.dumps(res, allow_nan=False)  # plain floats, JSON-ready


def test_default_money_range_is_zero_to_twice_the_base():
    res = one_way(TABLE, "alternatives[0].payoffs.hot reservoir", points=3)
    assert res["x"] == [0.0, 3_000_000.0, 6_000_000.0]


def test_minimisation_tables_report_costs_and_the_cheapest_plan():
    doc = table([("hot", 0.5), ("cold", 0.5)],
                [("A", {"hot": 100, "cold": 300}), ("B", {"hot": 250, "cold": 200})])
    doc["objective"] = "min"
    res = one_way(doc, "states[0].probability", [0.0, 1.0])
    assert res["value"] == [200.0, 100.0]
    assert res["plan"] == ["B", "A"]
    # 100 p + 300 (1 - p) = 250 p + 200 (1 - p)  =>  p = 0.4 (hand arithmetic)
    assert res["break_even"][0]["value"] == pytest.approx(0.4, rel=1e-9)


# -- tornado ------------------------------------------------------------------------------


def test_tornado_default_ranges_and_values_match_evaluate():
    rows = tornado(TABLE)
    assert len(rows) == len(list_parameters(TABLE))
    by = {row["name"]: row for row in rows}
    prob = by["states[0].probability"]
    assert (prob["low"], prob["high"]) == pytest.approx((0.3, 0.5))
    pay = by["alternatives[0].payoffs.hot reservoir"]
    assert (pay["low"], pay["high"]) == pytest.approx((2_400_000, 3_600_000))
    zero = by["alternatives[2].payoffs.hot reservoir"]  # base 0: -/+ 20% of the largest amount
    assert (zero["low"], zero["high"]) == pytest.approx((-600_000, 600_000))
    lik = by["studies[0].likelihoods.hot reservoir.favourable"]
    assert (lik["low"], lik["high"]) == pytest.approx((0.75, 0.95))
    for row in rows:
        for end in ("low", "high"):
            ref = evaluate(set_parameter(TABLE, row["name"], row[end]))["expected_value"]
            assert close(row[f"value_{end}"], ref)
        assert row["swing"] == abs(row["value_high"] - row["value_low"])


def test_tornado_clips_probabilities_and_costs_and_accepts_explicit_ranges():
    rows = tornado(SEISMIC, probability_step=0.5,
                   ranges={"alternatives[0].payoffs.wet": (0, 1_000_000)})
    by = {row["name"]: row for row in rows}
    assert (by["states[0].probability"]["low"], by["states[0].probability"]["high"]) == (0.0, 0.9)
    assert (by["alternatives[0].payoffs.wet"]["low"], by["alternatives[0].payoffs.wet"]["high"]) \
        == (0.0, 1_000_000.0)
    cost = {r["name"]: r for r in tornado(TABLE, swing=2.0)}["studies[0].cost"]
    assert cost["low"] == 0.0  # a fee is never negative


def test_tornado_can_be_limited_to_some_inputs_and_uses_certainty_equivalents():
    names = ["states[0].probability", "studies[0].cost"]
    rows = tornado(TABLE, parameters=names, risk_tolerance=2_000_000)
    assert {r["name"] for r in rows} == set(names)
    for row in rows:
        ref = evaluate(set_parameter(TABLE, row["name"], row["high"]), risk_tolerance=2_000_000)
        assert close(row["value_high"], ref["certainty_equivalent"])


@settings(max_examples=30, deadline=None)
@given(doc=st.one_of(payoff_tables(), trees()))
def test_tornado_swings_are_non_negative_and_sorted(doc):
    rows = tornado(doc)
    swings = [r["swing"] for r in rows]
    assert all(s >= 0 for s in swings)
    assert swings == sorted(swings, reverse=True)
    expected = [p["name"] for p in list_parameters(doc)
                if p["kind"] != "cash_flow" or branch_gives_cash_flow(doc, p["name"])]
    assert sorted(r["name"] for r in rows) == sorted(expected)


def branch_gives_cash_flow(doc, name):
    i, j = (int(v) for v in re.findall(r"\[(\d+)\]", name))
    return "cash_flow" in doc["nodes"][i]["branches"][j]


def test_tornado_leaves_out_tree_cash_flows_the_document_does_not_give():
    names = {r["name"] for r in tornado(TREE)}
    assert "nodes[0].branches[0].cash_flow" in names  # given: -1,600,000
    assert "nodes[1].branches[0].cash_flow" not in names  # absent (0 by default)
    assert "nodes[1].branches[0].cash_flow" in {r["name"] for r in tornado(
        TREE, parameters=["nodes[1].branches[0].cash_flow"])}


# -- two-way ------------------------------------------------------------------------------


def test_two_way_grid_matches_evaluate_point_by_point():
    xs, ys = [0.1, 0.4, 0.7, 0.95], [0.0, 150_000.0, 600_000.0]
    grid = two_way(TABLE, "states[0].probability", xs, "studies[0].cost", ys)
    assert grid["x"]["values"] == xs and grid["y"]["values"] == ys
    assert len(grid["best"]) == len(ys) and len(grid["best"][0]) == len(xs)
    for i, y in enumerate(ys):
        for j, x in enumerate(xs):
            doc = set_parameter(set_parameter(TABLE, "states[0].probability", x), "studies[0].cost", y)
            result = evaluate(doc)
            assert grid["labels"][grid["best"][i][j]] == reference_label(doc, result)
            assert close(grid["value"][i][j], result["expected_value"])
    assert grid["note"] == RESCALING_NOTE


def test_two_way_on_a_tree_with_risk_tolerance_matches_evaluate():
    xs, ys = [0.2, 0.5, 0.8], [-2_000_000.0, -800_000.0]
    grid = two_way(TREE, "nodes[1].branches[0].probability", xs, "nodes[2].branches[0].cash_flow",
                   ys, risk_tolerance=3_000_000)
    for i, y in enumerate(ys):
        for j, x in enumerate(xs):
            doc = set_parameter(set_parameter(TREE, "nodes[1].branches[0].probability", x),
                                "nodes[2].branches[0].cash_flow", y)
            result = evaluate(doc, risk_tolerance=3_000_000)
            assert grid["labels"][grid["best"][i][j]] == reference_label(doc, result)
            assert close(grid["value"][i][j], result["certainty_equivalent"])


# -- bad input ----------------------------------------------------------------------------


@pytest.mark.parametrize(("call", "message"), [
    (lambda: one_way(TABLE, "states[9].probability"),
     "states[9].probability: not an input of this model (list_parameters names every input)"),
    (lambda: one_way(TABLE, "states[0].probability", points=1),
     "points: must be a whole number within [2, 100000], got 1"),
    (lambda: one_way(TABLE, "states[0].probability", low=0.6, high=0.2),
     "states[0].probability: the low end must be below the high end, got 0.6 and 0.2"),
    (lambda: one_way(TABLE, "states[0].probability", [0.2, 1.5]),
     "states[0].probability: must be within [0, 1], got 1.5"),
    (lambda: one_way(TABLE, "studies[0].cost", [-1.0]), "studies[0].cost: must be zero or more, got -1"),
    (lambda: one_way(TABLE, "studies[0].cost", risk_tolerance=-5),
     "risk_tolerance: must be a positive finite number, got -5"),
    (lambda: tornado(TABLE, swing=0), "swing: must be a positive number, got 0"),
    (lambda: tornado(TABLE, ranges={"nope": (0, 1)}),
     "nope: not an input of this model (list_parameters names every input)"),
    (lambda: two_way(TABLE, "studies[0].cost", [1], "studies[0].cost", [2]),
     "studies[0].cost: the two parameters of a two-way grid must differ"),
    (lambda: two_way(TABLE, "states[0].probability", [0.1], "states[1].probability", [0.2]),
     "states[1].probability: same chance node or likelihood row as states[0].probability; "
     "setting one rescales the other, so they cannot vary independently"),
])
def test_bad_sensitivity_requests_are_refused_with_exact_messages(call, message):
    with pytest.raises(ParameterError) as info:
        call()
    assert str(info.value) == message


def test_likelihoods_of_different_states_may_form_a_two_way_grid():
    grid = two_way(TABLE, "studies[0].likelihoods.hot reservoir.favourable", [0.5, 0.9],
                   "studies[0].likelihoods.cold reservoir.favourable", [0.1, 0.4])
    assert np.array(grid["best"]).shape == (2, 2)


def test_an_invalid_model_is_refused_before_any_sweep():
    with pytest.raises(ModelValidationError):
        one_way({"kind": "payoff_table"}, "states[0].probability")


# -- structure edge cases -----------------------------------------------------------------


def test_a_large_batch_is_evaluated_in_chunks_with_the_same_results(monkeypatch):
    import valuation.batch as batch

    xs = list(np.linspace(0, 1, 23))
    whole = two_way(TABLE, "states[0].probability", xs, "studies[1].cost", [0.0, 300_000.0])
    monkeypatch.setattr(batch, "CHUNK_CELLS", 50)  # a few rows per chunk
    chunked = two_way(TABLE, "states[0].probability", xs, "studies[1].cost", [0.0, 300_000.0])
    assert chunked == whole
    tree_whole = one_way(TREE, "nodes[1].branches[0].probability", points=9)
    assert one_way(TREE, "nodes[1].branches[0].probability", points=9) == tree_whole


def test_a_tree_whose_root_is_a_chance_node_reports_no_first_choice():
    doc = {"kind": "tree", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "branches": [{"label": "x", "probability": 0.5, "to": "d"},
                                                    {"label": "y", "probability": 0.5, "to": "e2"}]},
        {"id": "d", "kind": "decision", "name": "Pick", "branches": [{"label": "p", "to": "e1"},
                                                                     {"label": "q", "to": "e3"}]},
        {"id": "e1", "kind": "end", "payoff": 10}, {"id": "e2", "kind": "end", "payoff": 5},
        {"id": "e3", "kind": "end", "payoff": 7}]}
    res = assert_matches_reference(doc, "nodes[2].payoff", [0.0, 6.0, 8.0, 20.0])
    assert res["first_choice"] == [None] * 4
    assert res["plan"] == ["Pick: q", "Pick: q", "Pick: p", "Pick: p"]
    assert [b["value"] for b in one_way(doc, "nodes[2].payoff")["break_even"]] == \
        [pytest.approx(7, rel=1e-12)]  # p beats q once its payoff passes 7 (hand arithmetic)


def test_a_tree_without_decisions_has_one_plan_and_no_break_even():
    doc = {"kind": "tree", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "branches": [{"label": "x", "probability": 0.5, "to": "e1"},
                                                    {"label": "y", "probability": 0.5, "to": "e2"}]},
        {"id": "e1", "kind": "end", "payoff": 10}, {"id": "e2", "kind": "end", "payoff": 5}]}
    res = one_way(doc, "nodes[0].branches[0].probability", points=3)
    assert res["value"] == [5.0, 7.5, 10.0]
    assert res["plans"] == ["(no decision)"] and res["break_even"] == []


def test_a_cost_minimising_tree_breaks_even_where_expected_costs_are_equal():
    doc = {"kind": "tree", "objective": "min", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "name": "D", "branches": [
            {"label": "A", "to": "c", "cash_flow": 10}, {"label": "B", "to": "e3"}]},
        {"id": "c", "kind": "chance", "branches": [{"label": "x", "probability": 0.5, "to": "e1"},
                                                    {"label": "y", "probability": 0.5, "to": "e2"}]},
        {"id": "e1", "kind": "end", "payoff": 10}, {"id": "e2", "kind": "end", "payoff": 50},
        {"id": "e3", "kind": "end", "payoff": 45}]}
    # 10 + 10 p + 50 (1 - p) = 45  =>  p = 0.375 (hand arithmetic)
    res = assert_matches_reference(doc, "nodes[1].branches[0].probability", [0.0, 0.5, 1.0])
    assert [b["value"] for b in one_way(doc, "nodes[1].branches[0].probability")["break_even"]] == \
        [pytest.approx(0.375, rel=1e-12)]
    assert res["value"] == [45.0, 40.0, 20.0]


@pytest.mark.parametrize("module", ["valuation.parameters", "valuation.sensitivity"])
def test_the_docstring_examples_hold(module):
    import doctest
    import importlib

    failed, attempted = doctest.testmod(importlib.import_module(module))
    assert attempted > 0 and failed == 0


@pytest.mark.parametrize("name", ["heating_payoff_table.json", "heating_tree.json"])
def test_tornado_at_a_huge_risk_tolerance_is_the_risk_neutral_tornado(name):
    # Common practice (Howard 1988): exponential utility tends to the expected value as R
    # grows; the batched certainty equivalents (valuation.batch) must tend there too, also
    # where a rescaled prior such as 0.3 / 0.7 sums to 1 only to rounding.
    doc = json.loads((FIXTURES / name).read_text())
    neutral = {row["name"]: row for row in tornado(doc)}
    averse = {row["name"]: row for row in tornado(doc, risk_tolerance=1e308)}
    assert averse.keys() == neutral.keys()
    for key, row in averse.items():
        assert (row["plan_low"], row["plan_high"]) == (neutral[key]["plan_low"],
                                                       neutral[key]["plan_high"])
        for side in ("value_low", "value_high"):
            assert row[side] == pytest.approx(neutral[key][side], rel=1e-9, abs=1e-6)
