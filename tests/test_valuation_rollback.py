"""The fast flat-array rollback and tree reader against plain references.

Two implementations of each (STYLE.md, habit 7): the numpy rollback against the
recursive one in ``tests/reference_rollback.py`` (exact equality: both add a
chance node's terms left to right, so even inexact floats agree bit for bit),
and the one-pass tree reader against the validating reader (same arrays).
"""

import random

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.benchmarks.bench_inputs import alternating_tree
from tests.reference_rollback import reference_rollback
from tests.strategies import trees, with_value_at
from valuation.checks import Problems
from valuation.flattree import DECISION, _build_checked, _build_fast, build_tree, rollback

SETTINGS = settings(max_examples=50, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])


def built(doc):
    problems = Problems()
    tree = build_tree(doc, problems)
    assert tree is not None, problems.as_list()
    return tree


def assert_same_as_reference(doc, risk_tolerance=None, exact=True):
    tree = built(doc)
    rb = rollback(tree, risk_tolerance=risk_tolerance)
    values, choice, tie = reference_rollback(doc, risk_tolerance)
    fast = {tree.ids[i]: float(rb.value[i]) for i in range(tree.size)}
    if exact:
        assert fast == values
    else:
        assert fast == pytest.approx(values, rel=1e-12, abs=1e-9)
    for i in np.flatnonzero(tree.kind == DECISION):
        nid = tree.ids[i]
        assert int(rb.best[i]) - int(tree.first_branch[i]) == choice[nid]
        assert bool(rb.tie[i]) == tie[nid]


def assert_same_tree(a, b):
    for name in ("title", "currency", "objective", "discount_rate", "ids", "names", "root", "labels",
                 "level_slices"):
        assert getattr(a, name) == getattr(b, name), name
    for name in ("kind", "payoff", "depth", "parent", "child", "prob", "cash", "first_branch",
                 "branch_count"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and np.array_equal(x, y), name
        if x.dtype.kind == "f":
            assert np.array_equal(np.signbit(x), np.signbit(y)), name


@st.composite
def varied_trees(draw):
    """``trees()`` with random objective, discount rate, dated branches and inexact probabilities."""
    doc = draw(trees(max_depth=4, max_branches=4))
    doc["objective"] = draw(st.sampled_from(["max", "min"]))
    if draw(st.booleans()):
        doc["discount_rate"] = draw(st.sampled_from([0.05, 0.08, 0.0]))
    for node in doc["nodes"]:
        if node["kind"] == "end" and draw(st.booleans()):
            node["time"] = draw(st.integers(0, 10))
        for br in node.get("branches", []):
            if draw(st.integers(0, 3)) == 0:
                br["time"] = draw(st.sampled_from([0, 1, 2.5]))
    return doc


@SETTINGS
@given(trees(max_depth=4, max_branches=4))
def test_fast_rollback_equals_the_recursive_reference(doc):
    assert_same_as_reference(doc)


@SETTINGS
@given(varied_trees())
def test_fast_rollback_equals_the_reference_with_dates_and_costs(doc):
    assert_same_as_reference(doc)


@SETTINGS
@given(trees(max_depth=3, max_branches=3), st.floats(min_value=50, max_value=5000))
def test_certainty_equivalents_match_the_reference(doc, r):
    assert_same_as_reference(doc, risk_tolerance=r, exact=False)


@SETTINGS
@given(varied_trees())
def test_one_pass_reader_builds_the_same_tree_as_the_validating_reader(doc):
    fast = _build_fast(doc)
    assert fast is not None
    assert_same_tree(fast, _build_checked(doc, Problems()))


def test_ten_thousand_node_tree_equals_the_reference():
    doc = alternating_tree(10_000)
    assert len(doc["nodes"]) == 10_000
    assert_same_as_reference(doc)
    assert_same_tree(_build_fast(doc), _build_checked(doc, Problems()))


def test_inexact_probabilities_and_wide_mixed_nodes_agree_bit_for_bit():
    # Widths 1 to 12 at one depth: column sums for narrow nodes, cumsum for wide ones.
    rnd = random.Random(7)
    nodes, branches = [], []
    for c in range(12):
        width = c + 1
        weights = [rnd.random() for _ in range(width)]
        probs = [w / sum(weights) for w in weights]
        probs[-1] = 1.0 - sum(probs[:-1])
        kids = []
        for j in range(width):
            nodes.append({"id": f"e{c}.{j}", "kind": "end", "payoff": rnd.uniform(-1e5, 1e5)})
            kids.append({"label": f"x{j}", "probability": probs[j], "to": f"e{c}.{j}"})
        kind = "chance" if c % 3 else "decision"
        if kind == "decision":
            kids = [{"label": k["label"], "to": k["to"], "cash_flow": rnd.uniform(-10, 10)} for k in kids]
        nodes.append({"id": f"c{c}", "kind": kind, "branches": kids})
        branches.append({"label": f"option {c}", "to": f"c{c}"})
    nodes.insert(0, {"id": "root", "kind": "decision", "branches": branches})
    doc = {"kind": "tree", "title": "mixed", "root": "root", "nodes": nodes}
    assert_same_as_reference(doc)


def test_the_one_pass_reader_declines_what_the_validating_reader_refuses():
    doc = alternating_tree(1_000)
    bad = [
        ("nodes", -1, "payoff", float("nan")), ("nodes", -1, "payoff", True),
        ("nodes", -1, "time", -1), ("nodes", -1, "branches", [{"label": "x", "to": "n1"}]),
        ("nodes", 1, "branches", 0, "probability", 0.6), ("nodes", 0, "branches", 0, "label", " "),
        ("nodes", 0, "branches", 1, "label", "b0"), ("nodes", 0, "branches", 0, "to", "n2"),
        ("nodes", 0, "branches", 0, "time", 201), ("nodes", 0, "branches", 0, "cash_flow", None),
        ("nodes", 0, "branches", 0, "probability", 0.5), ("nodes", 3, "id", "n0"),
        ("nodes", 0, "kind", "leaf"), ("nodes", 0, "branches", 0, "to", 3),
    ]
    for *path, value in bad:
        changed = with_value_at(doc, path, value)
        assert _build_fast(changed) is None, path
        assert build_tree(changed, Problems()) is None, path


def test_merged_risk_profile_groups_equal_array_split_and_average():
    # The original per-group loop, kept here as the reference for _merge_groups.
    from valuation.tree_eval import _merge_groups

    rng = np.random.default_rng(3)
    for size in (5001, 12345, 60000):
        uniq = np.sort(rng.standard_normal(size) * 1e6)
        mass = rng.random(size)
        mass[rng.integers(0, size, 50)] = 0.0
        groups = np.array_split(np.arange(size), 5000)
        means = np.array([np.average(uniq[g], weights=mass[g] + 1e-300) for g in groups])
        totals = np.array([mass[g].sum() for g in groups])
        got_means, got_totals = _merge_groups(uniq, mass, 5000)
        assert np.array_equal(got_means, means) and np.array_equal(got_totals, totals)


def test_payoff_rows_in_any_key_order_read_the_same_as_cell_by_cell():
    from valuation.evaluate import parse

    states = [f"s{j}" for j in range(6)]
    rnd = random.Random(5)
    rows = [{s: rnd.choice([rnd.randint(-9, 9), rnd.uniform(-1e6, 1e6)]) for s in states} for _ in range(4)]
    shuffled = []
    for row in rows:
        keys = list(row)
        rnd.shuffle(keys)
        shuffled.append({k: row[k] for k in keys})
    doc = {"kind": "payoff_table", "title": "order",
           "states": [{"name": s, "probability": 1 / 8 if j < 4 else 1 / 4} for j, s in enumerate(states)],
           "alternatives": [{"name": f"a{i}", "payoffs": r} for i, r in enumerate(shuffled)]}
    table = parse(doc)
    assert table.payoffs.tolist() == [[float(r[s]) for s in states] for r in rows]
