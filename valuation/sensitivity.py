"""Sensitivity analysis: one-way sweeps with break-even values, tornado tables, two-way grids.

Each function names its inputs as ``valuation.parameters`` does and evaluates all
of its points in one batch (``valuation.batch``): the parameter values become an
extra array axis instead of a Python loop over points.

Changing one probability rescales the other probabilities of the same chance
node (or likelihood row) proportionally so they still sum to 1; when the others
are all zero the remainder is shared equally (see ``valuation.parameters``).

Break-even values are bracketed on the identity of the best plan between two
adjacent sweep points whose plans differ: each round tries ``_SECTIONS`` points
inside every bracket of the sweep in one batch and keeps the stretch where the plan
first changes (bisection with more than one point per round), down to a relative
width of ``BREAK_EVEN_RTOL``; the exact crossing is then found by Brent's method
(``_refine``). Bracketing needs no smoothness: the value of the problem is
piecewise linear in a payoff or cost and piecewise rational in a probability, and
the plan is a step function of the parameter (common practice; the "sensitivity
to probabilities" graphs of Raiffa, H., *Decision Analysis*, Addison-Wesley 1968,
ch. 3).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from valuation.batch import (
    BatchValues,
    evaluate_batch,
    first_choice_label,
    plan_label,
    plan_value,
    row_cells,
)
from valuation.checks import total_text
from valuation.errors import ParameterError
from valuation.flattree import DECISION, FlatTree, amount_total
from valuation.limits import AMOUNT_TOTAL_LIMIT, TIE_TOLERANCE
from valuation.parameters import (
    MONEY_KINDS,
    PROBABILITY_KINDS,
    RESCALING_NOTE,
    Parameter,
    check_values,
    find_parameter,
    parameter_specs,
)
from valuation.table import PayoffTable, payoff_copies
from valuation.table import amount_total as table_amount_total
from valuation.utility import check_risk_tolerance

__all__ = ["one_way", "tornado", "two_way", "sweep_points", "default_range", "BREAK_EVEN_RTOL",
           "MAX_GRID_POINTS", "MAX_POINTS", "TIE_RULE_NOTE"]

_TOLERANCE_TEXT = format(TIE_TOLERANCE, "g").replace("e-0", "e-")  # 1e-9, not 1e-09
#: Said beside break-evens marked ``tie_rule`` (web page and memo).
TIE_RULE_NOTE = ("A break-even marked (tie rule) is where two plans that do not cross there "
                 f"stay within the tie tolerance of each other ({_TOLERANCE_TEXT} of the best "
                 "value): the first in document order is preferred until the gap counts.")

#: Break-even values are bracketed until the bracket is this narrow, relative to the value.
BREAK_EVEN_RTOL = 1e-12
#: Most points tried inside each bracket per round: one batched evaluation of 15 points
#: narrows every bracket 16-fold (bisection: 2-fold), so a bracket reaches
#: ``BREAK_EVEN_RTOL`` in about 10 rounds instead of 40. That pays while a round's cost
#: is mostly fixed; a large model pays per point, so it gets fewer (see ``_sections``).
_SECTIONS = 15
#: Array cells a batched evaluation handles for about its fixed cost (measured order of
#: magnitude on a 199-node tree: ~1 ms fixed, ~40 ns per cell).
_CELLS_PER_ROUND = 50_000
#: Brent's method looks for the crossing of the two plans within this distance of the
#: hand-over (relative to the parameter's magnitude); further away, the plans are within
#: the tie tolerance of each other over the whole stretch and the hand-over is the tie
#: rule's, whatever the grid.
_CROSSING_NEAR = 1e-6
#: A one-way sweep has at most this many points; a two-way grid at most this many cells.
MAX_POINTS = 100_000
MAX_GRID_POINTS = 1_000_000
#: At most this many break-even values are reported per sweep.
MAX_BREAK_EVENS = 1_000
_MAX_ROUNDS = 60


def _money_scale(model: PayoffTable | FlatTree, specs: list[Parameter]) -> float:
    """Largest absolute amount among the model's money inputs (1.0 when all are zero)."""
    amounts = [abs(p.base) for p in specs if p.kind in MONEY_KINDS]
    top = max(amounts, default=0.0)
    return top if top > 0 else 1.0


def default_range(spec: Parameter, scale: float, *, swing: float = 0.2,
                  probability_step: float = 0.1) -> tuple[float, float]:
    """Default low and high of an input for a tornado table.

    Probabilities and likelihoods: base -/+ ``probability_step``, clipped to [0, 1].
    Amounts: base -/+ ``swing`` x |base|; an amount whose base is 0 moves by
    -/+ ``swing`` x ``scale`` instead, ``scale`` being the largest absolute amount in the
    model (a fixed fraction of the model's own money scale, since 0 has no relative
    range). Costs are not taken below 0.
    """
    if spec.kind in PROBABILITY_KINDS:
        return max(0.0, spec.base - probability_step), min(1.0, spec.base + probability_step)
    step = swing * (abs(spec.base) if spec.base != 0 else scale)
    low, high = spec.base - step, spec.base + step
    if spec.low_bound is not None:
        low = max(low, spec.low_bound)
    return low, high


def _sweep_range(spec: Parameter, scale: float) -> tuple[float, float]:
    """Default range of a one-way sweep: [0, 1] for probabilities, base -/+ |base| for amounts."""
    if spec.kind in PROBABILITY_KINDS:
        return 0.0, 1.0
    return default_range(spec, scale, swing=1.0)


def _grid(model, specs: list[Parameter], spec: Parameter, points, low, high) -> np.ndarray:
    if isinstance(points, bool) or not isinstance(points, int) or not 2 <= points <= MAX_POINTS:
        raise ParameterError(f"points: must be a whole number within [2, {MAX_POINTS}], "
                             f"got {points!r}")
    d_low, d_high = _sweep_range(spec, _money_scale(model, specs))
    lo = d_low if low is None else low
    hi = d_high if high is None else high
    check_values(spec, [lo, hi])
    if not lo < hi:
        raise ParameterError(f"{spec.name}: the low end must be below the high end, "
                             f"got {lo:g} and {hi:g}")
    if not math.isfinite(hi - lo):
        raise ParameterError(f"{spec.name}: the range from {lo:g} to {hi:g} is wider than a "
                             f"double can hold (about 1.8e308); give a narrower low and high")
    return np.linspace(lo, hi, points)


def _check_amount_limit(model: PayoffTable | FlatTree, moves: list[tuple[Parameter, np.ndarray]]) -> None:
    """Refuse input values that would take the model past ``AMOUNT_TOTAL_LIMIT``.

    A document is read only when its amounts total less than the limit, which keeps
    every value computed from them finite; a sweep puts other values in their place,
    so it is held to the same rule: each moved amount at its value farthest from zero
    replaces its base, counted as the model's reader counts it (discounted in a tree;
    a table's payoff as often as the equivalent tree repeats it).
    """
    money = [(spec, values) for spec, values in moves if spec.kind in MONEY_KINDS and len(values)]
    if not money:
        return
    if isinstance(model, PayoffTable):
        total = table_amount_total(model.payoffs, model.studies)
        copies = payoff_copies(model.studies)
    else:
        total = amount_total(model.payoff, model.cash)
        copies = 1
    for spec, values in money:
        weight = copies if spec.kind == "payoff" and isinstance(model, PayoffTable) else 1
        divisor = spec.divisor or 1.0
        peak = float(np.max(np.abs(values)))
        total += weight * (peak / divisor - abs(spec.base) / divisor)  # Python floats: inf, no error
    if total < AMOUNT_TOTAL_LIMIT:
        return
    spans = [f"from {float(np.min(v)):g} to {float(np.max(v)):g}" for _, v in money]
    if len(money) == 1:
        what = f"{money[0][0].name}: values {spans[0]}"
    else:
        what = (", ".join(spec.name for spec, _ in money) + ": values "
                + " and ".join(spans) + " respectively")
    raise ParameterError(
        f"{what} would bring the model's amounts to a total of {total_text(total)} in absolute "
        f"value; they must total less than {AMOUNT_TOTAL_LIMIT:g} so that no total or expected "
        "value overflows; give a narrower range")


def sweep_points(doc: Any, parameter: str, *, points: int = 41, low: float | None = None,
                 high: float | None = None) -> list[float]:
    """The evenly spaced points ``one_way`` uses by default (see there for the ranges)."""
    model, specs = parameter_specs(doc)
    spec = find_parameter(specs, parameter)
    return [float(v) for v in _grid(model, specs, spec, points, low, high)]


def _prepare(doc: Any, risk_tolerance):
    r = check_risk_tolerance(risk_tolerance)
    model, specs = parameter_specs(doc)
    return r, model, specs


def _labels(model, plans: np.ndarray) -> tuple[list[str], np.ndarray]:
    """Distinct plans in order of first appearance, and each row's index into them."""
    _, first_pos, inverse = np.unique(plans, axis=0, return_index=True, return_inverse=True)
    inverse = np.asarray(inverse).reshape(-1)
    order = np.argsort(first_pos, kind="stable")
    rank = np.empty(len(order), dtype=np.int64)
    rank[order] = np.arange(len(order))
    labels = [plan_label(model, plans[first_pos[k]]) for k in order]
    return labels, rank[inverse]


def _run(model, spec: Parameter, values: np.ndarray, r) -> BatchValues:
    return evaluate_batch(model, [(spec, np.arange(len(values)), values)], len(values), r)


def _break_evens(model, spec: Parameter, xs: np.ndarray, plans: np.ndarray, r) -> list[dict]:
    """Where the best plan changes between adjacent sweep points, by batched bracketing."""
    found: list[tuple[float, float, float, np.ndarray, np.ndarray]] = []
    differ = np.flatnonzero(np.any(plans[1:] != plans[:-1], axis=1))
    # Each pending interval: lo, hi, plan at lo, plan at the original right end.
    lo = xs[differ].astype(float)
    hi = xs[differ + 1].astype(float)
    left, right = lo.copy(), hi.copy()
    p_lo = plans[differ]
    p_right = plans[differ + 1]
    p_hi = p_right.copy()
    span = float(np.max(np.abs(xs))) if len(xs) else 1.0
    floor = 1e-15 * max(span, 1e-300)
    sections = _sections(model, r)
    while len(lo) and len(found) < MAX_BREAK_EVENS:
        active = np.ones(len(lo), dtype=bool)
        for _ in range(_MAX_ROUNDS):
            half_width = 0.5 * hi - 0.5 * lo  # halves: hi - lo may overflow across zero
            active &= half_width > 0.5 * np.maximum(
                BREAK_EVEN_RTOL * np.maximum(np.abs(lo), np.abs(hi)), floor)
            if not active.any():
                break
            idx = np.flatnonzero(active)
            active[idx] = _narrow(model, spec, r, idx, (lo, hi, p_lo, p_hi), sections)
        for m in range(len(lo)):
            found.append((0.5 * (lo[m] + hi[m]), left[m], right[m], p_lo[m].copy(), p_hi[m].copy()))
        # The plan just past a break-even may change again before the right end: go on from there.
        again = np.flatnonzero(np.any(p_hi != p_right, axis=1) & (hi < right))
        lo, hi, right = hi[again].copy(), right[again].copy(), right[again].copy()
        left = lo.copy()
        p_lo, p_right = p_hi[again].copy(), p_right[again].copy()
        p_hi = p_right.copy()
    found.sort(key=lambda item: item[0])
    out = []
    for x_switch, left_end, right_end, a, b in found:
        x, va, vb, crossed = _refine(model, spec, x_switch, left_end, right_end, a, b, r, floor)
        out.append({"value": x, "from": plan_label(model, a), "to": plan_label(model, b),
                    "tie_rule": not crossed,
                    "first_choice_from": first_choice_label(model, _first_of(model, a)),
                    "first_choice_to": first_choice_label(model, _first_of(model, b)),
                    "value_from": va, "value_to": vb,
                    "problem_value": max(va, vb) if model.objective == "max" else min(va, vb)})
    return out


def _sections(model, r) -> int:
    """Points per bracket per round: up to ``_SECTIONS`` while a round's cost is mostly
    fixed, down to 1 (bisection) for a model whose every point costs."""
    return int(min(_SECTIONS, max(1, _CELLS_PER_ROUND // max(row_cells(model, r), 1))))


def _narrow(model, spec: Parameter, r, idx: np.ndarray, brackets: tuple, sections: int) -> np.ndarray:
    """One round on brackets ``idx``: the first of ``sections`` inner points whose plan
    differs from the plan at ``lo`` becomes ``hi``, the point before it ``lo`` (in place
    in ``brackets``: lo, hi, plan at lo, plan at hi).

    Returns which brackets narrowed: a bracket a few ulps wide has no inner point left.
    """
    lo, hi, p_lo, p_hi = brackets
    k = len(idx)
    t = np.arange(1, sections + 1) / (sections + 1)
    # Weighted, not lo + (hi - lo) * t: the width of a bracket across zero may overflow.
    points = lo[idx, None] * (1.0 - t) + hi[idx, None] * t
    points = np.minimum(np.maximum(points, lo[idx, None]), hi[idx, None])
    plans = _run(model, spec, points.ravel(), r).plan.reshape(k, sections, -1)
    differs = np.any(plans != p_lo[idx, None, :], axis=2)
    any_differ = differs.any(axis=1)
    first = np.where(any_differ, differs.argmax(axis=1), sections)
    rows = np.arange(k)
    new_lo = np.where(first > 0, points[rows, np.maximum(first - 1, 0)], lo[idx])
    new_hi = np.where(any_differ, points[rows, np.minimum(first, sections - 1)], hi[idx])
    moved = (new_lo > lo[idx]) | (new_hi < hi[idx])
    lo[idx], hi[idx] = new_lo, new_hi
    changed = idx[any_differ]
    p_hi[changed] = plans[np.flatnonzero(any_differ), first[any_differ]]
    return moved


def _refine(model, spec: Parameter, x_switch: float, left: float, right: float, a, b, r,
            floor: float) -> tuple[float, float, float, bool]:
    """Where plans ``a`` and ``b`` are worth exactly the same, near the switch point.

    Bracketing on the best plan stops where the tie rule (the first plan in document
    order wins within ``TIE_TOLERANCE``) hands over, a hair from the true break-even.
    Each fixed plan's value is continuous in the parameter (linear in an amount, and in
    a probability under expected value), so Brent's method on their difference, in a
    bracket grown around the switch point, gives the break-even to machine precision
    (Brent, R. P., *Algorithms for Minimization without Derivatives*, 1973, ch. 4, as
    implemented by ``scipy.optimize.brentq``).

    Two plans can also hand over without crossing there: while they differ by less than
    the tie tolerance, which is relative to the best value, the tie rule prefers the
    first in document order until the values grow small enough for the gap to count.
    Then the switch point is kept, the two values differ by the tie tolerance there,
    and the last item returned (whether they cross near it) is False. They may cross
    further away (see ``_CROSSING_NEAR``); that crossing is not where the plan changes.
    """

    def values(x: float) -> tuple[float, float]:
        setting = [(spec, np.array([0]), np.array([x]))]
        return (float(plan_value(model, setting, 1, a, r)[0]),
                float(plan_value(model, setting, 1, b, r)[0]))

    def gap(x: float) -> float:
        va, vb = values(x)
        return va - vb

    step = max(abs(x_switch) * 1e-10, floor)
    # Only near the hand-over: see ``_CROSSING_NEAR``.
    near = max(abs(x_switch), floor * 1e15) * _CROSSING_NEAR
    left, right = max(left, x_switch - near), min(right, x_switch + near)
    lo, hi = _first_bracket(model, spec, r, a, b, x_switch, left, right, step)
    g_lo, g_hi = gap(lo), gap(hi)
    while g_lo * g_hi > 0 and (lo > left or hi < right):
        step = max(step, x_switch - lo, hi - x_switch) * 16.0
        lo, hi = max(left, x_switch - step), min(right, x_switch + step)
        g_lo, g_hi = gap(lo), gap(hi)
    x = None
    if g_lo == 0.0:
        x = lo
    elif g_hi == 0.0:
        x = hi
    elif g_lo * g_hi < 0:
        from scipy.optimize import brentq  # imported on use: scipy is slow to import

        try:
            x = float(brentq(gap, lo, hi, xtol=max(floor, 1e-300), rtol=4 * np.finfo(float).eps))
        except RuntimeError:  # no convergence (amounts near the limits of a double)
            x = None
    crossed = x is not None
    if not crossed:  # no crossing near the hand-over: the tie rule's, at the switch point
        x = float(x_switch)
    va, vb = values(x)
    return x, va, vb, crossed


def _first_bracket(model, spec: Parameter, r, a, b, x_switch: float, left: float, right: float,
                   step: float) -> tuple[float, float]:
    """The narrowest of the brackets ``x_switch`` ± ``step`` x 16**k (clipped to the sweep
    interval) across which plans ``a`` and ``b`` swap order, all tried in one batch.

    When none does, the widest. ``_refine`` checks the ends again one by one, so a
    batch that differed from them in the last bit could only cost a further round.
    """
    reach = max(x_switch - left, right - x_switch, step)
    ratio = reach / step
    count = math.ceil(math.log(ratio, 16.0)) if math.isfinite(ratio) else 300
    grow = 16.0 ** np.arange(min(count, 300) + 1)
    ends = np.concatenate([np.maximum(left, x_switch - step * grow),
                           np.minimum(right, x_switch + step * grow)])
    setting = [(spec, np.arange(len(ends)), ends)]
    gaps = plan_value(model, setting, len(ends), a, r) - plan_value(model, setting, len(ends), b, r)
    k = len(grow)
    across = np.flatnonzero(np.sign(gaps[:k]) * np.sign(gaps[k:]) <= 0)
    pick = int(across[0]) if len(across) else k - 1
    return float(ends[pick]), float(ends[k + pick])


def _first_of(model, key) -> int:
    """First-choice index from a plan key (see batch: table key[0]; tree: root first)."""
    if isinstance(model, PayoffTable):
        return int(key[0])
    b = int(key[0]) if len(key) else -1
    if b < 0 or model.kind[model.root] != DECISION:
        return -1
    return b - int(model.first_branch[model.root])


def _curves(model, bv: BatchValues) -> dict:
    out: dict[str, dict[str, list[float]]] = {"alternatives": {}, "options": {}}
    for key, arr in bv.curves.items():
        group, name = key.split(":", 1)
        out["alternatives" if group == "alternative" else "options"][name] = [float(v) for v in arr]
    if isinstance(model, FlatTree):
        del out["options"]
    return out


def one_way(doc: Any, parameter: str, values=None, *, points: int = 41, low: float | None = None,
            high: float | None = None, risk_tolerance: float | None = None) -> dict:
    """Sweep one input over a range; the best plan at each point and the break-even values.

    Parameters
    ----------
    doc : dict
        A valid payoff table or general tree.
    parameter : str
        Name of the input, e.g. ``"states[0].probability"`` (see ``list_parameters``).
    values : sequence of float, optional
        The points to evaluate (sorted, duplicates dropped). Default: ``points`` evenly
        spaced values from ``low`` to ``high``.
    points : int
        Number of points of the default grid (at least 2).
    low, high : float, optional
        Range of the default grid. Default [0, 1] for a probability, base -/+ |base| for an
        amount (-/+ the largest amount in the model when the base is 0; costs from 0).
    risk_tolerance : float, optional
        Exponential-utility risk tolerance; the value is then the certainty equivalent.

    Returns
    -------
    dict
        ``parameter``, ``label``, ``kind``, ``base``, ``criterion``, ``x`` (the points),
        ``value`` (value of the whole problem, studies and fees included), ``expected_value``,
        ``certainty_equivalent`` (with a risk tolerance), ``first_choice`` (table: "No study"
        or the study, None without studies; tree: the root's choice), ``best_alternative``
        (table: the best alternative without information; tree: the root's choice),
        ``plan`` (compact label per point), ``plans`` (distinct labels), ``curves``
        (``alternatives``: value of each alternative / root branch; ``options``: value of each
        study option, tables only), ``break_even`` and ``note``. Each break-even holds
        ``value`` (the parameter value where plan ``from`` hands over to plan ``to``),
        ``first_choice_from`` / ``first_choice_to``, ``value_from`` / ``value_to`` (both
        plans' values there, equal up to rounding), ``tie_rule`` (True when the two do not
        cross near the hand-over: they stay within the tie tolerance of each other, and
        the hand-over comes from the tie rule, so ``value_from`` and ``value_to`` differ
        by that tolerance)
        and ``problem_value``. Amounts in the
        objective's units (expected costs for "min").

    Raises
    ------
    ModelValidationError
        When ``doc`` is not a valid model.
    ParameterError
        Unknown parameter, values out of its bounds, a bad range or risk tolerance.

    Examples
    --------
    Oil lease, drill (+700 oil / -100 dry) or sell (+90): drilling wins above
    P(oil) = 190/800 (computed from the inputs in Hillier & Lieberman's prototype example).

    >>> doc = {"kind": "payoff_table", "states": [{"name": "oil", "probability": 0.25},
    ...        {"name": "dry", "probability": 0.75}], "alternatives": [
    ...        {"name": "Drill", "payoffs": {"oil": 700, "dry": -100}},
    ...        {"name": "Sell", "payoffs": {"oil": 90, "dry": 90}}]}
    >>> round(one_way(doc, "states[0].probability")["break_even"][0]["value"], 9)
    0.2375
    """
    r, model, specs = _prepare(doc, risk_tolerance)
    spec = find_parameter(specs, parameter)
    if values is None:
        xs = _grid(model, specs, spec, points, low, high)
    else:
        xs = np.unique(check_values(spec, values))
        if not 1 <= len(xs) <= MAX_POINTS:
            raise ParameterError(f"{spec.name}: give between 1 and {MAX_POINTS} values, got {len(xs)}")
    _check_amount_limit(model, [(spec, xs)])
    bv = _run(model, spec, xs, r)
    labels, index = _labels(model, bv.plan)
    out = {
        "parameter": spec.name, "label": spec.label, "kind": spec.kind, "base": spec.base,
        "objective": model.objective,
        "criterion": "certainty_equivalent" if r else "expected_value", "risk_tolerance": r,
        "x": [float(v) for v in xs],
        "value": [float(v) for v in bv.value],
        "expected_value": [float(v) for v in bv.expected],
    }
    if r:
        out["certainty_equivalent"] = [float(v) for v in bv.certainty_equivalent]
    out["first_choice"] = [first_choice_label(model, int(i)) for i in bv.first]
    if isinstance(model, PayoffTable):
        out["best_alternative"] = [model.alternatives[int(i)] for i in bv.alternative]
    else:
        out["best_alternative"] = list(out["first_choice"])
    out["plan"] = [labels[int(i)] for i in index]
    out["plans"] = labels
    out["curves"] = _curves(model, bv)
    out["break_even"] = _break_evens(model, spec, xs, bv.plan, r)
    out["note"] = RESCALING_NOTE if spec.kind in PROBABILITY_KINDS else ""
    return out


def tornado(doc: Any, *, swing: float = 0.2, probability_step: float = 0.1,
            ranges: dict[str, tuple[float, float]] | None = None,
            risk_tolerance: float | None = None, parameters: list[str] | None = None) -> list[dict]:
    """Swing in the value of the whole problem as each input moves from low to high.

    Parameters
    ----------
    doc : dict
        A valid payoff table or general tree.
    swing : float
        Relative range of amounts: base -/+ ``swing`` x |base| (default 20%). An amount whose
        base is 0 moves by -/+ ``swing`` x the largest absolute amount in the model.
    probability_step : float
        Probabilities and likelihoods move by -/+ this (default 0.1), clipped to [0, 1].
    ranges : dict, optional
        Explicit ``{name: (low, high)}`` for some inputs; they override the defaults.
    risk_tolerance : float, optional
        Exponential-utility risk tolerance; values are then certainty equivalents.
    parameters : list of str, optional
        Inputs to include. Default: every input of ``list_parameters`` except the cash flows
        of tree branches that the document leaves out (0 by default): with a zero base they
        would move by the model's whole money scale and crowd out the inputs actually given.

    Returns
    -------
    list of dict
        ``name``, ``label``, ``kind``, ``base``, ``low``, ``high``, ``value_low``,
        ``value_high``, ``swing`` (= |value_high - value_low|, >= 0), ``plan_low``,
        ``plan_high``, sorted by swing, largest first (document order among equals).

    Raises
    ------
    ModelValidationError, ParameterError

    Examples
    --------
    Drill (+600,000 wet / -200,000 dry) or not, P(wet) = 0.4 (inputs of the seismic
    example in Samuelson & Marks, *Managerial Economics*, ch. 13; swings computed):

    >>> doc = {"kind": "payoff_table", "states": [{"name": "wet", "probability": 0.4},
    ...        {"name": "dry", "probability": 0.6}], "alternatives": [
    ...        {"name": "Drill", "payoffs": {"wet": 600000, "dry": -200000}},
    ...        {"name": "Don't drill", "payoffs": {"wet": 0, "dry": 0}}]}
    >>> for row in tornado(doc)[:3]:
    ...     print(row["name"], round(row["swing"]))
    states[0].probability 160000
    states[1].probability 160000
    alternatives[0].payoffs.wet 96000
    """
    r, model, specs = _prepare(doc, risk_tolerance)
    for name, val in (("swing", swing), ("probability_step", probability_step)):
        if isinstance(val, bool) or not isinstance(val, int | float) or not math.isfinite(val) \
                or val <= 0:
            raise ParameterError(f"{name}: must be a positive number, got {val!r}")
    if probability_step > 1:
        raise ParameterError(f"probability_step: must be at most 1, got {probability_step}")
    if parameters is None:
        chosen = [spec for spec in specs if spec.given]
    else:
        chosen = [find_parameter(specs, n) for n in parameters]
    ranges = dict(ranges or {})
    for name in ranges:
        find_parameter(specs, name)
    scale = _money_scale(model, specs)
    lows, highs = [], []
    for spec in chosen:
        if spec.name in ranges:
            pair = ranges[spec.name]
            if not isinstance(pair, list | tuple) or len(pair) != 2:
                raise ParameterError(f"{spec.name}: a range must be (low, high), got {pair!r}")
            low, high = (float(v) for v in check_values(spec, pair))
        else:
            low, high = default_range(spec, scale, swing=swing, probability_step=probability_step)
        _check_amount_limit(model, [(spec, np.array([low, high]))])
        lows.append(low)
        highs.append(high)
    n = len(chosen)
    if not n:  # no input to move (an empty ``parameters``): no rows, rather than a batch of none
        return []
    settings = [(spec, np.array([2 * m, 2 * m + 1]), np.array([lows[m], highs[m]]))
                for m, spec in enumerate(chosen)]
    bv = evaluate_batch(model, settings, 2 * n, r)
    # Most inputs leave the plan as it is: each distinct plan is labelled once.
    labels, index = _labels(model, bv.plan)
    rows = []
    for m, spec in enumerate(chosen):
        v_low, v_high = float(bv.value[2 * m]), float(bv.value[2 * m + 1])
        rows.append({"name": spec.name, "label": spec.label, "kind": spec.kind, "base": spec.base,
                     "low": lows[m], "high": highs[m], "value_low": v_low, "value_high": v_high,
                     "swing": abs(v_high - v_low),
                     "plan_low": labels[index[2 * m]], "plan_high": labels[index[2 * m + 1]]})
    rows.sort(key=lambda row: -row["swing"])
    return rows


def two_way(doc: Any, param_x: str, values_x, param_y: str, values_y, *,
            risk_tolerance: float | None = None) -> dict:
    """Best plan and value on a grid of two inputs.

    Parameters
    ----------
    doc : dict
        A valid payoff table or general tree.
    param_x, param_y : str
        Two different inputs, not two probabilities of the same chance node or likelihood row
        (each would rescale the other).
    values_x, values_y : sequences of float
        Grid values, used in the order given.
    risk_tolerance : float, optional
        Exponential-utility risk tolerance; values are then certainty equivalents.

    Returns
    -------
    dict
        ``x``, ``y`` (parameter name, label and values), ``labels`` (distinct plans in order
        of first appearance), ``best`` (grid of indices into ``labels``, ``best[i][j]`` at
        ``y[i]``, ``x[j]``), ``value`` (value of the whole problem, same layout), ``criterion``
        and ``note``.

    Raises
    ------
    ModelValidationError, ParameterError

    Examples
    --------
    >>> doc = {"kind": "payoff_table", "states": [{"name": "oil", "probability": 0.25},
    ...        {"name": "dry", "probability": 0.75}], "alternatives": [
    ...        {"name": "Drill", "payoffs": {"oil": 700, "dry": -100}},
    ...        {"name": "Sell", "payoffs": {"oil": 90, "dry": 90}}]}
    >>> grid = two_way(doc, "states[0].probability", [0.1, 0.5],
    ...                "alternatives[1].payoffs.dry", [90, 600])
    >>> grid["labels"], grid["best"]
    (['Sell', 'Drill'], [[0, 1], [0, 0]])
    """
    r, model, specs = _prepare(doc, risk_tolerance)
    sx, sy = find_parameter(specs, param_x), find_parameter(specs, param_y)
    if sx.name == sy.name:
        raise ParameterError(f"{sy.name}: the two parameters of a two-way grid must differ")
    if sx.row and sx.row == sy.row and _same_row(sx, sy):
        raise ParameterError(f"{sy.name}: same chance node or likelihood row as {sx.name}; setting one "
                             "rescales the other, so they cannot vary independently")
    xs, ys = check_values(sx, values_x), check_values(sy, values_y)
    if not len(xs) or not len(ys) or len(xs) * len(ys) > MAX_GRID_POINTS:
        raise ParameterError(f"two-way grid: needs between 1 and {MAX_GRID_POINTS:,} points, got "
                             f"{len(xs)} x {len(ys)}")
    _check_amount_limit(model, [(sx, xs), (sy, ys)])
    nx, ny = len(xs), len(ys)
    rows = np.arange(nx * ny)
    bv = evaluate_batch(model, [(sx, rows, np.tile(xs, ny)), (sy, rows, np.repeat(ys, nx))],
                        nx * ny, r)
    labels, index = _labels(model, bv.plan)
    notes = [RESCALING_NOTE] if {sx.kind, sy.kind} & PROBABILITY_KINDS else []
    return {
        "x": {"parameter": sx.name, "label": sx.label, "kind": sx.kind,
              "values": [float(v) for v in xs]},
        "y": {"parameter": sy.name, "label": sy.label, "kind": sy.kind,
              "values": [float(v) for v in ys]},
        "criterion": "certainty_equivalent" if r else "expected_value", "risk_tolerance": r,
        "labels": labels,
        "best": index.reshape(ny, nx).tolist(),
        "value": [[float(v) for v in row] for row in bv.value.reshape(ny, nx)],
        "note": " ".join(notes),
    }


def _same_row(a: Parameter, b: Parameter) -> bool:
    """Two probabilities of the same row: same state row of a study, or same prior / node."""
    ta, tb = a.target, b.target
    if ta[0] != tb[0]:
        return False
    if ta[0] == "likelihood":
        return ta[1:3] == tb[1:3]
    return True
