"""Named inputs of a model document, for sensitivity analysis.

Every input is named by its location in the document, in the notation the
validation messages use, so a name found in an error, a sweep and a tornado
table reads the same:

payoff tables
    ``states[<i>].probability``, ``alternatives[<i>].payoffs.<state name>``,
    ``studies[<k>].cost``, ``studies[<k>].likelihoods.<state name>.<signal name>``;
general trees
    ``nodes[<i>].branches[<j>].probability``, ``nodes[<i>].branches[<j>].cash_flow``,
    ``nodes[<i>].payoff`` (indices in document order).

Changing one probability keeps its row a distribution: the other probabilities
of the same chance node (or the other states' prior, or the other signals of the
same likelihood row) are rescaled proportionally, ``p_k' = p_k (1 - v) / S``
with ``S`` the sum of the others. When the others are all zero, the remainder
``1 - v`` is shared equally among them. (Proportional rescaling is common
practice for one-way probability sweeps; it keeps the others' ratios fixed.)
A chance node with a single branch, a table with a single state and a study with
a single signal have nothing to vary: their probability is not a parameter.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from valuation.checks import is_number
from valuation.errors import ParameterError
from valuation.flattree import CHANCE, END, FlatTree
from valuation.table import PayoffTable

__all__ = [
    "Parameter",
    "list_parameters",
    "parameter_specs",
    "find_parameter",
    "set_parameter",
    "check_values",
    "rescale_row",
    "PROBABILITY_KINDS",
    "MONEY_KINDS",
    "RESCALING_NOTE",
]

PROBABILITY_KINDS = frozenset({"probability", "likelihood"})
MONEY_KINDS = frozenset({"payoff", "cost", "cash_flow"})

RESCALING_NOTE = ("Changing one probability rescales the other probabilities of the same chance node "
                  "(or likelihood row) proportionally so that they still sum to 1; when the others are "
                  "all zero, the remainder is shared equally among them.")


@dataclass(frozen=True)
class Parameter:
    """One input of a model: its name, readable label, kind, base value and bounds.

    ``target`` says where the value lives in the parsed arrays:
    ``("prior", j)``, ``("payoff", i, j)``, ``("cost", k)``, ``("likelihood", k, j, g)`` for
    payoff tables; ``("prob", b)``, ``("cash", b)``, ``("end", i)`` for trees (``b`` the
    branch position in the tree's flat branch order, ``i`` the node index). ``row`` lists the
    positions of the sibling probabilities in the same array row (probabilities only),
    ``row_base`` their base values; ``divisor`` is the discount factor ``(1 + rate) ** time``
    a dated amount is divided by (1.0 when undated).
    """

    name: str
    label: str
    kind: str
    base: float
    low_bound: float | None
    high_bound: float | None
    target: tuple
    row: tuple[int, ...] = ()
    row_base: tuple[float, ...] = ()
    position: int = 0  # position of this parameter within ``row``
    divisor: float | None = None
    given: bool = True  # False for a branch cash flow the document leaves out (0 by default)

    def as_dict(self) -> dict:
        return {"name": self.name, "label": self.label, "kind": self.kind, "base": self.base,
                "low_bound": self.low_bound, "high_bound": self.high_bound}


def rescale_row(row_base, position: int, values) -> np.ndarray:
    """Rows (len(values) x len(row_base)) with entry ``position`` set to each value.

    The other entries are rescaled proportionally to sum to ``1 - value``; when they
    are all zero the remainder is shared equally. The reference path (a document
    changed through ``set_parameter``) and the batched path both call this function,
    so their numbers agree to the last bit.
    """
    base = np.asarray(row_base, dtype=float)
    v = np.asarray(values, dtype=float).reshape(-1)
    others = np.arange(len(base)) != position
    rest = float(sum(float(p) for k, p in enumerate(row_base) if k != position))
    out = np.empty((len(v), len(base)))
    if rest > 0:
        out[:, others] = base[None, others] * (1.0 - v)[:, None] / rest
    else:
        out[:, others] = ((1.0 - v) / int(others.sum()))[:, None]
    out[:, position] = v
    # Rounding can leave the row an ulp or two off 1; give the difference to the largest of
    # the others, so a sequential sum of the row is 1 (documents that sum a hair above 1
    # can push a derived signal probability above 1 downstream).
    largest = int(np.flatnonzero(others)[np.argmax(out[0, others])]) if others.any() else position
    if largest != position:
        total = np.zeros(len(v))
        for k in range(len(base)):  # sequential, as a reader of the document would sum
            total = total + out[:, k]
        out[:, largest] = np.maximum(out[:, largest] + (1.0 - total), 0.0)
    return out


# -- naming ------------------------------------------------------------------------------


def _table_specs(t: PayoffTable) -> list[Parameter]:
    specs: list[Parameter] = []
    prior = tuple(float(p) for p in t.prior)
    n_states = len(t.states)
    if n_states > 1:
        for j, state in enumerate(t.states):
            specs.append(Parameter(f"states[{j}].probability", f"P({state})", "probability",
                                   prior[j], 0.0, 1.0, ("prior", j), tuple(range(n_states)),
                                   prior, j))
    for i, alt in enumerate(t.alternatives):
        for j, state in enumerate(t.states):
            specs.append(Parameter(f"alternatives[{i}].payoffs.{state}", f"{alt} if {state}",
                                   "payoff", float(t.payoffs[i, j]), None, None, ("payoff", i, j)))
    for k, study in enumerate(t.studies):
        specs.append(Parameter(f"studies[{k}].cost", f"Cost of {study.name}", "cost",
                               float(study.cost), 0.0, None, ("cost", k)))
        n_sig = len(study.signals)
        if n_sig < 2:
            continue
        for j, state in enumerate(t.states):
            row = tuple(float(p) for p in study.likelihoods[j])
            for g, sig in enumerate(study.signals):
                specs.append(Parameter(
                    f"studies[{k}].likelihoods.{state}.{sig}",
                    f"P({sig} | {state}), {study.name}", "likelihood", row[g], 0.0, 1.0,
                    ("likelihood", k, j, g), tuple(range(n_sig)), row, g))
    return specs


def _divisor(rate: float | None, time: Any) -> float | None:
    # Mirrors valuation.flattree._discount: undated amounts and a zero rate are not divided.
    if not rate or not time:
        return None
    return (1.0 + rate) ** float(time)


def _tree_specs(doc: dict, tree: FlatTree) -> list[Parameter]:
    specs: list[Parameter] = []
    rate = tree.discount_rate
    for i, node in enumerate(doc["nodes"]):
        k = int(tree.kind[i])
        name = tree.names[i]
        if k == END:
            specs.append(Parameter(f"nodes[{i}].payoff", f"Payoff of {name}", "payoff",
                                   float(node["payoff"]), None, None, ("end", i),
                                   divisor=_divisor(rate, node.get("time"))))
            continue
        first, count = int(tree.first_branch[i]), int(tree.branch_count[i])
        branches = node["branches"]
        if k == CHANCE and count > 1:
            row = tuple(float(br["probability"]) for br in branches)
            for j, br in enumerate(branches):
                specs.append(Parameter(
                    f"nodes[{i}].branches[{j}].probability", f"P({br['label']}) at {name}",
                    "probability", row[j], 0.0, 1.0, ("prob", first + j),
                    tuple(range(first, first + count)), row, j))
        for j, br in enumerate(branches):
            specs.append(Parameter(
                f"nodes[{i}].branches[{j}].cash_flow", f"Cash flow of '{br['label']}' at {name}",
                "cash_flow", float(br.get("cash_flow", 0)), None, None, ("cash", first + j),
                divisor=_divisor(rate, br.get("time")), given="cash_flow" in br))
    return specs


def parameter_specs(doc: Any) -> tuple[PayoffTable | FlatTree, list[Parameter]]:
    """Parse ``doc`` (raising ModelValidationError) and name each of its inputs."""
    from valuation.evaluate import parse

    model = parse(doc)
    if isinstance(model, PayoffTable):
        return model, _table_specs(model)
    return model, _tree_specs(doc, model)


def list_parameters(doc: Any) -> list[dict]:
    """Every input of a model document that a sensitivity analysis can vary.

    Parameters
    ----------
    doc : dict
        A valid payoff table or general tree.

    Returns
    -------
    list of dict
        ``name`` (location in the document), ``label`` (readable), ``kind``
        (probability, likelihood, payoff, cost or cash_flow), ``base`` (value in the
        document), ``low_bound`` and ``high_bound`` (None where unbounded).

    Raises
    ------
    ModelValidationError
        When ``doc`` is not a valid model.

    Examples
    --------
    >>> doc = {"kind": "payoff_table", "states": [{"name": "wet", "probability": 0.4},
    ...        {"name": "dry", "probability": 0.6}],
    ...        "alternatives": [{"name": "Drill", "payoffs": {"wet": 600, "dry": -200}}]}
    >>> [p["label"] for p in list_parameters(doc)]
    ['P(wet)', 'P(dry)', 'Drill if wet', 'Drill if dry']
    """
    return [p.as_dict() for p in parameter_specs(doc)[1]]


def find_parameter(specs: list[Parameter], name: Any) -> Parameter:
    """The parameter called ``name``; ParameterError naming it when there is none."""
    for spec in specs:
        if spec.name == name:
            return spec
    raise ParameterError(f"{name}: not an input of this model (list_parameters names every input)"
                         if isinstance(name, str) else
                         f"parameter: must be a text such as 'states[0].probability', got {name!r}")


def check_values(spec: Parameter, values) -> np.ndarray:
    """``values`` as a float array; ParameterError when one is not finite or out of bounds."""
    try:
        arr = np.asarray(values, dtype=float).reshape(-1)
    except (TypeError, ValueError):
        raise ParameterError(f"{spec.name}: values must be numbers, got {values!r}") from None
    for v in arr:
        if not math.isfinite(v):
            raise ParameterError(f"{spec.name}: must be a finite number, got {v}")
        if spec.kind in PROBABILITY_KINDS and not 0.0 <= v <= 1.0:
            raise ParameterError(f"{spec.name}: must be within [0, 1], got {v:g}")
        if spec.low_bound is not None and v < spec.low_bound:
            raise ParameterError(f"{spec.name}: must be zero or more, got {v:g}")
    return arr


def set_parameter(doc: Any, name: str, value: float) -> dict:
    """A copy of ``doc`` with input ``name`` set to ``value`` (siblings rescaled).

    This is the plain reference path: the sweeps in ``valuation.sensitivity`` set
    the same values on arrays, and the tests check that both agree.

    Raises
    ------
    ModelValidationError
        When ``doc`` is not a valid model.
    ParameterError
        For an unknown name or a value out of the input's bounds.
    """
    if not is_number(value):
        raise ParameterError(f"{name}: must be a number, got {value!r}")
    _, specs = parameter_specs(doc)
    spec = find_parameter(specs, name)
    v = float(check_values(spec, [value])[0])
    out = copy.deepcopy(doc)
    target = spec.target
    kind = target[0]
    if kind == "prior":
        row = rescale_row(spec.row_base, spec.position, [v])[0]
        for j, state in enumerate(out["states"]):
            state["probability"] = float(row[j])
    elif kind == "payoff":
        _, i, j = target
        out["alternatives"][i]["payoffs"][_state_name(doc, j)] = v
    elif kind == "cost":
        out["studies"][target[1]]["cost"] = v
    elif kind == "likelihood":
        _, k, j, _g = target
        study = out["studies"][k]
        row = rescale_row(spec.row_base, spec.position, [v])[0]
        lik = study["likelihoods"][_state_name(doc, j)]
        for g, sig in enumerate(study["signals"]):
            lik[sig] = float(row[g])
    else:
        i, j = _node_branch(name)
        node = out["nodes"][i]
        if kind == "prob":
            row = rescale_row(spec.row_base, spec.position, [v])[0]
            for jj, br in enumerate(node["branches"]):
                br["probability"] = float(row[jj])
        elif kind == "cash":
            node["branches"][j]["cash_flow"] = v
        else:
            node["payoff"] = v
    return out


def _state_name(doc: dict, j: int) -> str:
    return doc["states"][j]["name"]


def _node_branch(name: str) -> tuple[int, int]:
    """Node and branch indices of a tree parameter name (branch -1 for a payoff)."""
    head = name[len("nodes["):]
    i = int(head[: head.index("]")])
    if ".branches[" not in name:
        return i, -1
    rest = name[name.index(".branches[") + len(".branches["):]
    return i, int(rest[: rest.index("]")])
