"""Scores of binary probability forecasts: Brier, logarithmic, Murphy's partition.

Used for a study source's record (through ``valuation.reliability``) and for a
team's own probabilities in the portfolio review: both ask how well stated
probabilities matched what happened.

References
----------
.. [1] Brier, G. W., "Verification of forecasts expressed in terms of
   probability", *Monthly Weather Review* 78(1): 1-3, 1950.
.. [2] Good, I. J., "Rational decisions", *JRSS B* 14(1): 107-114, 1952.
.. [3] Murphy, A. H., "A new vector partition of the probability score",
   *Journal of Applied Meteorology* 12(4): 595-600, 1973.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from valuation.errors import ModelValidationError, Problem

__all__ = ["brier_score", "log_score", "brier_decomposition", "calibration_table"]


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float | np.integer | np.floating) and not isinstance(
        value, bool | np.bool_
    )


def _binary_inputs(forecasts: Any, outcomes: Any) -> tuple[np.ndarray, np.ndarray]:
    problems: list[Problem] = []
    f_list = list(forecasts)
    o_list = list(outcomes)
    if not f_list:
        problems.append(Problem("forecasts", "must not be empty"))
    if len(f_list) != len(o_list):
        problems.append(
            Problem(
                "outcomes",
                f"must have as many entries as forecasts ({len(f_list)}), got {len(o_list)}",
            )
        )
    for i, f in enumerate(f_list):
        if not _is_number(f) or not math.isfinite(float(f)) or not 0.0 <= float(f) <= 1.0:
            problems.append(
                Problem(f"forecasts[{i}]", f"must be a number within [0, 1], got {f!r}")
            )
    for i, o in enumerate(o_list):
        if not (isinstance(o, bool | np.bool_) or (_is_number(o) and float(o) in (0.0, 1.0))):
            problems.append(Problem(f"outcomes[{i}]", f"must be 0 or 1 (or a bool), got {o!r}"))
    if problems:
        raise ModelValidationError(problems)
    return np.array(f_list, dtype=float), np.array(o_list, dtype=float)


def brier_score(forecasts: Sequence[float], outcomes: Sequence[Any]) -> float:
    """Mean one-category Brier score of binary forecasts, ``mean((f - o)^2)``.

    Today's form, range 0-1; Brier's 1950 original sums both categories and is
    twice this for a yes/no event.

    References
    ----------
    Brier, G. W., *Monthly Weather Review* 78(1): 1-3, 1950.
    """
    f, o = _binary_inputs(forecasts, outcomes)
    return float(np.mean((f - o) ** 2))


def log_score(forecasts: Sequence[float], outcomes: Sequence[Any]) -> float:
    """Mean logarithmic score of binary forecasts, natural log, 0 best.

    ``mean(ln f)`` over events that happened and ``ln(1 - f)`` over the others;
    ``-inf`` when an outcome was forecast with probability 0.

    References
    ----------
    Good, I. J., "Rational decisions", *JRSS B* 14(1): 107-114, 1952.
    Gneiting, T. & Raftery, A. E., *JASA* 102(477): 359-378, 2007 (propriety).
    """
    f, o = _binary_inputs(forecasts, outcomes)
    p = np.where(o == 1.0, f, 1.0 - f)
    with np.errstate(divide="ignore"):
        return float(np.mean(np.log(p)))


def brier_decomposition(forecasts: Sequence[float], outcomes: Sequence[Any]) -> dict[str, float]:
    """Murphy's partition of the Brier score of binary forecasts.

    Grouping by distinct forecast value ``f_k`` (``n_k`` forecasts, observed
    frequency ``o_k``; overall frequency ``o``, ``N`` forecasts):

    - reliability ``= sum n_k (f_k - o_k)^2 / N`` (0 is perfectly calibrated),
    - resolution ``= sum n_k (o_k - o)^2 / N`` (larger is better),
    - uncertainty ``= o (1 - o)``,

    and ``brier = reliability - resolution + uncertainty`` exactly (up to
    rounding), because the grouping is by distinct value.

    Returns
    -------
    dict
        ``brier``, ``reliability``, ``resolution``, ``uncertainty``, ``groups``
        (number of distinct forecast values), ``forecasts`` (N).

    Raises
    ------
    ModelValidationError
        Empty input, lengths differ, a forecast outside [0, 1], an outcome not
        0/1.

    Examples
    --------
    >>> out = brier_decomposition([0.2, 0.2, 0.8, 0.8], [0, 1, 1, 1])
    >>> round(out["reliability"] - out["resolution"] + out["uncertainty"], 12) == round(
    ...     out["brier"], 12)
    True

    References
    ----------
    Murphy, A. H., "A new vector partition of the probability score",
    *Journal of Applied Meteorology* 12(4): 595-600, 1973.
    """
    f, o = _binary_inputs(forecasts, outcomes)
    values, inverse, n_k = np.unique(f, return_inverse=True, return_counts=True)
    o_k = np.bincount(inverse, weights=o) / n_k
    base = float(o.mean())
    n = len(f)
    return {
        "brier": float(np.mean((f - o) ** 2)),
        "reliability": float(np.sum(n_k * (values - o_k) ** 2) / n),
        "resolution": float(np.sum(n_k * (o_k - base) ** 2) / n),
        "uncertainty": base * (1.0 - base),
        "groups": len(values),
        "forecasts": n,
    }


def calibration_table(
    forecasts: Sequence[float], outcomes: Sequence[Any], bins: int = 10
) -> list[dict[str, Any]]:
    """Binned calibration table (reliability diagram data) of binary forecasts.

    ``bins`` equal-width bins on [0, 1]; each bin is ``[lower, upper)`` except
    the last, which includes 1.

    Returns
    -------
    list of dict
        One per bin: ``lower``, ``upper``, ``count``, ``mean_forecast`` and
        ``observed_frequency`` (None for an empty bin).

    Raises
    ------
    ModelValidationError
        Bad forecasts or outcomes, or ``bins`` not an integer from 1 to 1000.

    References
    ----------
    Murphy, A. H. & Winkler, R. L., "Reliability of subjective probability
    forecasts of precipitation and temperature", *Applied Statistics* 26(1):
    41-47, 1977 (reliability diagrams; from memory).
    """
    if not isinstance(bins, int | np.integer) or isinstance(bins, bool) or not 1 <= bins <= 1000:
        raise ModelValidationError(
            [Problem("bins", f"must be a whole number from 1 to 1000, got {bins!r}")]
        )
    f, o = _binary_inputs(forecasts, outcomes)
    k = int(bins)
    # floor(f * bins) puts a forecast on an edge in the bin above it; rounding to 9
    # places first keeps 0.3 * 10 = 3.0000000000000004 and 0.7 * 10 from drifting.
    idx = np.clip(np.floor(np.round(f * k, 9)).astype(int), 0, k - 1)
    table = []
    for b in range(k):
        mask = idx == b
        count = int(mask.sum())
        table.append(
            {
                "lower": b / k,
                "upper": (b + 1) / k,
                "count": count,
                "mean_forecast": float(f[mask].mean()) if count else None,
                "observed_frequency": float(o[mask].mean()) if count else None,
            }
        )
    return table
