"""Reliability of a study source: calibrate its claimed accuracy from its track record.

A study source (a survey firm, a pilot, a test laboratory) claims an accuracy as
a table of likelihoods ``claimed[state][signal] = P(signal | state)``, one row
per true state. Its track record is a list of past studies, each with the
signal it reported and the state that actually came true.

Model
-----
For every true state the unknown row ``P(. | state)`` gets a Dirichlet prior
centred on the claim, ``alpha[k] = claimed[state][k] * prior_strength``, so the
claim counts as ``prior_strength`` past studies of that state (Beta when there
are two signals). The records of that state update it by conjugacy:
``alpha[k] + n[k]`` (Gelman et al. 2013, sec. 2.4 for the Beta case; the
Dirichlet case is the same count-adding rule, sec. 3.4). Each cell's marginal
is ``Beta(a_k, a0 - a_k)`` with ``a0 = sum_k a_k``; intervals are its
equal-tailed quantiles.

Choices (documented here because they change the figures)
----------------------------------------------------------
``DEFAULT_PRIOR_STRENGTH = 10``
    The claim is worth ten past studies of each state. Ten is small enough
    that a source with a real record (a few dozen studies) is judged mostly by
    that record, and large enough that one or two unlucky studies do not wipe
    out a claim that may be honest. Pass another value when the claim rests
    on more (a published validation study) or less (a sales brochure).
``MIN_PRIOR_PARAMETER = 0.01``
    A claimed probability of 0 would give a Dirichlet parameter of 0, an
    improper prior whose marginal Beta(0, b) has no density. Every prior
    parameter below 0.01 is raised to 0.01 (a hundredth of a study): the
    claim "never" is read as "almost never", one contrary record then moves
    the posterior mean to about 1/11 with the default strength. Raised cells
    are listed in ``floored_cells``; with none raised and no records the
    posterior mean equals the claim exactly. Such a tiny parameter makes the
    marginal Beta so skewed that its equal-tailed interval can exclude the
    mean (Beta(1, 0.01): mean 0.990, 5% quantile 0.994); read the interval,
    not the mean, for a "never" claim.
``MAX_PRIOR_STRENGTH = 1,000,000``
    A claim worth more than a million studies is a typing mistake, not a
    belief; beyond about 1e15 the Beta quantiles of a claimed 1 lose all
    precision (``scipy.stats.beta.ppf`` answers NaN, or a low bound above the
    high one), so a larger strength is refused rather than reported as noise.
A signal no state can give
    A new claim whose signal has probability 0 in every state is refused
    (:func:`validate_likelihoods` with ``every_signal_possible``): the source
    could never report it if the claim were right, and a record of it would
    leave nothing to score (Bayes' rule divides by its probability, 0), so
    every later read would fail. The claim is refused once, rather than each
    such record, so that one rule holds for the API, the web form and the
    command line. A stored claim is still read without the rule.

References
----------
.. [1] Gelman, A., Carlin, J. B., Stern, H. S., Dunson, D. B., Vehtari, A. &
   Rubin, D. B., *Bayesian Data Analysis*, 3rd ed., CRC Press, 2013,
   sec. 2.4 (Beta-binomial) and sec. 3.4 (multinomial-Dirichlet).
.. [2] Brier, G. W., "Verification of forecasts expressed in terms of
   probability", *Monthly Weather Review* 78(1): 1-3, 1950.
.. [3] Good, I. J., "Rational decisions", *JRSS B* 14(1): 107-114, 1952.
.. [4] Murphy, A. H., "A new vector partition of the probability score",
   *Journal of Applied Meteorology* 12(4): 595-600, 1973.
"""

from __future__ import annotations

import datetime as _dt
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from valuation.errors import ModelValidationError, Problem

# The binary-forecast scores live in their own module and stay importable from here.
from valuation.forecast_scores import brier_decomposition, brier_score, calibration_table, log_score
from valuation.limits import MAX_SIGNALS, MAX_SOURCE_STATES, PROBABILITY_SUM_TOLERANCE

__all__ = [
    "DEFAULT_PRIOR_STRENGTH",
    "DEFAULT_WINDOW",
    "MAX_PRIOR_STRENGTH",
    "MAX_ROLLING_CELLS",
    "MAX_ROLLING_WINDOWS",
    "MIN_PRIOR_PARAMETER",
    "NON_FINITE_MEANINGS",
    "ROW_SUM_TOLERANCE",
    "Record",
    "brier_decomposition",
    "brier_score",
    "calibrate",
    "calibration_table",
    "least_step",
    "log_score",
    "parse_date",
    "parse_records",
    "replace_non_finite",
    "rolling",
    "score_record",
    "validate_likelihoods",
]

DEFAULT_PRIOR_STRENGTH = 10.0
#: A claim worth more than a million studies is a typing mistake, not a belief (module notes).
MAX_PRIOR_STRENGTH = 1_000_000.0
MIN_PRIOR_PARAMETER = 0.01
ROW_SUM_TOLERANCE = PROBABILITY_SUM_TOLERANCE  # 1e-6, the core's one tolerance
# Ten records: few enough that a change of the last two or three years shows, enough that
# one unlucky study does not swing the window (its Beta posterior still has the claim's
# ten pseudo-studies behind it).
DEFAULT_WINDOW = 10
#: :func:`rolling` refuses to build more windows than this (each is a full report; 5,000
#: windows take about a second); a larger ``step`` thins them.
MAX_ROLLING_WINDOWS = 5_000
#: ... nor more cells than this, counted as windows x states x signals: each cell is a block of
#: seven figures, about 210 bytes of JSON (measured: 100,000 cells made a 21 MB answer, built
#: in about 1.3 s), so a claim of many states and signals gets fewer windows. 5,000 windows
#: of a 2 x 2 claim are 20,000 cells; the limit lets a 10 x 10 claim keep 500 windows and the
#: largest claim (100 x 100, valuation.limits) 5.
MAX_ROLLING_CELLS = 50_000

# ASCII digits only: \d would also match other scripts' digits.
_ISO_DATE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")


@dataclass(frozen=True)
class Record:
    """One past study: when it was delivered, what it said, what came true."""

    date: _dt.date
    signal: str
    state: str


# ---------------------------------------------------------------------------
# Validation
# ---------------------------------------------------------------------------


def _q(name: str) -> str:
    return repr(str(name))


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float | np.integer | np.floating) and not isinstance(value, bool)


def validate_likelihoods(
    table: Any, *, name: str = "claimed", every_signal_possible: bool = False
) -> tuple[list[str], list[str], np.ndarray]:
    """Check a likelihood table ``state -> signal -> P(signal | state)``.

    Parameters
    ----------
    table : mapping
        One row per true state; every row lists the same signals.
    name : str
        Name of the table in problem locations (``claimed['hot']['yes']``).
    every_signal_possible : bool, default False
        Also refuse a signal with probability 0 in every state (module notes).
        Entry points that accept a new claim (creating a source, the command
        line) ask for it; reads of a stored claim do not, so a source stored
        before the rule stays readable.

    Returns
    -------
    states, signals : list of str
        In the order of the table (signals in the order of the first row).
    matrix : numpy.ndarray
        ``matrix[i, k] = P(signals[k] | states[i])``.

    Raises
    ------
    ModelValidationError
        With one problem per broken rule: not a mapping, fewer than one state
        or two signals, more than ``MAX_SOURCE_STATES`` states or
        ``MAX_SIGNALS`` signals, a cell not a finite number within [0, 1], a
        row not summing to 1 within ``ROW_SUM_TOLERANCE``, signals differing
        by row, and with ``every_signal_possible`` a signal with probability 0
        in every state.
    """
    problems: list[Problem] = []
    if not isinstance(table, Mapping) or not table:
        raise ModelValidationError(
            [Problem(name, "must be a non-empty mapping of state -> signal -> probability")]
        )
    if len(table) > MAX_SOURCE_STATES:
        # Refused before any row is read: the size limit exists to bound the work.
        raise ModelValidationError(
            [Problem(name, f"at most {MAX_SOURCE_STATES} states are allowed, got {len(table):,}")]
        )
    states = [str(s) for s in table]
    signals: list[str] | None = None
    for state, row in table.items():
        where = f"{name}[{_q(state)}]"
        if not isinstance(state, str) or not state.strip():
            problems.append(Problem(where, "state names must be non-empty text"))
        if not isinstance(row, Mapping) or not row:
            problems.append(Problem(where, "must be a non-empty mapping of signal -> probability"))
            continue
        if len(row) > MAX_SIGNALS:
            problems.append(
                Problem(where, f"at most {MAX_SIGNALS} signals are allowed, got {len(row):,}")
            )
            continue
        row_signals = [str(k) for k in row]
        if signals is None:
            signals = row_signals
            if len(signals) < 2:
                problems.append(Problem(where, "needs at least two signals"))
        else:
            missing = [k for k in signals if k not in row_signals]
            extra = [k for k in row_signals if k not in signals]
            if missing or extra:
                parts = []
                if missing:
                    parts.append("missing " + ", ".join(map(_q, missing)))
                if extra:
                    parts.append("unexpected " + ", ".join(map(_q, extra)))
                problems.append(
                    Problem(
                        where,
                        "every state must list the same signals ("
                        + ", ".join(signals)
                        + "): "
                        + "; ".join(parts),
                    )
                )
                continue
        total = 0.0
        row_ok = True
        for signal, p in row.items():
            cell = f"{where}[{_q(signal)}]"
            if not isinstance(signal, str) or not signal.strip():
                problems.append(Problem(cell, "signal names must be non-empty text"))
            if not _is_number(p) or not math.isfinite(float(p)):
                problems.append(Problem(cell, f"must be a finite number, got {p!r}"))
                row_ok = False
                continue
            if not 0.0 <= float(p) <= 1.0:
                problems.append(Problem(cell, f"must be within [0, 1], got {p!r}"))
                row_ok = False
                continue
            total += float(p)
        if row_ok and abs(total - 1.0) > ROW_SUM_TOLERANCE:
            problems.append(
                Problem(where, f"probabilities must sum to 1 (within 1e-6), got {total:.9g}")
            )
    if problems:
        raise ModelValidationError(problems)
    assert signals is not None
    matrix = np.array([[float(table[s][k]) for k in signals] for s in table], dtype=float)
    never = [k for j, k in enumerate(signals) if not matrix[:, j].any()]
    if never and every_signal_possible:
        raise ModelValidationError(
            [
                Problem(
                    name,
                    f"signal {k!r} has probability 0 in every state: no state could give it, "
                    "and a record of it could not be scored; give it a probability above 0 "
                    "in some state, or leave it out",
                )
                for k in never
            ]
        )
    return states, signals, matrix


def parse_date(value: Any, location: str) -> _dt.date:
    """Read a date strictly: a ``datetime.date`` or text ``YYYY-MM-DD``.

    A ``datetime.datetime`` is refused (a record has a day, not an instant).

    Raises
    ------
    ModelValidationError
        Naming ``location``.
    """
    if isinstance(value, _dt.datetime):
        raise ModelValidationError(
            [Problem(location, f"must be a date, not a date and time, got {value!r}")]
        )
    if isinstance(value, _dt.date):
        return value
    if isinstance(value, str) and _ISO_DATE.fullmatch(value):
        try:
            return _dt.date.fromisoformat(value)
        except ValueError as exc:
            raise ModelValidationError(
                [Problem(location, f"not a valid calendar date, got {value!r} ({exc})")]
            ) from None
    raise ModelValidationError(
        [Problem(location, f"must be a date in the form YYYY-MM-DD, got {value!r}")]
    )


def _field(record: Any, key: str) -> Any:
    if isinstance(record, Mapping):
        return record[key]
    return getattr(record, key)


def parse_records(
    records: Iterable[Any],
    states: Sequence[str],
    signals: Sequence[str],
    *,
    name: str = "records",
) -> list[Record]:
    """Check records and return them as :class:`Record` instances, in input order.

    Parameters
    ----------
    records : iterable
        Mappings ``{"date": "YYYY-MM-DD", "signal": str, "state": str}`` or
        objects with attributes ``date``, ``signal``, ``state``
        (dataclass instances, :class:`Record`).
    states, signals : sequence of str
        The known names; any other name is a problem.

    Raises
    ------
    ModelValidationError
        Every problem found, located as ``records[3].state``; nothing is returned
        when any record is bad.
    """
    if isinstance(records, str | bytes | Mapping):
        raise ModelValidationError([Problem(name, "must be a list of records")])
    problems: list[Problem] = []
    out: list[Record] = []
    known = {"state": list(states), "signal": list(signals)}
    state_set, signal_set = set(states), set(signals)
    for i, rec in enumerate(records):
        # Fast path for records already parsed (the CSV reader's output): only the names
        # need checking against this table.
        if (
            type(rec) is Record
            and type(rec.date) is _dt.date
            and rec.state in state_set
            and rec.signal in signal_set
        ):
            out.append(rec)
            continue
        where = f"{name}[{i}]"
        values: dict[str, Any] = {}
        for key in ("date", "signal", "state"):
            try:
                values[key] = _field(rec, key)
            except (KeyError, AttributeError, TypeError):
                problems.append(Problem(f"{where}.{key}", "is missing"))
        if len(values) < 3:
            continue
        good = True
        try:
            day = parse_date(values["date"], f"{where}.date")
        except ModelValidationError as exc:
            problems.extend(exc.problems)
            good = False
        for key in ("signal", "state"):
            v = values[key]
            if not isinstance(v, str):
                problems.append(Problem(f"{where}.{key}", f"must be text, got {v!r}"))
                good = False
            elif v not in known[key]:
                problems.append(
                    Problem(
                        f"{where}.{key}",
                        f"unknown {key} {v!r} (known: {', '.join(known[key])})",
                    )
                )
                good = False
        if good:
            out.append(Record(day, values["signal"], values["state"]))
    if problems:
        raise ModelValidationError(problems)
    return out


def _check_prior_strength(prior_strength: Any) -> float:
    if not _is_number(prior_strength) or not math.isfinite(float(prior_strength)):
        raise ModelValidationError(
            [Problem("prior_strength", f"must be a finite number, got {prior_strength!r}")]
        )
    if float(prior_strength) <= 0:
        raise ModelValidationError(
            [Problem("prior_strength", f"must be greater than 0, got {prior_strength!r}")]
        )
    if float(prior_strength) > MAX_PRIOR_STRENGTH:
        raise ModelValidationError(
            [
                Problem(
                    "prior_strength",
                    f"must be at most {MAX_PRIOR_STRENGTH:,.0f} past studies, "
                    f"got {float(prior_strength):.10g}",
                )
            ]
        )
    return float(prior_strength)


def _check_interval(interval: Any) -> float:
    if not _is_number(interval) or not 0.0 < float(interval) < 1.0:
        raise ModelValidationError(
            [Problem("interval", f"must be a number strictly between 0 and 1, got {interval!r}")]
        )
    return float(interval)


def _interval_key(interval: float) -> str:
    """``0.9 -> 'interval_90'``, ``0.975 -> 'interval_97.5'``."""
    return "interval_" + f"{interval * 100:.6f}".rstrip("0").rstrip(".")


# ---------------------------------------------------------------------------
# Calibration
# ---------------------------------------------------------------------------


def _counts(records: Sequence[Record], states: list[str], signals: list[str]) -> np.ndarray:
    si = {s: i for i, s in enumerate(states)}
    ki = {k: j for j, k in enumerate(signals)}
    counts = np.zeros((len(states), len(signals)), dtype=float)
    for r in records:
        counts[si[r.state], ki[r.signal]] += 1
    return counts


def _prior_parameters(matrix: np.ndarray, prior_strength: float) -> tuple[np.ndarray, np.ndarray]:
    raw = matrix * prior_strength
    floored = raw < MIN_PRIOR_PARAMETER
    return np.where(floored, MIN_PRIOR_PARAMETER, raw), floored


def calibrate(
    claimed: Mapping[str, Mapping[str, float]],
    records: Iterable[Any],
    *,
    prior_strength: float = DEFAULT_PRIOR_STRENGTH,
    interval: float = 0.90,
) -> dict[str, Any]:
    """Dirichlet posterior of a source's accuracy, one row per true state.

    Parameters
    ----------
    claimed : mapping
        ``claimed[state][signal] = P(signal | state)`` as the source claims it;
        rows sum to 1 within 1e-6.
    records : iterable
        Past studies (see :func:`parse_records`).
    prior_strength : float, default ``DEFAULT_PRIOR_STRENGTH`` (10)
        How many past studies of each state the claim is worth.
    interval : float, default 0.90
        Mass of the equal-tailed credible interval of each cell.

    Returns
    -------
    dict
        ``states[state]`` holds ``records`` (count of that state's records),
        ``most_likely_signal`` (the signal the claim rates most likely for the
        state; first listed on a tie), ``prob_below_claim`` (posterior
        probability that the true P(that signal | state) is below the claim:
        the marginal Beta CDF at the claim) and ``signals[signal]`` with
        ``claimed``, ``observed`` (frequency among the state's records, None
        when it has none), ``count``, ``prior_parameter``,
        ``posterior_parameter``, ``posterior_mean`` and ``interval_90`` (key
        named after ``interval``: ``[low, high]``). ``calibrated_likelihoods``
        is the table of posterior means (rows sum to 1). ``floored_cells``
        lists ``[state, signal]`` pairs whose prior parameter was raised to
        ``MIN_PRIOR_PARAMETER``.

    Raises
    ------
    ModelValidationError
        Bad claim table, bad record, ``prior_strength <= 0`` or ``interval``
        outside (0, 1); every problem names its place.

    Examples
    --------
    >>> claim = {"wet": {"yes": 0.8, "no": 0.2}, "dry": {"yes": 0.3, "no": 0.7}}
    >>> out = calibrate(claim, [])
    >>> out["calibrated_likelihoods"]["wet"]["yes"]
    0.8

    References
    ----------
    Gelman et al., *Bayesian Data Analysis*, 3rd ed., 2013, sec. 2.4 and 3.4.
    """
    states, signals, matrix = validate_likelihoods(claimed)
    strength = _check_prior_strength(prior_strength)
    mass = _check_interval(interval)
    recs = parse_records(records, states, signals)
    counts = _counts(recs, states, signals)
    return _calibration_report(states, signals, matrix, counts, strength, mass, len(recs))


def _posterior_arrays(
    matrix: np.ndarray, counts: np.ndarray, strength: float, mass: float
) -> dict[str, np.ndarray]:
    """Posterior figures for counts of shape (..., states, signals), all at once."""
    # Imported here: scipy.stats costs about a second to import, and every
    # `python -m valuation` command would pay it otherwise.
    from scipy import stats

    prior, floored = _prior_parameters(matrix, strength)
    post = prior + counts
    a0 = post.sum(axis=-1, keepdims=True)
    rest = a0 - post
    tail = (1.0 - mass) / 2.0
    top = np.argmax(matrix, axis=1)  # the claim's most likely signal; first one on ties
    rows = np.arange(matrix.shape[0])
    claim_top = matrix[rows, top]
    # Marginal of one Dirichlet cell: Beta(a_k, a0 - a_k) (Gelman et al. 2013, sec. 3.4).
    below = stats.beta.cdf(claim_top, post[..., rows, top], rest[..., rows, top])
    return {
        "prior": prior,
        "floored": floored,
        "post": post,
        "mean": post / a0,
        "low": stats.beta.ppf(tail, post, rest),
        "high": stats.beta.ppf(1.0 - tail, post, rest),
        "top": top,
        "below": below,
    }


def _as_lists(matrix: np.ndarray, counts: np.ndarray, arrays: dict[str, np.ndarray]) -> dict:
    """Plain nested lists of the figures, converted once: building per-window dicts from
    numpy scalars one by one was the bottleneck of :func:`rolling` (about 100 us a window)."""
    names = ("post", "mean", "low", "high", "below")
    out = {name: arrays[name].tolist() for name in names}
    out["counts"] = counts.tolist()
    out["claimed"] = matrix.tolist()
    out["prior"] = arrays["prior"].tolist()
    out["top"] = arrays["top"].tolist()
    return out


def _state_blocks(
    states: list[str], signals: list[str], lists: dict, key: str, w: int | None = None
) -> dict[str, Any]:
    """Per-state report of one calibration (``w`` selects a window of :func:`rolling`)."""

    def pick(name: str) -> list:
        return lists[name] if w is None else lists[name][w]

    c, post, mean, low, high, below = (
        pick(n) for n in ("counts", "post", "mean", "low", "high", "below")
    )
    out: dict[str, Any] = {}
    for i, state in enumerate(states):
        n_state = sum(c[i])
        cells = {}
        for k, signal in enumerate(signals):
            cells[signal] = {
                "claimed": lists["claimed"][i][k],
                "observed": c[i][k] / n_state if n_state else None,
                "count": int(c[i][k]),
                "prior_parameter": lists["prior"][i][k],
                "posterior_parameter": post[i][k],
                "posterior_mean": mean[i][k],
                key: [low[i][k], high[i][k]],
            }
        out[state] = {
            "records": int(n_state),
            "most_likely_signal": signals[lists["top"][i]],
            "prob_below_claim": below[i],
            "signals": cells,
        }
    return out


def _calibration_report(
    states: list[str],
    signals: list[str],
    matrix: np.ndarray,
    counts: np.ndarray,
    strength: float,
    mass: float,
    n_records: int,
) -> dict[str, Any]:
    arrays = _posterior_arrays(matrix, counts, strength, mass)
    mean = arrays["mean"]
    return {
        "prior_strength": strength,
        "interval": mass,
        "records": int(n_records),
        "states": _state_blocks(
            states, signals, _as_lists(matrix, counts, arrays), _interval_key(mass)
        ),
        "calibrated_likelihoods": {
            s: {k: float(mean[i, j]) for j, k in enumerate(signals)} for i, s in enumerate(states)
        },
        "floored_cells": [
            [states[i], signals[j]] for i, j in zip(*np.nonzero(arrays["floored"]), strict=True)
        ],
    }


# ---------------------------------------------------------------------------
# Scores of a source's record
# ---------------------------------------------------------------------------

BRIER_CONVENTION_TWO = (
    "two states: today's one-category form (1 - p)^2, p the probability given to the state "
    "that came true, range 0-1; Brier's 1950 original sums both categories and is twice this"
)
BRIER_CONVENTION_MANY = (
    "three or more states: Brier's 1950 multi-category form, the sum over states of "
    "(p_j - o_j)^2, range 0-2"
)


def _check_prior(prior: Any, states: list[str]) -> tuple[np.ndarray, str]:
    if prior is None:
        return np.full(len(states), 1.0 / len(states)), "uniform (no prior over states given)"
    if not isinstance(prior, Mapping):
        raise ModelValidationError([Problem("prior", "must be a mapping of state -> probability")])
    problems: list[Problem] = []
    for s in prior:
        if s not in states:
            problems.append(
                Problem(f"prior[{_q(s)}]", f"unknown state (known: {', '.join(states)})")
            )
    values = []
    for s in states:
        where = f"prior[{_q(s)}]"
        if s not in prior:
            problems.append(Problem(where, "is missing"))
            continue
        p = prior[s]
        if not _is_number(p) or not math.isfinite(float(p)) or not 0.0 <= float(p) <= 1.0:
            problems.append(Problem(where, f"must be a number within [0, 1], got {p!r}"))
            continue
        values.append(float(p))
    if not problems and abs(sum(values) - 1.0) > ROW_SUM_TOLERANCE:
        problems.append(
            Problem("prior", f"probabilities must sum to 1 (within 1e-6), got {sum(values):.9g}")
        )
    if problems:
        raise ModelValidationError(problems)
    return np.array(values), "given"


def _record_scores(
    matrix: np.ndarray,
    prior: np.ndarray,
    states: list[str],
    signals: list[str],
    recs: Sequence[Record],
) -> dict[str, np.ndarray]:
    """Per-record posterior, hit, Brier and log score (arrays over records)."""
    joint = prior[:, None] * matrix  # P(state, signal)
    marginal = joint.sum(axis=0)  # P(signal)
    si = {s: i for i, s in enumerate(states)}
    ki = {k: j for j, k in enumerate(signals)}
    problems = [
        Problem(
            f"records[{n}].signal",
            f"the likelihoods and the prior give signal {r.signal!r} probability 0, "
            "so the study implies no posterior to score",
        )
        for n, r in enumerate(recs)
        if marginal[ki[r.signal]] <= 0.0
    ]
    if problems:
        raise ModelValidationError(problems)
    sig = np.array([ki[r.signal] for r in recs], dtype=int)
    true = np.array([si[r.state] for r in recs], dtype=int)
    post = (joint[:, sig] / marginal[sig]).T if len(recs) else np.zeros((0, len(states)))
    rows = np.arange(len(recs))
    p_true = post[rows, true]
    top = post.max(axis=1, keepdims=True) if len(recs) else np.zeros((0, 1))
    tied = np.isclose(post, top, rtol=0.0, atol=1e-12)
    # A tie among the most likely states counts as a fraction of a hit (random tie-break).
    hit = tied[rows, true] / tied.sum(axis=1) if len(recs) else np.zeros(0)
    onehot = np.zeros_like(post)
    onehot[rows, true] = 1.0
    all_cat = ((post - onehot) ** 2).sum(axis=1)
    brier = all_cat / 2.0 if len(states) == 2 else all_cat
    with np.errstate(divide="ignore"):
        logs = np.log(p_true)
    return {
        "post": post,
        "p_true": p_true,
        "hit": hit,
        "tied": tied,
        "brier": brier,
        "all_cat": all_cat,
        "log": logs,
    }


def _mean_or_none(a: np.ndarray) -> float | None:
    return float(np.mean(a)) if len(a) else None


def score_record(
    likelihoods: Mapping[str, Mapping[str, float]],
    prior: Mapping[str, float] | None,
    records: Iterable[Any],
    *,
    per_record: bool = True,
) -> dict[str, Any]:
    """Score a source's track record as probability forecasts of the true state.

    For each record the study's implied posterior over states is
    ``P(state | signal) ∝ prior(state) · P(signal | state)`` (Bayes' rule);
    that forecast is scored against the state that came true.

    Parameters
    ----------
    likelihoods : mapping
        ``likelihoods[state][signal]``: the claimed table, or the
        ``calibrated_likelihoods`` of :func:`calibrate`.
    prior : mapping or None
        Prior over states. None means uniform, and the output says so in
        ``prior_source``.
    records : iterable
        Past studies (see :func:`parse_records`).
    per_record : bool, default True
        False leaves out ``per_record``, a dict per record with a posterior
        over every state: the bulk of the work on a long record, wasted when
        only the means are wanted.

    Returns
    -------
    dict
        ``records``; ``prior`` and ``prior_source``; ``hit_rate`` (share of
        records whose most likely posterior state is the true one; a tie
        between k states counts 1/k when the true state is among them);
        ``brier`` (convention in ``brier_convention``: for two states the
        one-category score (1 - p)^2, for three or more Brier's
        all-categories sum), ``brier_all_categories`` (Brier's original sum,
        always), ``log_score`` (mean natural log of p, the probability given
        to the true state: 0 is perfect, ``-inf`` when a true state was given
        probability 0) and ``per_record`` (date, signal, state, posterior,
        ``prob_true_state``, ``hit``, ``brier``, ``log_score``). Means are
        None when there are no records.

    Raises
    ------
    ModelValidationError
        Bad table, prior or record, or a reported signal that the
        likelihoods and prior give probability 0.

    Examples
    --------
    >>> lik = {"a": {"x": 0.7, "y": 0.3}, "b": {"x": 0.3, "y": 0.7}}
    >>> out = score_record(lik, None, [{"date": "2020-01-01", "signal": "x", "state": "a"}])
    >>> round(out["brier"], 6)
    0.09

    References
    ----------
    Brier, G. W., *Monthly Weather Review* 78(1): 1-3, 1950.
    Good, I. J., "Rational decisions", *JRSS B* 14(1): 107-114, 1952.
    """
    states, signals, matrix = validate_likelihoods(likelihoods, name="likelihoods")
    prior_vec, source = _check_prior(prior, states)
    recs = parse_records(records, states, signals)
    sc = _record_scores(matrix, prior_vec, states, signals, recs)
    out = {
        "records": len(recs),
        "prior": {s: float(prior_vec[i]) for i, s in enumerate(states)},
        "prior_source": source,
        "hit_rate": _mean_or_none(sc["hit"]),
        "brier": _mean_or_none(sc["brier"]),
        "brier_all_categories": _mean_or_none(sc["all_cat"]),
        "brier_convention": BRIER_CONVENTION_TWO if len(states) == 2 else BRIER_CONVENTION_MANY,
        "log_score": _mean_or_none(sc["log"]),
    }
    if per_record:
        out["per_record"] = _per_record(states, recs, sc)
    return out


def _per_record(states: list[str], recs: Sequence[Record], sc: dict[str, np.ndarray]) -> list:
    # Plain lists first: indexing numpy arrays scalar by scalar is slow on big records.
    post, p_true, hit, brier, logs = (
        sc[k].tolist() for k in ("post", "p_true", "hit", "brier", "log")
    )
    return [
        {
            "date": r.date.isoformat(),
            "signal": r.signal,
            "state": r.state,
            "posterior": dict(zip(states, post[n], strict=True)),
            "prob_true_state": p_true[n],
            "hit": hit[n],
            "brier": brier[n],
            "log_score": logs[n],
        }
        for n, r in enumerate(recs)
    ]



# ---------------------------------------------------------------------------
# Trend
# ---------------------------------------------------------------------------


def least_step(n_records: int, window: int, n_cells: int) -> int:
    """The least step between window ends that keeps :func:`rolling` within
    ``MAX_ROLLING_WINDOWS`` windows and ``MAX_ROLLING_CELLS`` cells.

    ``n_cells`` is the claim's states x signals. With step ``k`` there are
    ``ceil((n_records - window + 1) / k)`` windows, so the least step is the
    ceiling of that span over the number of windows allowed.
    """
    allowed = max(1, min(MAX_ROLLING_WINDOWS, MAX_ROLLING_CELLS // max(1, n_cells)))
    span = n_records - window + 1
    return max(1, -(-span // allowed))


def _check_window_count(n: int, window: int, step: int, n_cells: int) -> None:
    n_windows = (n - window) // step + 1
    least = least_step(n, window, n_cells)
    if n_windows > MAX_ROLLING_WINDOWS:
        message = (
            f"{n_windows:,} windows of {window} records is more than "
            f"{MAX_ROLLING_WINDOWS:,}; use a step of at least {least}"
        )
    elif n_windows * n_cells > MAX_ROLLING_CELLS:
        message = (
            f"{n_windows:,} windows of {n_cells:,} cells (states x signals) is "
            f"{n_windows * n_cells:,} cells, more than {MAX_ROLLING_CELLS:,}; "
            f"use a step of at least {least}"
        )
    else:
        return
    raise ModelValidationError([Problem("step", message)])


def _window_counts(
    recs: Sequence[Record], states: list[str], signals: list[str], ends: np.ndarray, window: int
) -> np.ndarray:
    """Counts ``[window, state, signal]`` of the records ``ends - window`` to ``ends``.

    Cumulative counts are taken only at the window boundaries, not after every
    record: memory grows with windows x cells (bounded by ``MAX_ROLLING_CELLS``)
    instead of records x cells, which a long record of a large claim made gigabytes.
    """
    n_cells = len(states) * len(signals)
    si = {s: i for i, s in enumerate(states)}
    ki = {k: j for j, k in enumerate(signals)}
    cell = np.array([si[r.state] * len(signals) + ki[r.signal] for r in recs], dtype=np.int64)
    bounds = np.unique(np.concatenate([ends - window, ends]))
    # Record t counts towards the prefix ending at bounds[j] when t < bounds[j]: group the
    # records by the first boundary above them, count each group, add the groups up.
    group = np.searchsorted(bounds, np.arange(len(recs)), side="right")
    groups = np.bincount(group * n_cells + cell, minlength=(len(bounds) + 1) * n_cells)
    prefix = np.cumsum(groups.reshape(len(bounds) + 1, n_cells), axis=0).astype(float)
    at = {int(b): j for j, b in enumerate(bounds.tolist())}
    upper = prefix[[at[int(e)] for e in ends.tolist()]]
    lower = prefix[[at[int(e) - window] for e in ends.tolist()]]
    return (upper - lower).reshape(len(ends), len(states), len(signals))


def rolling(
    claimed: Mapping[str, Mapping[str, float]],
    records: Iterable[Any],
    *,
    window: int = DEFAULT_WINDOW,
    step: int = 1,
    prior_strength: float = DEFAULT_PRIOR_STRENGTH,
    interval: float = 0.90,
    prior: Mapping[str, float] | None = None,
) -> dict[str, Any]:
    """The calibration and scores over a rolling window of the latest records.

    Records are sorted by date (records of one day keep their input order);
    each window holds ``window`` consecutive records. Windows end at the last
    record and every ``step`` records before it, listed oldest first, so a
    source whose accuracy fell shows falling posterior means and rising
    ``prob_below_claim``. Fewer records than ``window`` gives no windows.

    Each window carries the figures of :func:`calibrate` on its records
    (``states``, same layout) and the scores of :func:`score_record` with the
    claimed likelihoods (``hit_rate``, ``brier``, ``log_score``), plus
    ``start_date`` and ``end_date``. Computed for all windows at once with
    cumulative counts; the tests check it against :func:`calibrate` on each
    slice.

    Parameters
    ----------
    window : int, default ``DEFAULT_WINDOW`` (10)
        Records per window, at least 1.
    step : int, default 1
        Records between consecutive window ends, at least 1; at most
        ``MAX_ROLLING_WINDOWS`` windows and ``MAX_ROLLING_CELLS`` cells
        (windows x states x signals) are built. :func:`least_step` gives the
        least step that keeps within both.
    prior : mapping or None
        Prior over states for the scores; None means uniform.

    Raises
    ------
    ModelValidationError
        As :func:`calibrate`, and for ``window`` or ``step`` not a positive
        whole number.
    """
    problems = [
        Problem(name, f"must be a whole number of at least 1, got {value!r}")
        for name, value in (("window", window), ("step", step))
        if not isinstance(value, int | np.integer) or isinstance(value, bool) or value < 1
    ]
    if problems:
        raise ModelValidationError(problems)
    states, signals, matrix = validate_likelihoods(claimed)
    strength = _check_prior_strength(prior_strength)
    mass = _check_interval(interval)
    prior_vec, source = _check_prior(prior, states)
    recs = sorted(parse_records(records, states, signals), key=lambda r: r.date)
    n = len(recs)
    out: dict[str, Any] = {
        "window": int(window),
        "step": int(step),
        "prior_strength": strength,
        "interval": mass,
        "records": n,
        "prior_source": source,
        "windows": [],
    }
    if n < window:
        return out
    _check_window_count(n, int(window), int(step), matrix.size)
    ends = np.arange(n, window - 1, -int(step))[::-1]
    counts = _window_counts(recs, states, signals, ends, int(window))
    arrays = _posterior_arrays(matrix, counts, strength, mass)
    sc = _record_scores(matrix, prior_vec, states, signals, recs)

    def window_means(values: np.ndarray) -> np.ndarray:
        # A sum over a window of a -inf log score stays -inf; keep it out of cumsum.
        finite = np.where(np.isfinite(values), values, 0.0)
        c = np.concatenate([[0.0], np.cumsum(finite)])
        bad = np.concatenate([[0], np.cumsum(~np.isfinite(values))])
        means = (c[ends] - c[ends - window]) / window
        return np.where(bad[ends] - bad[ends - window] > 0, -np.inf, means)

    hit = window_means(sc["hit"])
    brier = window_means(sc["brier"])
    logs = window_means(sc["log"])
    key = _interval_key(mass)
    lists = _as_lists(matrix, counts, arrays)
    hit_l, brier_l, logs_l = hit.tolist(), brier.tolist(), logs.tolist()
    for w, end in enumerate(ends.tolist()):
        out["windows"].append(
            {
                "start_date": recs[end - window].date.isoformat(),
                "end_date": recs[end - 1].date.isoformat(),
                "records": int(window),
                "hit_rate": hit_l[w],
                "brier": brier_l[w],
                "log_score": logs_l[w],
                "states": _state_blocks(states, signals, lists, key, w),
            }
        )
    return out


# ---------------------------------------------------------------------------
# Reports as JSON
# ---------------------------------------------------------------------------

#: Why a figure of a report is not finite, by kind. Only minus infinity is expected (a log
#: score when a state that came true had been given probability 0); the others would be a
#: defect, and are told apart so that a note never gives the wrong reason.
NON_FINITE_MEANINGS = {
    "-inf": "minus infinity: a state that came true had been given probability 0",
    "nan": "not a number: the figure could not be computed from these inputs (a defect; "
    "please report it with the inputs)",
    "inf": "plus infinity: the figure overflowed (a defect; please report it with the inputs)",
}


def _kind(value: float) -> str:
    if math.isnan(value):
        return "nan"
    return "-inf" if value < 0 else "inf"


def _replace(value: Any, where: str, found: dict[str, list[str]]) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        found.setdefault(_kind(value), []).append(where)
        return None
    if isinstance(value, dict):
        return {k: _replace(v, f"{where}.{k}" if where else str(k), found) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_replace(v, f"{where}[{i}]", found) for i, v in enumerate(value)]
    return value


def replace_non_finite(report: Any) -> tuple[Any, dict[str, Any] | None]:
    """A copy of ``report`` with every non-finite float replaced by None, and a note.

    JSON has no infinity (RFC 8259, sec. 6), so the API and ``--json`` answer
    null where a figure is not finite, and say why in the note:
    ``{"fields": [paths], "meaning": text, "kinds": {"-inf": [paths], ...}}``
    (``meaning`` from :data:`NON_FINITE_MEANINGS`, one clause per kind found).
    The note is None when every figure is finite.
    """
    found: dict[str, list[str]] = {}
    clean = _replace(report, "", found)
    if not found:
        return clean, None
    kinds = {kind: found[kind] for kind in NON_FINITE_MEANINGS if kind in found}
    return clean, {
        "fields": [path for paths in kinds.values() for path in paths],
        "meaning": "; ".join(NON_FINITE_MEANINGS[kind] for kind in kinds),
        "kinds": kinds,
    }
