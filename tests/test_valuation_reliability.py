"""Calibrating a study source's claimed accuracy from its track record (valuation.reliability).

Checks against outside sources: scipy.stats.beta / scipy.stats.dirichlet, and the
published conjugate-update examples of /work/shared/reference/check-values.md sec. 7
(source named beside each check; "memory" where that file says memory).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from valuation.errors import ModelValidationError, Problem
from valuation.limits import MAX_SIGNALS, MAX_SOURCE_STATES
from valuation.reliability import (
    DEFAULT_PRIOR_STRENGTH,
    MAX_PRIOR_STRENGTH,
    MAX_ROLLING_CELLS,
    MAX_ROLLING_WINDOWS,
    MIN_PRIOR_PARAMETER,
    NON_FINITE_MEANINGS,
    Record,
    calibrate,
    least_step,
    replace_non_finite,
    rolling,
    validate_likelihoods,
)

# Invented demo claim (Tellurion Surveys, an invented firm).
CLAIM = {
    "hot reservoir": {"favourable": 0.85, "unfavourable": 0.15},
    "cold reservoir": {"favourable": 0.20, "unfavourable": 0.80},
}


def make_records(state: str, signal_counts: dict[str, int], start: int = 0) -> list[dict]:
    out = []
    day = dt.date(2019, 1, 1) + dt.timedelta(days=start)
    for signal, n in signal_counts.items():
        for _ in range(n):
            out.append({"date": day.isoformat(), "signal": signal, "state": state})
            day += dt.timedelta(days=1)
    return out


def one_state(claim_x: float, strength: float, x: int, y: int, interval: float = 0.95):
    claim = {"s": {"x": claim_x, "y": 1.0 - claim_x}}
    records = make_records("s", {"x": x, "y": y})
    return calibrate(claim, records, prior_strength=strength, interval=interval)


# --- published conjugate updates (check-values.md sec. 7) -------------------------------


def test_uniform_prior_437_of_980_matches_bda3_table_2_1():
    # Gelman et al., Bayesian Data Analysis, 3rd ed., sec. 2.4, Table 2.1 (memory, high
    # confidence): uniform prior -> Beta(438, 544), mean 0.446, sd 0.016, 95% [0.415, 0.477].
    # A uniform Beta(1, 1) is a claim of 0.5 worth 2 studies.
    cell = one_state(0.5, 2.0, 437, 543)["states"]["s"]["signals"]["x"]
    assert cell["posterior_parameter"] == 438.0
    assert cell["posterior_mean"] == pytest.approx(0.446, abs=5e-4)
    low, high = cell["interval_95"]
    assert low == pytest.approx(0.415, abs=5e-4)
    assert high == pytest.approx(0.477, abs=5e-4)
    b = 980 + 2 - 438
    assert stats.beta(438, b).std() == pytest.approx(0.016, abs=5e-4)


@pytest.mark.parametrize(
    ("n0", "median", "low", "high"),
    [
        # Gelman et al., BDA3, sec. 2.4, Table 2.1 (memory, high confidence).
        (2, 0.446, 0.415, 0.477),
        (20, 0.447, 0.416, 0.478),
        (100, 0.450, 0.420, 0.479),
        (200, 0.453, 0.424, 0.481),
    ],
)
def test_informative_priors_of_mean_0485_match_bda3_table_2_1(n0, median, low, high):
    out = one_state(0.485, float(n0), 437, 543)
    cell = out["states"]["s"]["signals"]["x"]
    a = cell["posterior_parameter"]
    b = out["states"]["s"]["signals"]["y"]["posterior_parameter"]
    assert a == pytest.approx(0.485 * n0 + 437)
    assert b == pytest.approx(0.515 * n0 + 543)
    assert stats.beta.median(a, b) == pytest.approx(median, abs=5e-4)
    assert cell["interval_95"][0] == pytest.approx(low, abs=5e-4)
    assert cell["interval_95"][1] == pytest.approx(high, abs=5e-4)


def test_two_of_ten_with_uniform_prior_matches_hoff_chapter_3():
    # Hoff, A First Course in Bayesian Statistical Methods, Springer 2009, ch. 3 (memory):
    # Beta(3, 9), quantile-based 95% interval (0.06, 0.52), printed to two decimals.
    cell = one_state(0.5, 2.0, 2, 8)["states"]["s"]["signals"]["x"]
    assert cell["posterior_parameter"] == 3.0
    assert cell["interval_95"][0] == pytest.approx(0.06, abs=5e-3)
    assert cell["interval_95"][1] == pytest.approx(0.52, abs=5e-3)


# --- against scipy -------------------------------------------------------------------------


def test_three_signal_posterior_matches_scipy_dirichlet_mean_and_beta_marginals():
    claim = {"a": {"x": 0.6, "y": 0.3, "z": 0.1}, "b": {"x": 0.2, "y": 0.2, "z": 0.6}}
    records = make_records("a", {"x": 3, "y": 5, "z": 2}) + make_records("b", {"z": 4}, 50)
    out = calibrate(claim, records, prior_strength=7.0)
    alpha = np.array([0.6 * 7 + 3, 0.3 * 7 + 5, 0.1 * 7 + 2])
    dist = stats.dirichlet(alpha)
    a0 = alpha.sum()
    for k, signal in enumerate(["x", "y", "z"]):
        cell = out["states"]["a"]["signals"][signal]
        # scipy.stats.dirichlet: the mean, and the marginal's variance equals Beta(a_k, a0 - a_k)'s.
        assert cell["posterior_mean"] == pytest.approx(dist.mean()[k], rel=1e-12)
        assert stats.beta(alpha[k], a0 - alpha[k]).var() == pytest.approx(dist.var()[k])
        assert cell["interval_90"][0] == pytest.approx(stats.beta.ppf(0.05, alpha[k], a0 - alpha[k]))
        assert cell["interval_90"][1] == pytest.approx(stats.beta.ppf(0.95, alpha[k], a0 - alpha[k]))
    assert out["calibrated_likelihoods"]["b"]["z"] == pytest.approx((0.6 * 7 + 4) / 11)


def test_marginal_intervals_agree_with_seeded_dirichlet_draws():
    # Monte Carlo from scipy.stats.dirichlet, independent of the Beta-marginal formula.
    claim = {"a": {"x": 0.5, "y": 0.3, "z": 0.2}}
    out = calibrate(claim, make_records("a", {"x": 2, "y": 6, "z": 1}), prior_strength=5.0)
    alpha = [0.5 * 5 + 2, 0.3 * 5 + 6, 0.2 * 5 + 1]
    draws = stats.dirichlet(alpha).rvs(size=200_000, random_state=np.random.default_rng(7))
    for k, signal in enumerate(["x", "y", "z"]):
        low, high = out["states"]["a"]["signals"][signal]["interval_90"]
        assert np.quantile(draws[:, k], 0.05) == pytest.approx(low, abs=4e-3)
        assert np.quantile(draws[:, k], 0.95) == pytest.approx(high, abs=4e-3)


def test_prob_below_claim_is_the_beta_cdf_at_the_claim_of_the_most_likely_signal():
    records = make_records("hot reservoir", {"favourable": 8, "unfavourable": 5}) + make_records(
        "cold reservoir", {"favourable": 6, "unfavourable": 11}, 100
    )
    out = calibrate(CLAIM, records)
    hot = out["states"]["hot reservoir"]
    cold = out["states"]["cold reservoir"]
    assert hot["most_likely_signal"] == "favourable"
    assert cold["most_likely_signal"] == "unfavourable"
    # scipy.stats.beta: Beta(8.5 + 8, 1.5 + 5) and Beta(8 + 11, 2 + 6).
    assert hot["prob_below_claim"] == pytest.approx(stats.beta.cdf(0.85, 16.5, 6.5))
    assert cold["prob_below_claim"] == pytest.approx(stats.beta.cdf(0.80, 19.0, 8.0))
    assert hot["records"] == 13 and cold["records"] == 17
    assert hot["signals"]["favourable"]["observed"] == pytest.approx(8 / 13)
    assert hot["signals"]["favourable"]["count"] == 8
    assert out["records"] == 30


def test_state_without_records_reports_observed_as_none_and_keeps_the_claim():
    out = calibrate(CLAIM, make_records("cold reservoir", {"favourable": 1}))
    hot = out["states"]["hot reservoir"]
    assert hot["records"] == 0
    assert hot["signals"]["favourable"]["observed"] is None
    assert hot["signals"]["favourable"]["posterior_mean"] == pytest.approx(0.85)
    # Beta(8.5, 1.5) with no data: P(theta < 0.85) from scipy.
    assert hot["prob_below_claim"] == pytest.approx(stats.beta.cdf(0.85, 8.5, 1.5))


def test_default_prior_strength_is_ten_equivalent_studies():
    assert DEFAULT_PRIOR_STRENGTH == 10.0
    out = calibrate(CLAIM, [])
    assert out["prior_strength"] == 10.0
    assert out["states"]["hot reservoir"]["signals"]["favourable"]["prior_parameter"] == 8.5


def test_records_may_be_dataclass_instances_and_dates_objects():
    @dataclass
    class Past:
        date: dt.date
        signal: str
        state: str

    recs = [
        Past(dt.date(2020, 5, 1), "favourable", "hot reservoir"),
        Record(dt.date(2021, 5, 1), "unfavourable", "hot reservoir"),
    ]
    out = calibrate(CLAIM, recs)
    assert out["states"]["hot reservoir"]["signals"]["favourable"]["count"] == 1
    assert out["states"]["hot reservoir"]["signals"]["unfavourable"]["count"] == 1


# --- zero claimed cells ------------------------------------------------------------------


def test_zero_claimed_probability_is_floored_at_a_small_pseudo_count():
    claim = {"s": {"x": 1.0, "y": 0.0}, "t": {"x": 0.5, "y": 0.5}}
    out = calibrate(claim, [])
    y = out["states"]["s"]["signals"]["y"]
    assert y["prior_parameter"] == MIN_PRIOR_PARAMETER == 0.01
    assert out["floored_cells"] == [["s", "y"]]
    assert all(np.isfinite(y["interval_90"]))
    # One contrary record: posterior Dirichlet(10, 1.01), mean 1.01 / 11.01 (exact arithmetic).
    out = calibrate(claim, [{"date": "2024-01-01", "signal": "y", "state": "s"}])
    assert out["states"]["s"]["signals"]["y"]["posterior_mean"] == pytest.approx(1.01 / 11.01)
    assert out["states"]["s"]["prob_below_claim"] == pytest.approx(1.0)


def test_no_cell_is_floored_for_an_ordinary_claim():
    assert calibrate(CLAIM, [])["floored_cells"] == []


# --- validation -----------------------------------------------------------------------------


def problems_of(excinfo) -> list[str]:
    return [str(p) for p in excinfo.value.problems]


@pytest.mark.parametrize(
    ("claim", "expected"),
    [
        (
            {"hot": {"yes": 0.6, "no": 0.3}, "cold": {"yes": 0.2, "no": 0.8}},
            "claimed['hot']: probabilities must sum to 1 (within 1e-6), got 0.9",
        ),
        (
            {"hot": {"yes": 1.2, "no": -0.2}},
            "claimed['hot']['yes']: must be within [0, 1], got 1.2",
        ),
        (
            {"hot": {"yes": "0.5", "no": 0.5}},
            "claimed['hot']['yes']: must be a finite number, got '0.5'",
        ),
        (
            {"hot": {"yes": float("nan"), "no": 0.5}},
            "claimed['hot']['yes']: must be a finite number, got nan",
        ),
        (
            {"hot": {"yes": 0.5, "no": 0.5}, "cold": {"yes": 0.5, "maybe": 0.5}},
            "claimed['cold']: every state must list the same signals (yes, no): "
            "missing 'no'; unexpected 'maybe'",
        ),
        ({"hot": {"yes": 1.0}}, "claimed['hot']: needs at least two signals"),
        ({}, "claimed: must be a non-empty mapping of state -> signal -> probability"),
    ],
)
def test_bad_claims_are_refused_with_their_place(claim, expected):
    with pytest.raises(ModelValidationError) as excinfo:
        calibrate(claim, [])
    assert expected in problems_of(excinfo)


def test_row_within_tolerance_is_accepted_and_outside_is_refused():
    calibrate({"s": {"x": 0.5 + 5e-7, "y": 0.5}}, [])
    with pytest.raises(ModelValidationError):
        calibrate({"s": {"x": 0.5 + 5e-6, "y": 0.5}}, [])


@pytest.mark.parametrize(
    ("record", "expected"),
    [
        (
            {"date": "2021-03-04", "signal": "favourable", "state": "tepid"},
            "records[0].state: unknown state 'tepid' (known: hot reservoir, cold reservoir)",
        ),
        (
            {"date": "2021-03-04", "signal": "maybe", "state": "hot reservoir"},
            "records[0].signal: unknown signal 'maybe' (known: favourable, unfavourable)",
        ),
        (
            {"date": "2021/03/04", "signal": "favourable", "state": "hot reservoir"},
            "records[0].date: must be a date in the form YYYY-MM-DD, got '2021/03/04'",
        ),
        (
            {"date": "2021-3-4", "signal": "favourable", "state": "hot reservoir"},
            "records[0].date: must be a date in the form YYYY-MM-DD, got '2021-3-4'",
        ),
        (
            {"date": dt.datetime(2021, 3, 4, 12), "signal": "favourable", "state": "hot reservoir"},
            "records[0].date: must be a date, not a date and time, got datetime.datetime(2021, 3, 4, 12, 0)",
        ),
        ({"signal": "favourable", "state": "hot reservoir"}, "records[0].date: is missing"),
        (
            {"date": "٢٠٢١-٠٣-٠٤", "signal": "favourable", "state": "hot reservoir"},
            "records[0].date: must be a date in the form YYYY-MM-DD, got '٢٠٢١-٠٣-٠٤'",
        ),
    ],
)
def test_bad_records_are_refused_with_their_place(record, expected):
    with pytest.raises(ModelValidationError) as excinfo:
        calibrate(CLAIM, [record])
    assert problems_of(excinfo) == [expected]


def test_impossible_calendar_date_is_refused():
    with pytest.raises(ModelValidationError) as excinfo:
        calibrate(CLAIM, [{"date": "2021-02-30", "signal": "favourable", "state": "hot reservoir"}])
    [message] = problems_of(excinfo)
    assert message.startswith("records[0].date: not a valid calendar date, got '2021-02-30'")


def test_every_bad_record_is_reported_not_only_the_first():
    records = [
        {"date": "2021-01-01", "signal": "favourable", "state": "hot reservoir"},
        {"date": "bad", "signal": "favourable", "state": "hot reservoir"},
        {"date": "2021-01-03", "signal": "x", "state": "y"},
    ]
    with pytest.raises(ModelValidationError) as excinfo:
        calibrate(CLAIM, records)
    assert [p.location for p in excinfo.value.problems] == [
        "records[1].date",
        "records[2].signal",
        "records[2].state",
    ]
    assert all(isinstance(p, Problem) for p in excinfo.value.problems)


@pytest.mark.parametrize("strength", [0, -1.0, float("nan"), float("inf"), "10", True])
def test_prior_strength_must_be_a_positive_finite_number(strength):
    with pytest.raises(ModelValidationError) as excinfo:
        calibrate(CLAIM, [], prior_strength=strength)
    [problem] = excinfo.value.problems
    assert problem.location == "prior_strength"


def test_interval_mass_names_its_key():
    out = calibrate(CLAIM, [], interval=0.975)
    assert "interval_97.5" in out["states"]["hot reservoir"]["signals"]["favourable"]
    with pytest.raises(ModelValidationError):
        calibrate(CLAIM, [], interval=1.0)


# --- properties (hypothesis) --------------------------------------------------------------

probabilities = st.lists(st.integers(1, 100), min_size=2, max_size=4).map(lambda w: [x / sum(w) for x in w])


@st.composite
def claims_and_records(draw):
    n_states = draw(st.integers(1, 3))
    n_signals = draw(st.integers(2, 4))
    signals = [f"k{j}" for j in range(n_signals)]
    states = [f"s{i}" for i in range(n_states)]
    claim = {}
    for s in states:
        weights = draw(st.lists(st.integers(0, 50), min_size=n_signals, max_size=n_signals))
        if sum(weights) == 0:
            weights[0] = 1
        claim[s] = {k: w / sum(weights) for k, w in zip(signals, weights, strict=True)}
    pairs = draw(st.lists(st.tuples(st.sampled_from(states), st.sampled_from(signals)), max_size=40))
    records = [
        {"date": f"2020-01-{(i % 28) + 1:02d}", "signal": k, "state": s} for i, (s, k) in enumerate(pairs)
    ]
    strength = draw(st.floats(0.5, 200.0))
    return claim, records, strength


@settings(max_examples=60, deadline=None, derandomize=True)
@given(claims_and_records())
def test_property_posterior_rows_sum_to_one_and_intervals_hold_the_mean(case):
    claim, records, strength = case
    out = calibrate(claim, records, prior_strength=strength)
    for state, row in out["calibrated_likelihoods"].items():
        assert sum(row.values()) == pytest.approx(1.0, abs=1e-12)
        block = out["states"][state]
        assert 0.0 <= block["prob_below_claim"] <= 1.0
        a0 = sum(c["posterior_parameter"] for c in block["signals"].values())
        for cell in block["signals"].values():
            low, high = cell["interval_90"]
            assert low <= high
            # An equal-tailed interval of a very skewed Beta (a parameter near 0, as from a
            # floored zero claim) can exclude the mean: Beta(1, 0.01) has mean 0.990 and 5%
            # quantile 0.994 (scipy). The property is stated for parameters >= 0.5.
            if min(cell["posterior_parameter"], a0 - cell["posterior_parameter"]) >= 0.5:
                assert low <= cell["posterior_mean"] <= high


@settings(max_examples=60, deadline=None, derandomize=True)
@given(claims_and_records())
def test_property_with_no_records_the_posterior_mean_is_the_claim(case):
    claim, _records, strength = case
    out = calibrate(claim, [], prior_strength=strength)
    for state, row in claim.items():
        if any(p * strength < MIN_PRIOR_PARAMETER for p in row.values()):
            continue  # floored cells move the mean by design (see the module's notes)
        for signal, p in row.items():
            assert out["calibrated_likelihoods"][state][signal] == pytest.approx(p, abs=1e-12)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.integers(1, 9), st.integers(1, 5), st.floats(1.0, 50.0))
def test_property_more_agreeing_data_narrows_the_interval(tenths, batches, strength):
    # Records in exactly the claimed proportion: the mean stays, the interval shrinks.
    p = tenths / 10
    claim = {"s": {"x": p, "y": 1 - p}}
    widths = []
    for m in (batches, batches + 1, batches + 5):
        recs = make_records("s", {"x": tenths * m, "y": (10 - tenths) * m})
        cell = calibrate(claim, recs, prior_strength=strength)["states"]["s"]["signals"]["x"]
        assert cell["posterior_mean"] == pytest.approx(p)
        widths.append(cell["interval_90"][1] - cell["interval_90"][0])
    assert widths[0] > widths[1] > widths[2]


# --- rolling windows ------------------------------------------------------------------------


def worsening_record() -> list[dict]:
    # Invented: accurate in 2019-2021, mostly wrong from 2023.
    good = make_records("hot reservoir", {"favourable": 6}) + make_records(
        "cold reservoir", {"unfavourable": 6}, 10
    )
    bad = make_records("hot reservoir", {"unfavourable": 6}, 1500) + make_records(
        "cold reservoir", {"favourable": 6}, 1600
    )
    return bad + good  # given out of order on purpose: rolling sorts by date


def test_rolling_matches_calibrate_on_each_window():
    records = worsening_record()
    out = rolling(CLAIM, records, window=8, step=3, prior_strength=5.0)
    ordered = sorted(records, key=lambda r: r["date"])
    ends = list(range(len(ordered), 7, -3))[::-1]
    assert [w["end_date"] for w in out["windows"]] == [ordered[e - 1]["date"] for e in ends]
    for w, end in zip(out["windows"], ends, strict=True):
        ref = calibrate(CLAIM, ordered[end - 8 : end], prior_strength=5.0)
        assert w["start_date"] == ordered[end - 8]["date"]
        for state in CLAIM:
            assert w["states"][state]["prob_below_claim"] == pytest.approx(
                ref["states"][state]["prob_below_claim"], rel=1e-12
            )
            for signal in CLAIM[state]:
                got = w["states"][state]["signals"][signal]
                want = ref["states"][state]["signals"][signal]
                assert got["posterior_mean"] == pytest.approx(want["posterior_mean"])
                assert got["interval_90"] == pytest.approx(want["interval_90"])
                assert got["observed"] == want["observed"]


def test_rolling_shows_a_source_that_got_worse():
    out = rolling(CLAIM, worsening_record(), window=12)
    first, last = out["windows"][0], out["windows"][-1]
    assert first["end_date"] < last["end_date"]
    assert first["hit_rate"] == 1.0 and last["hit_rate"] == 0.0
    for state in CLAIM:
        assert last["states"][state]["prob_below_claim"] > 0.99
        assert first["states"][state]["prob_below_claim"] < 0.5
    assert last["brier"] > first["brier"]


def test_rolling_with_fewer_records_than_the_window_gives_no_windows():
    out = rolling(CLAIM, worsening_record()[:3], window=10)
    assert out["windows"] == [] and out["records"] == 3


@pytest.mark.parametrize(("window", "step"), [(0, 1), (5, 0), (2.5, 1), (True, 1)])
def test_rolling_refuses_bad_window_or_step(window, step):
    with pytest.raises(ModelValidationError):
        rolling(CLAIM, [], window=window, step=step)


def test_rolling_refuses_more_windows_than_the_limit_and_names_the_least_step():
    n = MAX_ROLLING_WINDOWS + 100
    records = [
        Record(dt.date(2000, 1, 1) + dt.timedelta(days=i), "favourable", "hot reservoir")
        for i in range(n)
    ]
    with pytest.raises(ModelValidationError) as excinfo:
        rolling(CLAIM, records, window=10)
    assert [str(p) for p in excinfo.value.problems] == [
        "step: 5,091 windows of 10 records is more than 5,000; use a step of at least 2"
    ]
    out = rolling(CLAIM, records, window=10, step=2)
    assert len(out["windows"]) == 2546
    assert out["windows"][-1]["end_date"] == records[-1].date.isoformat()


# --- limits on the size of a claim and of a trend -----------------------------------------


def even_claim(n_states: int, n_signals: int) -> dict:
    signals = [f"k{j}" for j in range(n_signals)]
    return {f"s{i}": dict.fromkeys(signals, 1.0 / n_signals) for i in range(n_states)}


def test_a_claim_of_at_most_a_hundred_states_and_signals_is_accepted_and_one_more_refused():
    assert MAX_SOURCE_STATES == MAX_SIGNALS == 100  # valuation.limits, documented there
    states, signals, matrix = validate_likelihoods(even_claim(100, 100))
    assert len(states) == len(signals) == 100 and matrix.shape == (100, 100)
    with pytest.raises(ModelValidationError) as excinfo:
        validate_likelihoods(even_claim(101, 2))
    assert problems_of(excinfo) == ["claimed: at most 100 states are allowed, got 101"]
    with pytest.raises(ModelValidationError) as excinfo:
        validate_likelihoods(even_claim(1, 101))
    assert problems_of(excinfo) == ["claimed['s0']: at most 100 signals are allowed, got 101"]


def test_a_new_claim_must_give_every_signal_some_state():
    never = {"hot": {"good": 1.0, "poor": 0.0}, "cold": {"good": 1.0, "poor": 0.0}}
    with pytest.raises(ModelValidationError) as excinfo:
        validate_likelihoods(never, every_signal_possible=True)
    assert problems_of(excinfo) == [
        "claimed: signal 'poor' has probability 0 in every state: no state could give it, and "
        "a record of it could not be scored; give it a probability above 0 in some state, "
        "or leave it out"
    ]
    # A stored claim is still read (a source created before the rule stays readable), and
    # a claim with a 0 in only some states is a new claim like any other.
    assert validate_likelihoods(never)[1] == ["good", "poor"]
    validate_likelihoods({"hot": {"good": 1.0, "poor": 0.0}, "cold": {"good": 0.2, "poor": 0.8}},
                         every_signal_possible=True)


def test_prior_strength_is_capped_where_the_intervals_are_still_numbers():
    claim = {"hot": {"good": 1.0, "poor": 0.0}, "cold": {"good": 0.2, "poor": 0.8}}
    records = make_records("hot", {"poor": 3})
    out = calibrate(claim, records, prior_strength=MAX_PRIOR_STRENGTH)
    good = out["states"]["hot"]["signals"]["good"]
    # scipy.stats.beta: Beta(1e6, 0.01 + 3), the "good" marginal of hot's Dirichlet(1e6, 3.01).
    assert good["interval_90"] == pytest.approx(
        list(stats.beta.ppf([0.05, 0.95], 1e6, 3.01)), rel=1e-9
    )
    assert good["interval_90"][0] < good["interval_90"][1]
    for strength, shown in ((1_000_000.001, "1000000.001"), (1e20, "1e+20"), (1e300, "1e+300")):
        with pytest.raises(ModelValidationError) as excinfo:
            calibrate(claim, records, prior_strength=strength)
        assert problems_of(excinfo) == [
            f"prior_strength: must be at most 1,000,000 past studies, got {shown}"
        ]


def test_least_step_keeps_windows_and_cells_within_their_limits():
    assert (MAX_ROLLING_WINDOWS, MAX_ROLLING_CELLS) == (5_000, 50_000)
    # 2 x 2 claim: 20,000 cells at 5,000 windows, so the window limit binds.
    assert least_step(5_009, 10, 4) == 1  # 5,000 windows
    assert least_step(5_010, 10, 4) == 2  # 5,001 windows at step 1 -> 2,501
    # 10 x 10 claim: 50,000 / 100 = 500 windows at most; 600 records of 10 make 591.
    assert least_step(509, 10, 100) == 1
    assert least_step(600, 10, 100) == 2
    assert least_step(5, 10, 4) == 1  # fewer records than a window


def test_rolling_refuses_more_cells_than_the_limit_and_accepts_the_least_step():
    claim = even_claim(10, 10)
    records = [
        Record(dt.date(2000, 1, 1) + dt.timedelta(days=i), f"k{i % 10}", f"s{i % 7}")
        for i in range(600)
    ]
    with pytest.raises(ModelValidationError) as excinfo:
        rolling(claim, records, window=10)
    assert problems_of(excinfo) == [
        "step: 591 windows of 100 cells (states x signals) is 59,100 cells, more than 50,000; "
        "use a step of at least 2"
    ]
    out = rolling(claim, records, window=10, step=2)
    assert len(out["windows"]) == 296  # window ends 600, 598, ..., 10
    # The counts of the last window, built from boundary prefix counts, against a count
    # of its ten records by hand.
    last = out["windows"][-1]["states"]
    counted = {(r.state, r.signal) for r in records[-10:]}
    for state, block in last.items():
        for signal, cell in block["signals"].items():
            assert cell["count"] == (1 if (state, signal) in counted else 0)


def test_non_finite_figures_become_none_with_the_reason_by_kind():
    report = {"log_score": float("-inf"), "windows": [{"log_score": -np.inf}, {"x": 1.0}],
              "odd": float("nan"), "big": float("inf"), "ok": 0.5}
    clean, note = replace_non_finite(report)
    assert clean == {"log_score": None, "windows": [{"log_score": None}, {"x": 1.0}],
                     "odd": None, "big": None, "ok": 0.5}
    assert note["kinds"] == {"-inf": ["log_score", "windows[0].log_score"], "nan": ["odd"],
                             "inf": ["big"]}
    assert note["fields"] == ["log_score", "windows[0].log_score", "odd", "big"]
    assert note["meaning"] == "; ".join(NON_FINITE_MEANINGS[k] for k in ("-inf", "nan", "inf"))
    assert note["meaning"].startswith(
        "minus infinity: a state that came true had been given probability 0"
    )
    _, only_nan = replace_non_finite({"a": float("nan")})
    assert "minus infinity" not in only_nan["meaning"]
    assert replace_non_finite({"a": [1.0, 2]}) == ({"a": [1.0, 2]}, None)
