"""Brier and logarithmic scores of a source's record, Murphy's partition, calibration tables.

Checks against /work/shared/reference/check-values.md sec. 8 and 9 (source beside each
check) and exact `fractions` arithmetic.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from valuation.errors import ModelValidationError
from valuation.reliability import (
    brier_decomposition,
    brier_score,
    calibration_table,
    log_score,
    score_record,
)

SYMMETRIC_70 = {"a": {"x": 0.7, "y": 0.3}, "b": {"x": 0.3, "y": 0.7}}


def rec(signal: str, state: str, day: int = 1) -> dict:
    return {"date": f"2022-03-{day:02d}", "signal": signal, "state": state}


# --- Brier 1950, single forecasts ---------------------------------------------------------


@pytest.mark.parametrize(
    ("forecast", "expected"),
    [
        # Brier, Monthly Weather Review 78(1), 1950, in today's one-category form (restated):
        (0.7, 0.09),
        (0.3, 0.49),
        (0.5, 0.25),
    ],
)
def test_single_forecast_brier_scores_match_brier_1950(forecast, expected):
    assert brier_score([forecast], [1]) == pytest.approx(expected)


@pytest.mark.parametrize(("forecast", "expected"), [(0.7, 0.09), (0.3, 0.49), (0.5, 0.25)])
def test_score_record_uses_the_one_category_form_for_two_states(forecast, expected):
    # Brier 1950 (restated): the original sums both categories, twice today's score.
    lik = {"a": {"x": forecast, "y": 1 - forecast}, "b": {"x": 1 - forecast, "y": forecast}}
    out = score_record(lik, None, [rec("x", "a")])
    assert out["brier"] == pytest.approx(expected)
    assert out["brier_all_categories"] == pytest.approx(2 * expected)
    assert out["brier_convention"].startswith("two states: today's one-category form")
    assert out["per_record"][0]["prob_true_state"] == pytest.approx(forecast)


# --- Murphy 1973 and the log score (computed, not published) ----------------------------

# check-values.md sec. 8, computed check (not published): 10 forecasts of 0.1 with 1 event,
# 10 of 0.5 with 4, 10 of 0.9 with 8.
FORECASTS = [0.1] * 10 + [0.5] * 10 + [0.9] * 10
OUTCOMES = [1] + [0] * 9 + [1] * 4 + [0] * 6 + [1] * 8 + [0] * 2


def test_murphy_decomposition_matches_the_computed_check():
    out = brier_decomposition(FORECASTS, OUTCOMES)
    # Computed, not published (check-values.md sec. 8); partition of Murphy 1973.
    assert out["brier"] == pytest.approx(0.170000, abs=5e-7)
    assert out["reliability"] == pytest.approx(0.006667, abs=5e-7)
    assert out["resolution"] == pytest.approx(0.082222, abs=5e-7)
    assert out["uncertainty"] == pytest.approx(0.245556, abs=5e-7)
    assert out["groups"] == 3 and out["forecasts"] == 30


def test_murphy_decomposition_in_exact_fractions():
    # Exact arithmetic with `fractions`: REL = 1/150, RES = 37/450, UNC = 221/900.
    f = [Fraction(1, 10), Fraction(1, 2), Fraction(9, 10)]
    o_k = [Fraction(1, 10), Fraction(4, 10), Fraction(8, 10)]
    base = Fraction(13, 30)
    rel = sum(10 * (a - b) ** 2 for a, b in zip(f, o_k, strict=True)) / 30
    res = sum(10 * (b - base) ** 2 for b in o_k) / 30
    unc = base * (1 - base)
    out = brier_decomposition(FORECASTS, OUTCOMES)
    assert out["reliability"] == pytest.approx(float(rel), rel=1e-12)
    assert out["resolution"] == pytest.approx(float(res), rel=1e-12)
    assert out["uncertainty"] == pytest.approx(float(unc), rel=1e-12)
    assert rel - res + unc == Fraction(17, 100)


def test_mean_log_score_matches_the_computed_check():
    # Computed, not published (check-values.md sec. 8); Good 1952, natural log.
    assert log_score(FORECASTS, OUTCOMES) == pytest.approx(-0.521012, abs=5e-7)


def test_log_score_of_an_event_forecast_impossible_is_minus_infinity():
    assert log_score([0.0, 0.5], [1, 1]) == -math.inf


@settings(max_examples=100, deadline=None, derandomize=True)
@given(
    st.lists(
        st.tuples(st.sampled_from([0.0, 0.05, 0.2, 0.35, 0.5, 0.8, 1.0]), st.booleans()),
        min_size=1,
        max_size=80,
    )
)
def test_property_murphy_identity_holds_for_random_data(pairs):
    # Murphy 1973: BS = REL - RES + UNC exactly when grouped by distinct forecast value.
    forecasts = [f for f, _ in pairs]
    outcomes = [o for _, o in pairs]
    out = brier_decomposition(forecasts, outcomes)
    assert out["brier"] == pytest.approx(
        out["reliability"] - out["resolution"] + out["uncertainty"], abs=1e-12
    )
    assert out["reliability"] >= 0 and out["resolution"] >= 0
    assert out["brier"] == pytest.approx(brier_score(forecasts, outcomes))


@settings(max_examples=50, deadline=None, derandomize=True)
@given(
    st.lists(st.floats(0.0, 1.0), min_size=1, max_size=50),
    st.randoms(use_true_random=False),
)
def test_property_murphy_identity_holds_for_arbitrary_float_forecasts(forecasts, rnd):
    outcomes = [rnd.random() < 0.5 for _ in forecasts]
    out = brier_decomposition(forecasts, outcomes)
    assert out["brier"] == pytest.approx(
        out["reliability"] - out["resolution"] + out["uncertainty"], abs=1e-12
    )


@pytest.mark.parametrize(
    ("forecasts", "outcomes", "location"),
    [
        ([], [], "forecasts"),
        ([0.5], [1, 0], "outcomes"),
        ([1.5], [1], "forecasts[0]"),
        ([float("nan")], [1], "forecasts[0]"),
        ([0.5], [2], "outcomes[0]"),
        ([0.5], ["yes"], "outcomes[0]"),
    ],
)
def test_bad_binary_inputs_are_refused_with_their_place(forecasts, outcomes, location):
    with pytest.raises(ModelValidationError) as excinfo:
        brier_decomposition(forecasts, outcomes)
    assert location in [p.location for p in excinfo.value.problems]


# --- calibration table ----------------------------------------------------------------------


def test_calibration_table_bins_the_check_forecasts():
    table = calibration_table(FORECASTS, OUTCOMES, bins=10)
    assert len(table) == 10
    assert [row["lower"] for row in table] == pytest.approx([k / 10 for k in range(10)])
    filled = {row["lower"]: row for row in table if row["count"]}
    # 0.1 lies on an edge and goes to the bin above it, as does 0.5 and 0.9.
    assert sorted(filled) == pytest.approx([0.1, 0.5, 0.9])
    assert filled[0.5]["count"] == 10
    assert filled[0.5]["mean_forecast"] == pytest.approx(0.5)
    assert filled[0.5]["observed_frequency"] == pytest.approx(0.4)
    empty = table[0]
    assert empty["count"] == 0 and empty["mean_forecast"] is None
    assert empty["observed_frequency"] is None


def test_calibration_table_puts_one_in_the_last_bin_and_counts_everything():
    forecasts = [0.0, 0.3, 0.7, 0.99, 1.0]
    table = calibration_table(forecasts, [0, 0, 1, 1, 1], bins=10)
    assert sum(row["count"] for row in table) == 5
    assert table[3]["count"] == 1  # 0.3 belongs to [0.3, 0.4), not to [0.2, 0.3)
    assert table[9]["count"] == 2
    assert table[9]["mean_forecast"] == pytest.approx(0.995)


@pytest.mark.parametrize("bins", [0, 1001, 2.5, True])
def test_calibration_table_refuses_bad_bin_counts(bins):
    with pytest.raises(ModelValidationError) as excinfo:
        calibration_table([0.5], [1], bins=bins)
    assert excinfo.value.problems[0].location == "bins"


# --- score_record ---------------------------------------------------------------------------


def test_study_posterior_matches_the_diagnostic_test_of_gigerenzer_and_hoffrage():
    # Gigerenzer & Hoffrage, Psychological Review 102(4), 1995 (memory, high confidence):
    # 1% base rate, P(+ | c) = 0.8, P(+ | no c) = 0.096 -> P(c | +) = 0.07764.
    lik = {"condition": {"+": 0.8, "-": 0.2}, "none": {"+": 0.096, "-": 0.904}}
    out = score_record(lik, {"condition": 0.01, "none": 0.99}, [rec("+", "condition")])
    assert out["per_record"][0]["prob_true_state"] == pytest.approx(0.07764, abs=5e-6)
    assert out["prior_source"] == "given"
    assert out["hit_rate"] == 0.0  # "none" stays the more likely state after a positive


def test_three_state_record_matches_exact_fractions():
    lik = {
        "hot": {"good": 0.6, "fair": 0.3, "poor": 0.1},
        "warm": {"good": 0.3, "fair": 0.4, "poor": 0.3},
        "cold": {"good": 0.1, "fair": 0.3, "poor": 0.6},
    }
    prior = {"hot": 0.2, "warm": 0.5, "cold": 0.3}
    records = [rec("good", "hot", 1), rec("fair", "cold", 2), rec("poor", "cold", 3)]
    out = score_record(lik, prior, records)
    F = Fraction
    lik_f = {s: {k: F(str(v)) for k, v in row.items()} for s, row in lik.items()}
    prior_f = {s: F(str(v)) for s, v in prior.items()}
    briers, logs, hits = [], [], []
    for r in records:
        joint = {s: prior_f[s] * lik_f[s][r["signal"]] for s in lik}
        total = sum(joint.values())
        post = {s: joint[s] / total for s in lik}
        # Brier 1950, multi-category: sum over states of (p_j - o_j)^2.
        briers.append(sum((post[s] - (1 if s == r["state"] else 0)) ** 2 for s in lik))
        logs.append(math.log(post[r["state"]]))
        hits.append(1 if max(post, key=post.get) == r["state"] else 0)
    assert out["brier"] == pytest.approx(float(sum(briers) / 3), rel=1e-12)
    assert out["brier_all_categories"] == out["brier"]
    assert out["brier_convention"].startswith("three or more states")
    assert out["log_score"] == pytest.approx(sum(logs) / 3, rel=1e-12)
    assert out["hit_rate"] == pytest.approx(sum(hits) / 3)


def test_without_a_prior_the_uniform_prior_is_used_and_said():
    out = score_record(SYMMETRIC_70, None, [rec("x", "a"), rec("x", "b", 2)])
    assert out["prior"] == {"a": 0.5, "b": 0.5}
    assert out["prior_source"] == "uniform (no prior over states given)"
    assert out["hit_rate"] == 0.5
    # Brier 1950 one-category form: (0.09 + 0.49) / 2; Good 1952: (ln 0.7 + ln 0.3) / 2.
    assert out["brier"] == pytest.approx(0.29)
    assert out["log_score"] == pytest.approx((math.log(0.7) + math.log(0.3)) / 2)


def test_a_tie_between_states_counts_as_a_fraction_of_a_hit():
    uninformative = {"a": {"x": 0.5, "y": 0.5}, "b": {"x": 0.5, "y": 0.5}}
    out = score_record(uninformative, None, [rec("x", "a")])
    assert out["hit_rate"] == 0.5


def test_no_records_gives_no_scores():
    out = score_record(SYMMETRIC_70, None, [])
    assert out["records"] == 0
    assert out["hit_rate"] is None and out["brier"] is None and out["log_score"] is None


def test_a_true_state_rated_impossible_gives_a_log_score_of_minus_infinity():
    lik = {"a": {"x": 1.0, "y": 0.0}, "b": {"x": 0.0, "y": 1.0}}
    out = score_record(lik, None, [rec("x", "b")])
    assert out["log_score"] == -math.inf
    assert out["brier"] == pytest.approx(1.0)


def test_a_signal_of_probability_zero_cannot_be_scored():
    lik = {"a": {"x": 1.0, "y": 0.0}, "b": {"x": 1.0, "y": 0.0}}
    with pytest.raises(ModelValidationError) as excinfo:
        score_record(lik, None, [rec("x", "a"), rec("y", "b", 2)])
    [problem] = excinfo.value.problems
    assert problem.location == "records[1].signal"
    assert "probability 0" in problem.message


@pytest.mark.parametrize(
    ("prior", "expected"),
    [
        ({"a": 0.6, "b": 0.6}, "prior: probabilities must sum to 1 (within 1e-6), got 1.2"),
        ({"a": 1.0}, "prior['b']: is missing"),
        ({"a": 0.5, "b": 0.5, "c": 0.0}, "prior['c']: unknown state (known: a, b)"),
        ({"a": -0.5, "b": 1.5}, "prior['a']: must be a number within [0, 1], got -0.5"),
    ],
)
def test_bad_priors_are_refused_with_their_place(prior, expected):
    with pytest.raises(ModelValidationError) as excinfo:
        score_record(SYMMETRIC_70, prior, [])
    assert expected in [str(p) for p in excinfo.value.problems]


@settings(max_examples=60, deadline=None, derandomize=True)
@given(
    st.lists(st.integers(1, 20), min_size=2, max_size=2),
    st.lists(st.tuples(st.sampled_from(["x", "y"]), st.sampled_from(["a", "b"])), max_size=30),
)
def test_property_scores_lie_in_their_ranges(weights, pairs):
    p = weights[0] / sum(weights)
    lik = {"a": {"x": p, "y": 1 - p}, "b": {"x": 1 - p, "y": p}}
    out = score_record(lik, None, [rec(k, s, i % 28 + 1) for i, (k, s) in enumerate(pairs)])
    if pairs:
        assert 0.0 <= out["brier"] <= 1.0
        assert 0.0 <= out["hit_rate"] <= 1.0
        assert out["log_score"] <= 0.0
        per = np.array([r["brier"] for r in out["per_record"]])
        assert out["brier"] == pytest.approx(per.mean())
