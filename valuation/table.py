"""Payoff tables: validation, and evaluation straight from the matrices.

A payoff table (states, their prior, alternatives with a payoff per state, and
candidate studies with likelihoods P(signal | state)) is a special decision
tree: study or not, then the signal, then the alternative, then the state.
Evaluating it through matrices rather than by expanding the tree keeps a table
of a million payoffs within a few array operations; ``expand`` builds the tree
for inspection, and the tests check that both give the same values.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from valuation.checks import Problems, amount_total_message, describe, is_number
from valuation.limits import (
    AMOUNT_TOTAL_LIMIT,
    MAX_ALTERNATIVES,
    MAX_SIGNALS,
    MAX_STATES,
    MAX_STUDIES,
    MAX_TABLE_CELLS,
    PROBABILITY_SUM_TOLERANCE,
)

__all__ = ["Study", "PayoffTable", "parse_payoff_table", "COMMON_FIELDS", "amount_total",
           "payoff_copies"]

COMMON_FIELDS = frozenset(
    {"kind", "title", "currency", "objective", "discount_rate", "description", "notes", "metadata"}
)
_TABLE_FIELDS = COMMON_FIELDS | {"states", "alternatives", "studies"}
_STATE_FIELDS = frozenset({"name", "probability", "description"})
_ALTERNATIVE_FIELDS = frozenset({"name", "payoffs", "description"})
_STUDY_FIELDS = frozenset({"name", "cost", "signals", "likelihoods", "source", "description"})


@dataclass
class Study:
    """A study on offer: its fee and the seller's likelihoods P(signal | state)."""

    name: str
    cost: float
    signals: list[str]
    likelihoods: np.ndarray  # states x signals
    source: dict | None = None


@dataclass
class PayoffTable:
    """A validated payoff table, amounts as given (profits for max, costs for min)."""

    title: str
    currency: str
    objective: str
    discount_rate: float | None
    states: list[str]
    prior: np.ndarray
    alternatives: list[str]
    payoffs: np.ndarray  # alternatives x states
    studies: list[Study] = field(default_factory=list)

    @property
    def sign(self) -> float:
        """+1 when more is better, -1 for costs; internally we always maximise sign * amount."""
        return 1.0 if self.objective == "max" else -1.0


def check_common(doc: dict, problems: Problems) -> tuple[str, str, str, float | None]:
    """Title, currency, objective and discount rate, shared by both document kinds."""
    title = doc.get("title", "Untitled decision")
    if not problems.name("title", title, "title"):
        title = "Untitled decision"
    currency = doc.get("currency", "")
    if not isinstance(currency, str) or len(currency) > 10:
        problems.add("currency", f"must be a short text such as 'EUR', got {describe(currency)}")
        currency = ""
    objective = doc.get("objective", "max")
    if objective not in ("max", "min"):
        problems.add(
            "objective",
            f"must be 'max' (profits) or 'min' (costs), got {describe(objective)}",
        )
        objective = "max"
    rate = doc.get("discount_rate")
    if rate is not None and problems.number("discount_rate", rate):
        if not 0.0 <= rate <= 1.0:
            problems.add(
                "discount_rate",
                f"must be a yearly fraction within [0, 1] (8% is 0.08), got {rate}",
            )
            rate = None
        else:
            rate = float(rate)
    elif rate is not None:
        rate = None
    return title, currency, objective, rate


def _check_distribution(location: str, total: float, problems: Problems, what: str) -> None:
    if abs(total - 1.0) > PROBABILITY_SUM_TOLERANCE:
        problems.add(
            location,
            f"{what} must sum to 1 (within {PROBABILITY_SUM_TOLERANCE:g}), got {total:.9g}",
        )


def _unique_names(
    items: list, location: str, problems: Problems, what: str
) -> list[str | None]:
    names: list[str | None] = []
    seen: set[str] = set()
    for i, item in enumerate(items):
        if not isinstance(item, dict):
            problems.add(f"{location}[{i}]", f"must be an object, got {describe(item)}")
            names.append(None)
            continue
        name = item.get("name")
        if not problems.name(f"{location}[{i}].name", name, f"{what} name"):
            names.append(None)
            continue
        if name in seen:
            problems.add(f"{location}[{i}].name", f"duplicate {what} name {name!r}")
            names.append(None)
            continue
        seen.add(name)
        names.append(name)
    return names


def _parse_states(doc: dict, problems: Problems) -> tuple[list[str], np.ndarray]:
    raw = doc.get("states")
    if not isinstance(raw, list) or not raw:
        problems.add("states", "must be a non-empty list of {name, probability}")
        return [], np.zeros(0)
    if len(raw) > MAX_STATES:
        problems.add("states", f"at most {MAX_STATES} states are allowed, got {len(raw)}")
        return [], np.zeros(0)
    names = _unique_names(raw, "states", problems, "state")
    prior = np.zeros(len(raw))
    complete = True
    for i, item in enumerate(raw):
        if not isinstance(item, dict):
            complete = False
            continue
        problems.unknown_fields(f"states[{i}]", item, _STATE_FIELDS)
        p = item.get("probability")
        if problems.probability(f"states[{i}].probability", p):
            prior[i] = float(p)
        else:
            complete = False
    if complete:
        _check_distribution("states", float(prior.sum()), problems, "state probabilities")
    return [n if n is not None else f"#{i}" for i, n in enumerate(names)], prior


def _parse_alternatives(
    doc: dict, states: list[str], problems: Problems
) -> tuple[list[str], np.ndarray]:
    raw = doc.get("alternatives")
    if not isinstance(raw, list) or not raw:
        problems.add("alternatives", "must be a non-empty list of {name, payoffs}")
        return [], np.zeros((0, len(states)))
    if len(raw) > MAX_ALTERNATIVES:
        problems.add(
            "alternatives", f"at most {MAX_ALTERNATIVES} alternatives are allowed, got {len(raw)}"
        )
        return [], np.zeros((0, len(states)))
    if len(raw) * max(len(states), 1) > MAX_TABLE_CELLS:
        problems.add(
            "alternatives", f"the table may hold at most {MAX_TABLE_CELLS:,} payoffs"
        )
        return [], np.zeros((0, len(states)))
    names = _unique_names(raw, "alternatives", problems, "alternative")
    payoffs = np.zeros((len(raw), len(states)))
    state_index = {s: j for j, s in enumerate(states)}
    for i, item in enumerate(raw):
        if not isinstance(item, dict):
            continue
        problems.unknown_fields(f"alternatives[{i}]", item, _ALTERNATIVE_FIELDS)
        row = item.get("payoffs")
        where = f"alternatives[{i}].payoffs"
        if not isinstance(row, dict):
            problems.add(where, f"must be an object mapping each state to a payoff, got {describe(row)}")
            continue
        if _read_row_fast(row, states, state_index, payoffs[i]):
            continue
        for state, value in row.items():
            j = state_index.get(state)
            if j is None:
                problems.add(f"{where}.{state}", f"unknown state {state!r}")
            elif problems.number(f"{where}.{state}", value):
                payoffs[i, j] = float(value)
        missing = [s for s in states if s not in row]
        if missing:
            problems.add(where, f"missing payoff for state {missing[0]!r}"
                         + (f" and {len(missing) - 1} more" if len(missing) > 1 else ""))
    return [n if n is not None else f"#{i}" for i, n in enumerate(names)], payoffs


def _read_row_fast(row: dict, states: list[str], state_index: dict, out: np.ndarray) -> bool:
    """Fill ``out`` from a row that breaks no rule, in a few C loops; False to check it cell by cell.

    A row breaks no rule when it names every state once (as many keys as states, all
    known) and every payoff is a finite int or float (not a bool). Anything else goes
    through the cell-by-cell loop, which words each problem.
    """
    if len(row) != len(states):
        return False
    values = list(row.values())
    if not set(map(type, values)) <= {int, float}:
        return False
    try:
        arr = np.array(values, dtype=float)
    except OverflowError:
        return False
    if not bool(np.isfinite(arr).all()):
        return False
    keys = list(row)
    if keys == states:
        out[:] = arr
        return True
    cols = list(map(state_index.get, keys))
    if None in cols:
        return False
    out[cols] = arr
    return True


def _parse_study(
    i: int, item: dict, states: list[str], problems: Problems
) -> Study | None:
    where = f"studies[{i}]"
    problems.unknown_fields(where, item, _STUDY_FIELDS)
    ok = True
    cost = item.get("cost", 0)
    if problems.number(f"{where}.cost", cost):
        if cost < 0:
            problems.add(f"{where}.cost", f"must be zero or more, got {cost}")
            ok = False
    else:
        ok = False
    signals = item.get("signals")
    if not isinstance(signals, list) or not signals:
        problems.add(f"{where}.signals", "must be a non-empty list of signal names")
        return None
    if len(signals) > MAX_SIGNALS:
        problems.add(f"{where}.signals", f"at most {MAX_SIGNALS} signals are allowed")
        return None
    seen: set[str] = set()
    for k, sig in enumerate(signals):
        if not problems.name(f"{where}.signals[{k}]", sig, "signal"):
            ok = False
        elif sig in seen:
            problems.add(f"{where}.signals[{k}]", f"duplicate signal {sig!r}")
            ok = False
        else:
            seen.add(sig)
    if not ok:
        return None
    lik = _parse_likelihoods(f"{where}.likelihoods", item.get("likelihoods"), states, signals, problems)
    if lik is None:
        return None
    source = item.get("source")
    if source is not None and not isinstance(source, dict):
        problems.add(f"{where}.source", f"must be an object, got {describe(source)}")
        source = None
    return Study(item["name"], float(cost), list(signals), lik, source)


def _parse_likelihoods(
    where: str, raw: Any, states: list[str], signals: list[str], problems: Problems
) -> np.ndarray | None:
    if not isinstance(raw, dict):
        problems.add(where, "must map every state to {signal: P(signal | state)}")
        return None
    lik = np.zeros((len(states), len(signals)))
    state_index = {s: j for j, s in enumerate(states)}
    signal_index = {s: k for k, s in enumerate(signals)}
    ok = True
    for state, row in raw.items():
        j = state_index.get(state)
        if j is None:
            problems.add(f"{where}.{state}", f"unknown state {state!r}")
            ok = False
            continue
        if not isinstance(row, dict):
            problems.add(f"{where}.{state}", "must map each signal to a probability")
            ok = False
            continue
        row_ok = True
        for sig, p in row.items():
            k = signal_index.get(sig)
            if k is None:
                problems.add(f"{where}.{state}.{sig}", f"unknown signal {sig!r}")
                row_ok = False
            elif problems.probability(f"{where}.{state}.{sig}", p):
                lik[j, k] = float(p)
            else:
                row_ok = False
        missing = [s for s in signals if s not in row]
        if missing:
            problems.add(f"{where}.{state}", f"missing likelihood for signal {missing[0]!r}")
            row_ok = False
        if row_ok:
            _check_distribution(
                f"{where}.{state}", float(lik[j].sum()), problems, "likelihoods of a state"
            )
        ok = ok and row_ok
    for state in states:
        if state not in raw:
            problems.add(where, f"missing likelihoods for state {state!r}")
            ok = False
    return lik if ok else None


def parse_payoff_table(doc: dict, problems: Problems) -> PayoffTable | None:
    """Validate a payoff-table document, adding every problem; None when invalid."""
    problems.unknown_fields("", doc, _TABLE_FIELDS)
    title, currency, objective, rate = check_common(doc, problems)
    states, prior = _parse_states(doc, problems)
    alternatives, payoffs = _parse_alternatives(doc, states, problems) if states else ([], None)
    studies: list[Study] = []
    raw_studies = doc.get("studies", [])
    if raw_studies is None:
        raw_studies = []
    if not isinstance(raw_studies, list):
        problems.add("studies", f"must be a list (or absent), got {describe(raw_studies)}")
        raw_studies = []
    if len(raw_studies) > MAX_STUDIES:
        problems.add("studies", f"at most {MAX_STUDIES} studies are allowed")
        raw_studies = []
    names = _unique_names(raw_studies, "studies", problems, "study")
    for i, item in enumerate(raw_studies):
        if isinstance(item, dict) and states:
            study = _parse_study(i, item, states, problems)
            if study is not None and names[i] is not None:
                studies.append(study)
    if problems:
        return None
    if rate is not None:
        # A payoff table has no dates: a discount rate would change nothing, so say so.
        problems.add("discount_rate", "a payoff table has no dated cash flows; use a tree")
    _check_amount_total(payoffs, states, studies, problems)
    if problems:
        return None
    return PayoffTable(title, currency, objective, rate, states, prior, alternatives,
                       payoffs, studies)


def payoff_copies(studies: list[Study]) -> int:
    """How many times the equivalent tree holds each payoff: once without a study, and once
    under every signal of every study (see ``expand_table``)."""
    return 1 + sum(len(study.signals) for study in studies)


def amount_total(payoffs: np.ndarray, studies: list[Study]) -> float:
    """Total of the absolute amounts as the equivalent tree holds them (the limit's measure)."""
    with np.errstate(over="ignore"):
        payoff_total = float(np.abs(payoffs).sum())
    # Python floats: a product or sum beyond a double is inf, not an error.
    return payoff_total * payoff_copies(studies) + sum(study.cost for study in studies)


def _check_amount_total(payoffs: np.ndarray, states: list[str], studies: list[Study],
                        problems: Problems) -> None:
    """The ``AMOUNT_TOTAL_LIMIT`` rule, with the amounts counted as the equivalent tree has them.

    ``expand_table`` repeats every payoff once without a study and once under each signal
    of each study, and puts each study's cost on one branch. Adding them up the same way
    means a valid table expands into a tree the tree reader accepts (node details, value
    of learning, drawings), and bounds everything computed on the matrices as well.
    Called on a table without other problems, so ``studies`` holds every study in order.
    """
    total = amount_total(payoffs, studies)
    if total < AMOUNT_TOTAL_LIMIT:
        return
    copies = payoff_copies(studies)
    costs = [study.cost for study in studies]
    i, j = np.unravel_index(int(np.argmax(np.abs(payoffs))), payoffs.shape)
    where = f"alternatives[{i}].payoffs.{states[j]}"
    if costs and max(costs) > abs(float(payoffs[i, j])) * copies:
        where = f"studies[{costs.index(max(costs))}].cost"
    problems.add(where, amount_total_message(
        "payoffs (each counted once, and once more under every signal of every study, as in "
        "the equivalent tree) and study costs", total))


def table_from_arrays(**kwargs: Any) -> PayoffTable:
    """Build a PayoffTable directly (used by sensitivity sweeps, already validated)."""
    return PayoffTable(**kwargs)


def is_payoff_table(doc: Any) -> bool:
    return isinstance(doc, dict) and doc.get("kind") == "payoff_table"


def number_or_none(value: Any) -> float | None:
    return float(value) if is_number(value) else None
