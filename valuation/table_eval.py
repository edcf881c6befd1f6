"""Value of a payoff table and of its studies, computed on the matrices.

Definitions (Raiffa & Schlaifer 1961; Howard, "Information value theory", 1966):

- without information: the best alternative under the prior;
- EVPI: value if the state were revealed before choosing, minus the above;
- EVSI of a study: value if its signal were revealed (the study taken free),
  minus the value without information; net value = EVSI - fee;
  efficiency = EVSI / EVPI; the largest fee worth paying equals the EVSI.

Under exponential utility every value is a certainty equivalent; because of the
delta property a fee lowers the CE by exactly the fee, so the EVSI computed
from CEs is the exact buying price of the study.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from valuation.bayes import Revision, revise
from valuation.limits import TIE_TOLERANCE
from valuation.table import PayoffTable
from valuation.utility import log_expectation, log_expectations

__all__ = ["TableValues", "StudyValues", "value_table", "first_best", "near_best"]


def near_best(values) -> np.ndarray:
    """Indices of the values within the tie tolerance of the best (relative to it, at
    least 1): the choices a decision weighs as tied, in order."""
    values = np.asarray(values, dtype=float)
    top = float(np.max(values))
    return np.flatnonzero(values >= top - TIE_TOLERANCE * max(1.0, abs(top)))


def first_best(values: np.ndarray) -> tuple[int, bool]:
    """Index of the best value, the first in order among near-equals; and whether there was a tie."""
    near = near_best(values)
    return int(near[0]), bool(len(near) > 1)


def _lottery_ce(outcomes: np.ndarray, probs: np.ndarray, r: float) -> np.ndarray:
    """CE of each row of ``outcomes`` (rows x states) under one probability vector."""
    live = probs > 0
    x = outcomes[:, live]
    p = probs[live]
    m = x.min(axis=1)
    with np.errstate(over="ignore"):  # a tiny R: the exponent is -inf, its exp 0
        exponent = -(x - m[:, None]) / r
    return m - r * log_expectations(np.sum(p), np.exp(exponent) @ p, np.expm1(exponent) @ p)


def _ce_by_signal(x: np.ndarray, posterior: np.ndarray, live: np.ndarray, r: float) -> np.ndarray:
    """CE of every alternative under every posterior: alternatives x signals (NaN where dead)."""
    out = np.full((x.shape[0], posterior.shape[1]), np.nan)
    for g in np.flatnonzero(live):
        out[:, g] = _lottery_ce(x, posterior[:, g], r)
    return out


@dataclass
class StudyValues:
    """Values of one study, internal sign (more is better)."""

    revision: Revision
    best_by_signal: np.ndarray  # alternative index per signal, -1 for an impossible signal
    value_by_signal: np.ndarray  # criterion value per signal, NaN for an impossible signal
    free_value: float  # criterion value with the study taken free
    plan_ev: float  # expected value of the plan with the study, fee paid
    evsi: float
    changes_decision: bool


@dataclass
class TableValues:
    """Everything the result document needs about a payoff table."""

    criterion_by_alternative: np.ndarray
    ev_by_alternative: np.ndarray
    ce_by_alternative: np.ndarray | None
    best: int
    best_tie: bool
    value_without: float
    evpi: float
    studies: list[StudyValues]
    option_values: np.ndarray  # [no study, study 1, ...] criterion value, fees paid
    chosen_option: int  # 0 = no study
    option_tie: bool


def value_table(t: PayoffTable, risk_tolerance: float | None = None) -> TableValues:
    """Evaluate every option of a payoff table (no study, or each study) by the criterion."""
    x = t.sign * t.payoffs
    ev = x @ t.prior
    ce = _lottery_ce(x, t.prior, risk_tolerance) if risk_tolerance else None
    crit = ce if ce is not None else ev
    best, best_tie = first_best(crit)
    v0 = float(crit[best])
    perfect = x.max(axis=0)
    if risk_tolerance:
        v_perfect = float(_lottery_ce(perfect[None, :], t.prior, risk_tolerance)[0])
    else:
        v_perfect = float(perfect @ t.prior)
    evpi = max(0.0, v_perfect - v0)
    studies = [_value_study(x, t.prior, s.likelihoods, best, v0, risk_tolerance)
               for s in t.studies]
    options = np.array([v0] + [sv.free_value - s.cost for sv, s in zip(studies, t.studies,
                                                                         strict=True)])
    chosen, option_tie = first_best(options)
    return TableValues(crit, ev, ce, best, best_tie, v0, evpi, studies, options, chosen,
                       option_tie)


def _value_study(x, prior, likelihoods, best0, v0, r) -> StudyValues:
    rev = revise(prior, likelihoods)
    live = ~rev.zero_signals
    joint_values = x @ rev.joint  # alternatives x signals: sum over states of x * joint
    if r:
        crit = _ce_by_signal(x, rev.posterior, live, r)
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            crit = np.where(live[None, :], joint_values / np.where(live, rev.signal_probability,
                                                                   1.0)[None, :], np.nan)
    best = np.full(crit.shape[1], -1, dtype=np.int64)
    for g in np.flatnonzero(live):
        best[g], _ = first_best(crit[:, g])
    value_by_signal = np.where(live, crit[np.maximum(best, 0), np.arange(crit.shape[1])], np.nan)
    ps = rev.signal_probability
    if r:
        vals, p = value_by_signal[live], ps[live]
        m = vals.min()
        with np.errstate(over="ignore"):
            exponent = -(vals - m) / r
        free = float(m - r * log_expectation(float(np.sum(p)), float(np.sum(p * np.exp(exponent))),
                                             float(np.sum(p * np.expm1(exponent)))))
    else:
        free = float(np.sum(ps[live] * value_by_signal[live]))
    plan_ev = float(sum(joint_values[best[g], g] for g in np.flatnonzero(live)))
    changes = bool(np.any(best[live] != best0))
    # If every possible signal leads to the choice made without the study, the study
    # is worth exactly nothing; setting it avoids reporting rounding noise as value.
    evsi = max(0.0, free - v0) if changes else 0.0
    if not changes:
        free = v0
    return StudyValues(rev, best, value_by_signal, free, plan_ev, evsi, changes)
