"""Bayesian revision of a study's signals.

Given a prior over states and a study's likelihoods P(signal | state), the joint
probability is prior x likelihood, a signal's probability (the preposterior) the
column sum, and the posterior P(state | signal) the column divided by it
(Bayes' theorem; see e.g. Raiffa, H. & Schlaifer, R., *Applied Statistical
Decision Theory*, Harvard 1961). A signal of probability 0 has no posterior: it
is flagged rather than divided by.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Revision", "revise"]


@dataclass(frozen=True)
class Revision:
    """Joint (states x signals), signal probabilities, posteriors (NaN column where P = 0)."""

    joint: np.ndarray
    signal_probability: np.ndarray
    posterior: np.ndarray
    zero_signals: np.ndarray  # bool per signal


def revise(prior, likelihoods) -> Revision:
    """Revise ``prior`` (states) by ``likelihoods`` (states x signals).

    Examples
    --------
    A test with P(positive | condition) = 0.8 and P(positive | none) = 0.096 at a
    1% base rate (Gigerenzer & Hoffrage, Psychological Review 102(4), 1995):

    >>> r = revise([0.01, 0.99], [[0.8, 0.2], [0.096, 0.904]])
    >>> round(float(r.posterior[0, 0]), 5)
    0.07764
    """
    prior = np.asarray(prior, dtype=float)
    lik = np.asarray(likelihoods, dtype=float)
    joint = prior[:, None] * lik
    ps = joint.sum(axis=0)
    zero = ps <= 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        posterior = np.where(zero[None, :], np.nan, joint / np.where(zero, 1.0, ps)[None, :])
    return Revision(joint, ps, posterior, zero)
