"""Exponential utility and certainty equivalents.

With u(x) = -exp(-x / R) for a risk tolerance R > 0, the certainty equivalent of
a lottery is CE = -R ln E[exp(-X / R)]. We evaluate it as
m - R ln E[exp(-(X - m) / R)] with m = min X over outcomes of positive
probability, so no exponential overflows and none underflows to a log of 0.
The logarithm of that expectation is taken by ``log_expectation`` (see there
why it needs ``expm1``/``log1p`` for a large R and the sum of the
probabilities for every R); every certainty equivalent in ``valuation`` goes
through it or its array form ``log_expectations``.

The exponential family is the one (besides linear) with the delta property:
adding a constant to every outcome adds it to the CE (Luenberger, *Investment
Science*, 1998, ch. 16). That is why a tree can be rolled back by certainty
equivalents and why the value of information equals a difference of CEs.

References
----------
Howard, R. A., "Decision analysis: practice and promise", Management Science
34(6), 1988 (risk tolerance). Clemen, R. T., *Making Hard Decisions*, risk
attitude chapter (the 50-50 gamble assessment).
"""

from __future__ import annotations

import math

import numpy as np

from valuation.errors import ParameterError

__all__ = ["certainty_equivalent", "check_risk_tolerance", "log_expectation", "log_expectations",
           "risk_tolerance_from_gamble", "segment_certainty_equivalents"]


def check_risk_tolerance(risk_tolerance: float | None) -> float | None:
    """Refuse a risk tolerance that is not a positive finite number."""
    if risk_tolerance is None:
        return None
    if isinstance(risk_tolerance, bool) or not isinstance(risk_tolerance, int | float):
        raise ParameterError(f"risk_tolerance: must be a number, got {risk_tolerance!r}")
    if not math.isfinite(risk_tolerance) or risk_tolerance <= 0:
        raise ParameterError(f"risk_tolerance: must be a positive finite number, got {risk_tolerance}")
    return float(risk_tolerance)


def certainty_equivalent(values, probabilities, risk_tolerance: float) -> float:
    """Certainty equivalent of a discrete lottery under exponential utility.

    Parameters
    ----------
    values, probabilities : sequences of float
        Outcomes (more is better) and their probabilities (summing to 1).
    risk_tolerance : float
        R > 0, in money.

    Returns
    -------
    float

    Examples
    --------
    >>> round(certainty_equivalent([100, -50, 20], [0.3, 0.2, 0.5], 80.0), 6)
    13.095591
    """
    r = check_risk_tolerance(risk_tolerance)
    x = np.asarray(values, dtype=float)
    p = np.asarray(probabilities, dtype=float)
    live = p > 0
    if not live.any():
        raise ParameterError("probabilities: at least one outcome must have positive probability")
    m = float(x[live].min())
    p = p[live]
    with np.errstate(over="ignore"):  # a tiny R: the exponent is -inf, its exp 0
        exponent = -(x[live] - m) / r
    return m - r * log_expectation(float(np.sum(p)), float(np.sum(p * np.exp(exponent))),
                                   float(np.sum(p * np.expm1(exponent))))


#: Below this, 1 + sum p * expm1(t) / sum p cancels, and the plain sum of p * exp(t) is kept.
_LOG1P_FLOOR = -0.5


def log_expectation(prob_sum: float, exp_sum: float, expm1_sum: float) -> float:
    """ln E[exp(T)] for exponents T <= 0, from three sums over the same outcomes:
    sum p, sum p * exp(T) and sum p * expm1(T).

    Why not ln(sum p * exp(T)): with a risk tolerance far above the spread of the
    outcomes every T is below 1e-16 or so, each exp(T) rounds to 1 and the certainty
    equivalent collapses to the worst outcome. E[exp(T)] = 1 + q with
    q = sum p * expm1(T) / sum p keeps those T, and log1p(q) is exact to rounding.
    Dividing by sum p makes the probabilities sum to 1 exactly: else ln(sum p), a
    rounding error of 1e-16 or a tolerated 1e-6, times R joins the certainty
    equivalent (1e292 at R = 1e308), and as R grows the value no longer tends to the
    expected value. Where E[exp(T)] is far below 1 (a small R), 1 + q cancels
    instead and the plain sum is the accurate one. A q of -0.0 is made +0.0, so that a
    certain outcome m keeps its bits (m - R * 0.0).
    """
    q = expm1_sum / prob_sum + 0.0
    if q > _LOG1P_FLOOR:
        return math.log1p(q)
    return math.log(exp_sum / prob_sum)


def log_expectations(prob_sums, exp_sums, expm1_sums) -> np.ndarray:
    """``log_expectation`` element by element (arrays broadcast together), with numpy's
    log1p and log. An element whose sums are all 0 (no outcome of positive probability,
    which callers mask) comes out NaN, without a warning."""
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.asarray(expm1_sums, dtype=float) / prob_sums + 0.0
        far = np.log(np.asarray(exp_sums, dtype=float) / prob_sums)
    near = np.log1p(np.maximum(q, _LOG1P_FLOOR))
    return np.where(q > _LOG1P_FLOOR, near, far)


def segment_certainty_equivalents(values, probs, starts, seg, r: float) -> np.ndarray:
    """Certainty equivalent of every segment of every row: the chance nodes of one tree
    level (segments as ``np.add.reduceat`` takes them along axis 1, ``seg`` the segment
    of each column) under several parameter values at once (rows).

    The batched rollbacks of sweeps and of the value of learning share it, so both take
    a chance node's certainty equivalent in the same operations. Branches of
    probability 0 are left out; a segment with none live (a decision node's) comes out
    NaN, for the caller to replace.
    """
    live = probs > 0
    m = np.minimum.reduceat(np.where(live, values, np.inf), starts, axis=1)
    with np.errstate(over="ignore", invalid="ignore"):  # a tiny R: the exponent is -inf
        exponent = np.where(live, -(values - m[:, seg]) / r, 0.0)
    e = np.where(live, np.exp(exponent), 0.0)
    d = np.where(live, np.expm1(exponent), 0.0)
    return m - r * log_expectations(np.add.reduceat(probs, starts, axis=1),
                                    np.add.reduceat(probs * e, starts, axis=1),
                                    np.add.reduceat(probs * d, starts, axis=1))


def risk_tolerance_from_gamble(largest_gain: float) -> float:
    """Risk tolerance implied by the largest Y for which +Y / -Y/2 at 50-50 is acceptable.

    Exact indifference under exponential utility is at Y = 0.96242 R (solved
    numerically here; the rule of thumb R ~ Y is from Clemen's risk-attitude
    chapter, recalled from memory).
    """
    if not largest_gain > 0:
        raise ParameterError(f"largest_gain: must be positive, got {largest_gain}")
    # Solve 0.5 exp(-y) + 0.5 exp(y/2) = 1 for y = Y/R (unique positive root).
    lo, hi = 0.5, 2.0
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if 0.5 * math.exp(-mid) + 0.5 * math.exp(mid / 2) - 1 < 0:
            lo = mid
        else:
            hi = mid
    return float(largest_gain / (0.5 * (lo + hi)))
