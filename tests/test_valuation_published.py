"""The core against published worked examples (see ../shared/reference/check-values.md).

Each check names its source beside it; "computed" marks a value derived from the
published inputs rather than printed in the source; "memory" marks a source
recalled rather than re-read.
"""

import math
from decimal import Decimal, localcontext
from fractions import Fraction

import pytest

import valuation
from valuation.bayes import revise
from valuation.utility import certainty_equivalent, risk_tolerance_from_gamble


def two_state_table(prior_a, payoff_rows, likelihoods=None, cost=0, states=("a", "b"),
                    signals=("s1", "s2"), objective="max"):
    doc = {
        "kind": "payoff_table", "title": "check", "currency": "", "objective": objective,
        "states": [{"name": states[0], "probability": prior_a},
                   {"name": states[1], "probability": 1 - prior_a}],
        "alternatives": [{"name": name, "payoffs": dict(zip(states, row, strict=True))}
                         for name, row in payoff_rows],
    }
    if likelihoods is not None:
        doc["studies"] = [{"name": "study", "cost": cost, "signals": list(signals),
                           "likelihoods": {st: dict(zip(signals, row, strict=True))
                                           for st, row in zip(states, likelihoods, strict=True)}}]
    return doc


# Samuelson & Marks, Managerial Economics, 7th ed., Wiley 2012, ch. 13, pp. 544-548 (seen).
SEISMIC = two_state_table(
    0.4, [("drill", (600_000, -200_000)), ("don't drill", (0, 0))],
    likelihoods=[(0.75, 0.25), (1 / 3, 2 / 3)], states=("wet", "dry"), signals=("good", "bad"))


def test_seismic_test_revision_matches_samuelson_marks():
    study = valuation.evaluate(SEISMIC)["studies"][0]
    assert study["signal_probabilities"]["good"] == pytest.approx(0.5)  # seen
    assert study["posteriors"]["good"]["wet"] == pytest.approx(0.6)  # seen
    assert study["posteriors"]["bad"]["wet"] == pytest.approx(0.2)  # seen
    assert study["value_by_signal"]["good"] == pytest.approx(280_000)  # seen
    assert study["best_alternative_by_signal"] == {"good": "drill", "bad": "don't drill"}


def test_seismic_test_values_match_samuelson_marks():
    result = valuation.evaluate(SEISMIC)
    assert result["evpi"] == pytest.approx(120_000)  # seen, p. 544
    assert result["without_information"]["expected_value"] == pytest.approx(120_000)  # computed
    study = result["studies"][0]
    assert study["expected_value_with_study"] == pytest.approx(140_000)  # computed
    assert study["evsi"] == pytest.approx(20_000)  # computed
    assert study["efficiency"] == pytest.approx(1 / 6)  # computed


def test_a_test_that_cannot_change_the_decision_is_worth_nothing():
    # Samuelson & Marks, p. 551 and footnote (seen): likelihoods 0.25 / 1/6.
    doc = two_state_table(0.4, [("drill", (600_000, -200_000)), ("don't drill", (0, 0))],
                          likelihoods=[(0.25, 0.75), (1 / 6, 5 / 6)], states=("wet", "dry"),
                          signals=("good", "bad"))
    result = valuation.evaluate(doc)
    study = result["studies"][0]
    assert study["signal_probabilities"]["good"] == pytest.approx(0.2)
    assert study["posteriors"]["good"]["wet"] == pytest.approx(0.5)
    assert study["posteriors"]["bad"]["wet"] == pytest.approx(0.375)
    assert study["evsi"] == 0.0
    assert study["changes_decision"] is False
    assert "cannot change the decision" in study["note"]
    # ... whatever the risk attitude (same footnote).
    for tolerance in (300_000, 1_000_000, 5_000_000):
        assert valuation.evaluate(doc, risk_tolerance=tolerance)["studies"][0]["evsi"] == 0.0


# Hillier & Lieberman, Introduction to Operations Research, decision analysis chapter's
# prototype example (memory, high confidence). Amounts in thousands.
OIL_LEASE = two_state_table(0.25, [("drill", (700, -100)), ("sell the land", (90, 90))],
                            likelihoods=[(0.6, 0.4), (0.2, 0.8)], cost=30, states=("oil", "dry"),
                            signals=("favourable", "unfavourable"))


def test_oil_lease_with_survey_matches_hillier_lieberman():
    result = valuation.evaluate(OIL_LEASE)
    assert result["without_information"]["expected_value"] == pytest.approx(100)
    assert result["without_information"]["best_alternative"] == "drill"
    assert result["evpi"] == pytest.approx(142.5)
    study = result["studies"][0]
    assert study["signal_probabilities"]["favourable"] == pytest.approx(0.3)
    assert study["posteriors"]["favourable"]["oil"] == pytest.approx(0.5)
    assert study["posteriors"]["unfavourable"]["oil"] == pytest.approx(1 / 7)
    assert study["value_by_signal"] == pytest.approx({"favourable": 300, "unfavourable": 90})
    assert study["evsi"] == pytest.approx(53)
    assert study["expected_value_with_study"] == pytest.approx(123)
    assert study["net_value"] == pytest.approx(23)  # computed
    assert study["efficiency"] == pytest.approx(53 / 142.5)  # computed, 0.372
    assert result["expected_value"] == pytest.approx(123)
    assert result["policy"]["text"] == ("Commission 'study'; if 'favourable' then 'drill'; "
                                        "if 'unfavourable' then 'sell the land'.")


def test_three_state_wildcatter_matches_shenoy_after_raiffa():
    # Shenoy, Operations Research 40(3), 1992, after Raiffa 1968 (memory, medium confidence).
    states = ["dry", "wet", "soaking"]
    doc = {
        "kind": "payoff_table", "title": "wildcatter",
        "states": [{"name": s, "probability": p} for s, p in zip(states, [0.5, 0.3, 0.2],
                                                                  strict=True)],
        "alternatives": [{"name": "drill", "payoffs": {"dry": -70, "wet": 50, "soaking": 200}},
                         {"name": "don't drill", "payoffs": dict.fromkeys(states, 0)}],
        "studies": [{"name": "seismic", "cost": 10, "signals": ["no", "open", "closed"],
                     "likelihoods": {"dry": {"no": 0.6, "open": 0.3, "closed": 0.1},
                                     "wet": {"no": 0.3, "open": 0.4, "closed": 0.3},
                                     "soaking": {"no": 0.1, "open": 0.4, "closed": 0.5}}}],
    }
    result = valuation.evaluate(doc)
    assert result["without_information"]["expected_value"] == pytest.approx(20)
    assert result["evpi"] == pytest.approx(35)
    study = result["studies"][0]
    assert study["signal_probabilities"] == pytest.approx({"no": 0.41, "open": 0.35,
                                                           "closed": 0.24})
    assert study["best_alternative_by_signal"] == {"no": "don't drill", "open": "drill",
                                                   "closed": "drill"}
    # EV of drilling given each signal: -30.49, 32.86, 87.50 (memory).
    drill_given = {g: sum(study["posteriors"][g][s] * v for s, v in
                          zip(states, [-70, 50, 200], strict=True)) for g in ("no", "open", "closed")}
    assert drill_given == pytest.approx({"no": -30.49, "open": 32.86, "closed": 87.50}, abs=0.01)
    assert study["evsi"] == pytest.approx(12.5)
    assert study["expected_value_with_study"] == pytest.approx(22.5)
    assert study["net_value"] == pytest.approx(2.5)
    assert study["efficiency"] == pytest.approx(0.357, abs=5e-4)


def test_crop_test_is_not_rounded_internally():
    # Goodwin & Wright, Decision Analysis for Management Judgment (probably 3rd ed., 2004),
    # value of new information section. The book prints 62,155 because it rounded the
    # posteriors to two decimals; exact arithmetic gives 62,100.
    doc = two_state_table(0.3, [("plant", (-20_000, 90_000)), ("alternative crop", (30_000, 30_000))],
                          likelihoods=[(0.9, 0.1), (0.2, 0.8)], states=("present", "absent"),
                          signals=("says present", "says absent"))
    result = valuation.evaluate(doc)
    assert result["without_information"]["expected_value"] == pytest.approx(57_000)
    study = result["studies"][0]
    assert study["signal_probabilities"]["says present"] == pytest.approx(0.41)
    assert study["posteriors"]["says present"]["present"] == pytest.approx(0.6585, abs=5e-5)
    assert study["posteriors"]["says absent"]["present"] == pytest.approx(0.0508, abs=5e-5)
    assert study["expected_value_with_study"] == pytest.approx(62_100, abs=1e-6)
    assert study["evsi"] == pytest.approx(5_100, abs=1e-6)
    assert result["evpi"] == pytest.approx(15_000)


def test_diagnostic_test_posterior_matches_gigerenzer_hoffrage():
    # Gigerenzer & Hoffrage, Psychological Review 102(4), 1995 (memory, high confidence).
    rev = revise([0.01, 0.99], [[0.8, 0.2], [0.096, 0.904]])
    assert float(rev.posterior[0, 0]) == pytest.approx(0.07764, abs=1e-5)
    exact = Fraction(1, 100) * Fraction(8, 10) / (
        Fraction(1, 100) * Fraction(8, 10) + Fraction(99, 100) * Fraction(96, 1000))
    assert float(rev.posterior[0, 0]) == pytest.approx(float(exact), rel=1e-12)


@pytest.mark.parametrize("delta", [10, -37.5, 1000])
def test_certainty_equivalent_has_the_delta_property(delta):
    # Luenberger, Investment Science, 1998, ch. 16 (restated): CE(X + d) = CE(X) + d.
    values, probs = [100, -50, 20], [0.3, 0.2, 0.5]
    base = certainty_equivalent(values, probs, 80.0)
    shifted = certainty_equivalent([v + delta for v in values], probs, 80.0)
    assert shifted - base == pytest.approx(delta, abs=1e-9)


def test_fifty_fifty_gamble_rule_gives_the_exact_indifference_point():
    # Computed check in check-values.md section 6: indifference at Y = 0.96242 R.
    assert 1 / risk_tolerance_from_gamble(1.0) == pytest.approx(0.96242, abs=5e-6)
    r = risk_tolerance_from_gamble(96_242.0)
    assert certainty_equivalent([96_242.0, -48_121.0], [0.5, 0.5], r) == pytest.approx(0, abs=1e-6)


def test_under_exponential_utility_evsi_is_the_exact_buying_price():
    # Delta property (Luenberger 1998): paying the EVSI leaves the decision maker indifferent.
    result = valuation.evaluate(OIL_LEASE, risk_tolerance=1000)
    study = result["studies"][0]
    assert study["evsi"] > 0
    priced = dict(OIL_LEASE)
    priced["studies"] = [dict(OIL_LEASE["studies"][0], cost=study["evsi"])]
    again = valuation.evaluate(priced, risk_tolerance=1000)
    assert again["studies"][0]["expected_value_with_study"] == pytest.approx(
        again["without_information"]["certainty_equivalent"], abs=1e-7)


def test_evpi_equals_expected_opportunity_loss_of_the_best_alternative():
    # Common practice: EVPI = EOL of the alternative chosen without information.
    for doc in (SEISMIC, OIL_LEASE):
        result = valuation.evaluate(doc)
        best = result["without_information"]["best_alternative"]
        states = [s["name"] for s in doc["states"]]
        prior = {s["name"]: s["probability"] for s in doc["states"]}
        pay = {a["name"]: a["payoffs"] for a in doc["alternatives"]}
        eol = sum(prior[s] * (max(p[s] for p in pay.values()) - pay[best][s]) for s in states)
        assert result["evpi"] == pytest.approx(eol)


# -- certainty equivalents against exact arithmetic, for every size of risk tolerance --------


def exact_certainty_equivalent(values, probabilities, risk_tolerance) -> float:
    """-R ln E[exp(-X / R)] in exact decimal arithmetic (the standard library's ``decimal``:
    every double converts exactly, exp and ln are correctly rounded at the precision set).

    The precision grows with R: exp(-t) for t ~ spread / R must keep the digits of t,
    so 60 significant digits beyond those R / spread pushes below 1. The probabilities
    are scaled to sum to 1 exactly, as the core takes a lottery's probabilities.
    """
    with localcontext() as ctx:
        ctx.prec = 60 + max(0, math.ceil(math.log10(risk_tolerance)))
        xs = [Decimal(v) for v in values]
        ps = [Decimal(p) for p in probabilities]
        r = Decimal(risk_tolerance)
        low = min(x for x, p in zip(xs, ps, strict=True) if p > 0)
        expected = sum(p * (-(x - low) / r).exp() for x, p in zip(xs, ps, strict=True)) / sum(ps)
        return float(low - r * expected.ln())


LOTTERIES = [
    ([2_000_000.0, 0.0], [0.5, 0.5]),  # the Risky alternative of the large-R defect
    ([100.0, -50.0, 20.0], [0.3, 0.2, 0.5]),  # the docstring example of certainty_equivalent
    ([1_000.0, 250.0, 3_000.0, 10.0], [0.125, 0.375, 0.25, 0.25]),
    ([7.5, 1e6, 3e5], [0.7, 0.2, 0.1]),  # probabilities that sum to 1 - 2**-53 in doubles
]


@pytest.mark.parametrize("values, probabilities", LOTTERIES)
@pytest.mark.parametrize("risk_tolerance", [1.0, 80.0, 1e3, 1e6, 1e9, 1e12, 1e16, 1e22, 1e25,
                                            1e100, 1e300])
def test_certainty_equivalent_matches_exact_arithmetic(values, probabilities, risk_tolerance):
    # Reference: exact arithmetic in the standard library (decimal, see above).
    expected = exact_certainty_equivalent(values, probabilities, risk_tolerance)
    got = certainty_equivalent(values, probabilities, risk_tolerance)
    assert got == pytest.approx(expected, rel=1e-12)


# Invented two-state table: Risky pays 2,000,000 or 0 at 50-50, Safe 900,000 either way.
RISKY_OR_SAFE = two_state_table(0.5, [("Risky", (2_000_000, 0)), ("Safe", (900_000, 900_000))])


@pytest.mark.parametrize("risk_tolerance", [1e22, 1e25, 1e308])
def test_a_huge_risk_tolerance_gives_the_risk_neutral_choice_and_values(risk_tolerance):
    # Common practice (Howard 1988; Raiffa 1968): as R grows, exponential utility tends to
    # the expected value, so the choice, CE and EVPI tend to the risk-neutral ones, here
    # EV(Risky) = 1,000,000 > 900,000 and EVPI = 0.5 * 2,000,000 + 0.5 * 900,000 - 1,000,000
    # = 450,000 (computed by hand).
    neutral = valuation.evaluate(RISKY_OR_SAFE)
    assert neutral["evpi"] == pytest.approx(450_000, rel=1e-12)
    result = valuation.evaluate(RISKY_OR_SAFE, risk_tolerance=risk_tolerance)
    assert result["policy"]["text"] == "Choose 'Risky'."
    assert result["without_information"]["best_alternative"] == "Risky"
    ce = {alt["name"]: alt["certainty_equivalent"] for alt in result["alternatives"]}
    assert ce["Risky"] == pytest.approx(1_000_000, rel=1e-9)
    assert ce["Risky"] <= 1_000_000 * (1 + 1e-15)  # never above the expected value
    assert ce["Safe"] == 900_000
    assert result["evpi"] == pytest.approx(450_000, rel=1e-9)


@pytest.mark.parametrize("risk_tolerance", [1e-3, 0.01, 0.1])
def test_a_rare_worst_outcome_at_a_small_risk_tolerance_matches_exact_arithmetic(risk_tolerance):
    # Reference: exact arithmetic in the standard library (decimal). E[exp(-(X - m) / R)]
    # is about 1e-20 here: 1 + sum p * expm1(...) would cancel to 0 (a CE of +inf), so the
    # core takes the plain sum's log there (utility.log_expectation).
    values, probabilities = [0.0, 1.0], [1e-20, 1.0]
    expected = exact_certainty_equivalent(values, probabilities, risk_tolerance)
    assert certainty_equivalent(values, probabilities, risk_tolerance) == pytest.approx(
        expected, rel=1e-12)
