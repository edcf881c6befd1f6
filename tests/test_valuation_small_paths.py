"""The list routines for small trees (valuation.small_tree) against the array routines.

Two implementations of each computation (STYLE.md, habit 7): a small tree is evaluated
on Python lists, a large one on numpy arrays, and both must give the same result
document to the last bit, so the two are run here on the same generated trees and
compared as JSON text (which tells 0.0 from -0.0). The trees are made to be awkward
for floating point: inexact probabilities (thirds, tenths), probabilities of 0 and
-0.0, amounts of 0 and -0.0 (a cost of 0 is -0.0 inside), many equal values, cash
flows, discounting, both objectives, with and without a risk tolerance.

The orders of operations restated from numpy are checked against numpy itself (the
source: numpy's ``np.add.reduceat``, ``np.maximum.reduceat``, ``np.minimum.reduceat``
as installed); a helper that summed left to right instead fails them (the inputs are
chosen so that the two orders differ, and the test says so).
"""

import dataclasses
import json
import random
import struct
from contextlib import contextmanager
from unittest.mock import patch

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import valuation
from tests.benchmarks.bench_inputs import alternating_tree
from tests.strategies import with_value_at
from valuation import small_tree
from valuation.checks import Problems
from valuation.evaluate import parse
from valuation.flattree import CHANCE, _build_fast, _walk_arrays, _walk_lists, build_tree, rollback
from valuation.tree_eval import clairvoyant_value, learning_values, risk_profile
from valuation.utility import certainty_equivalent

SETTINGS = settings(max_examples=120, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])

PROBABILITY_SETS = {  # weights of a chance node's branches, by count; inexact on purpose
    1: [[1.0], [1.0]],
    2: [[0.5, 0.5], [0.1, 0.9], [1 / 3, 2 / 3], [0.0, 1.0], [1.0, -0.0]],
    3: [[1 / 3, 1 / 3, 1 / 3], [0.1, 0.2, 0.7], [0.5, 0.25, 0.25], [0.0, 0.3, 0.7], [0.7, 0.0, 0.3]],
}


def _probabilities(draw, k):
    if k in PROBABILITY_SETS and draw(st.booleans()):
        return draw(st.sampled_from(PROBABILITY_SETS[k]))
    weights = draw(st.lists(st.sampled_from([0, 1, 1, 2, 3, 7]), min_size=k, max_size=k))
    if sum(weights) == 0:
        weights[-1] = 1
    total = sum(weights)
    return [w / total for w in weights]


@st.composite
def awkward_trees(draw, max_nodes=40, max_branches=8):
    """A general tree with the floating-point traps listed in the module docstring."""
    amounts = st.sampled_from([0, 0.0, -0.0, 1, -1, 2, 5, 0.1, 0.2, 0.3, -0.7, 1e-9, 1234.5, -50])
    nodes, budget = [], [draw(st.integers(1, max_nodes))]

    def build(depth):
        nid = f"n{budget[0]}"  # the budget only goes down: distinct
        budget[0] -= 1
        if depth >= 6 or budget[0] <= 0 or (depth > 0 and draw(st.integers(0, 3)) == 0):
            node = {"id": nid, "kind": "end", "payoff": draw(amounts)}
            if draw(st.integers(0, 5)) == 0:
                node["time"] = draw(st.sampled_from([0, 1, 2.5]))
            nodes.append(node)
            return nid
        kind = draw(st.sampled_from(["decision", "chance"]))
        k = draw(st.integers(1, max_branches))
        probs = _probabilities(draw, k) if kind == "chance" else None
        branches = []
        for j in range(k):
            branch = {"label": f"b{j}", "to": build(depth + 1)}
            cash = draw(st.sampled_from([None, None, 0, -0.0, 25, -50, 0.1]))
            if cash is not None:
                branch["cash_flow"] = cash
            if probs is not None:
                branch["probability"] = probs[j]
            if draw(st.integers(0, 6)) == 0:
                branch["time"] = 1
            branches.append(branch)
        nodes.append({"id": nid, "kind": kind, "branches": branches})
        return nid

    root = build(0)
    renamed = {n["id"]: f"x{i}" for i, n in enumerate(nodes)}  # ids in document order
    for n in nodes:
        n["id"] = renamed[n["id"]]
        for br in n.get("branches", []):
            br["to"] = renamed[br["to"]]
    root = renamed[root]
    order = draw(st.sampled_from(["as built", "reversed", "shuffled"]))
    if order == "reversed":
        nodes.reverse()
    elif order == "shuffled":
        random.Random(draw(st.integers(0, 1000))).shuffle(nodes)
    doc = {"kind": "tree", "title": "generated", "root": root, "nodes": nodes,
           "objective": draw(st.sampled_from(["max", "min"]))}
    if draw(st.booleans()):
        doc["discount_rate"] = draw(st.sampled_from([0.05, 0.1]))
    return doc


# 1e-320 overflows the exponents to -inf, 1e-3 takes the log of the plain sum, 1e20 the
# log1p of the expm1 sum (utility.log_expectation): both sides must agree in each.
tolerances = st.sampled_from([None, None, 80.0, 5000.0, 1e-3, 1e20, 1e-320])


@contextmanager
def arrays_only():
    """Every step on the array routines (no tree is small enough for the lists)."""
    with patch.object(small_tree, "LIST_PATH_NODES", 0):
        yield


@contextmanager
def lists_everywhere():
    """Every step the lists can take on the lists, whatever the tree's size."""
    with (patch.object(small_tree, "LIST_PATH_NODES", 10**9),
          patch.object(small_tree, "LIST_CLAIRVOYANT_NODES", 10**9)):
        yield


def as_text(result: dict) -> str:
    return json.dumps(result, sort_keys=True)


def assert_same_document(doc, r):
    with lists_everywhere():
        on_lists = as_text(valuation.evaluate(doc, risk_tolerance=r))
    with arrays_only():
        on_arrays = as_text(valuation.evaluate(doc, risk_tolerance=r))
    assert on_lists == on_arrays


def bits(values) -> list[bytes]:
    return [struct.pack("<d", float(v)) for v in values]


def built(doc):
    tree = build_tree(doc, Problems())
    assert tree is not None
    return tree


# -- the whole result document -----------------------------------------------------------


@SETTINGS
@given(awkward_trees(), tolerances)
def test_evaluate_on_lists_and_on_arrays_give_the_same_document(doc, r):
    assert small_tree.as_lists(built(doc), r) is not None  # the lists really are used
    assert_same_document(doc, r)


@SETTINGS
@given(awkward_trees(max_nodes=12, max_branches=3), st.sampled_from([None, 80.0]))
def test_few_branches_and_many_ties_give_the_same_document(doc, r):
    assert_same_document(doc, r)


@pytest.mark.parametrize("size", [1, 4, 13, 40, 199, 364, 1000])
def test_benchmark_shaped_trees_give_the_same_document(size):
    doc = alternating_tree(size, seed=7)
    for r in (None, 1000.0):
        assert_same_document(doc, r)


def _seeded_tree(seed: int, n: int) -> dict:
    """A larger random tree (seeded): inexact probabilities, repeated amounts, any order."""
    rnd = random.Random(seed)
    kind, children = {0: "end"}, {}
    frontier, count = [0], 1
    while count < n and frontier:
        i = frontier.pop(rnd.randrange(len(frontier)))
        k = min(rnd.choice([1, 2, 3, 3, 4, 8]), n - count)
        kind[i] = rnd.choice(["decision", "chance"])
        children[i] = list(range(count, count + k))
        for c in children[i]:
            kind[c] = "end"
        frontier += children[i]
        count += k
    nodes = []
    for i in range(count):
        if kind[i] == "end":
            nodes.append({"id": f"x{i}", "kind": "end", "payoff": rnd.choice([0, -0.0, 1, 2.5, 0.1, -3])})
            continue
        weights = [rnd.choice([0, 1, 2, 3]) for _ in children[i]]
        weights[-1] += 1
        branches = [{"label": f"b{j}", "to": f"x{c}", "cash_flow": rnd.choice([0, 0.1, -2])}
                    for j, c in enumerate(children[i])]
        if kind[i] == "chance":
            for br, w in zip(branches, weights, strict=True):
                br["probability"] = w / sum(weights)
        nodes.append({"id": f"x{i}", "kind": kind[i], "branches": branches})
    rnd.shuffle(nodes)
    return {"kind": "tree", "root": "x0", "nodes": nodes, "objective": rnd.choice(["max", "min"])}


@pytest.mark.parametrize(("seed", "size"), [(1, 300), (2, 800), (3, 2000)])
def test_larger_random_trees_give_the_same_document(seed, size):
    doc = _seeded_tree(seed, size)
    for r in (None, 300.0):
        assert_same_document(doc, r)


def _chain(levels: int) -> dict:
    """A deep narrow tree: chance and decision nodes in turn, each with a way out to an end."""
    nodes = []
    for i in range(levels):
        go = {"label": "go", "to": f"n{i + 1}", "cash_flow": (i % 7) - 3.3}
        stop = {"label": "stop", "to": f"e{i}"}
        if i % 2 == 0:
            go["probability"], stop["probability"] = 0.7, 0.3
        nodes.append({"id": f"n{i}", "kind": "chance" if i % 2 == 0 else "decision",
                      "branches": [go, stop]})
        nodes.append({"id": f"e{i}", "kind": "end", "payoff": i * 0.1 if i % 2 == 0 else -i})
    nodes.append({"id": f"n{levels}", "kind": "end", "payoff": 1000})
    return {"kind": "tree", "root": "n0", "nodes": nodes}


def test_a_deep_chain_gives_the_same_document_with_its_clairvoyant_value_on_lists():
    doc = _chain(300)  # 601 nodes on 300 levels
    assert small_tree.clairvoyant_on_lists(small_tree.as_lists(built(doc), None))
    assert not small_tree.clairvoyant_on_lists(small_tree.as_lists(parse(alternating_tree(601)), None))
    assert_same_document(doc, None)
    assert_same_document(doc, 100.0)


# -- each routine against its array twin ----------------------------------------------------


@SETTINGS
@given(awkward_trees(), tolerances)
def test_rollback_on_lists_equals_rollback_on_arrays(doc, r):
    tree = built(doc)
    arrays = rollback(tree, risk_tolerance=r)
    lists = small_tree.rollback(small_tree.as_lists(tree, r), r)
    assert bits(lists.value) == bits(arrays.value)
    assert lists.best == arrays.best.tolist()
    assert lists.tie == arrays.tie.tolist()
    if r:
        assert bits(lists.expected) == bits(arrays.expected)


@SETTINGS
@given(awkward_trees(), tolerances)
def test_clairvoyant_value_and_risk_profile_on_lists_equal_the_arrays(doc, r):
    tree = built(doc)
    lt = small_tree.as_lists(tree, r)
    assert bits([small_tree.clairvoyant_value(lt, r)]) == bits([clairvoyant_value(tree, r)])
    rb = rollback(tree, risk_tolerance=r)
    lists_rb = small_tree.rollback(lt, r)
    assert as_text(small_tree.risk_profile(lt, lists_rb)) == as_text(risk_profile(tree, rb))


@SETTINGS
@given(awkward_trees(), tolerances)
def test_learning_values_on_lists_equal_the_batched_rollback(doc, r):
    tree = built(doc)
    lt = small_tree.as_lists(tree, r)
    rb = rollback(tree, risk_tolerance=r)
    nodes = [int(i) for i in np.flatnonzero(tree.kind == CHANCE)]
    arrays = learning_values(tree, nodes, rb, r)
    lists = small_tree.learning_values(lt, nodes, float(rb.value[tree.root]), r)
    assert bits(lists) == bits(arrays)


@SETTINGS
@given(awkward_trees())
def test_depth_walk_on_lists_equals_the_walk_on_arrays(doc):
    tree = built(doc)
    args = (tree.size, tree.root, tree.child, tree.first_branch, tree.branch_count)
    assert _walk_lists(*args).tolist() == _walk_arrays(*args).tolist()


# -- numpy's orders of operations, restated --------------------------------------------------

ZERO_HEAVY = [0.0, -0.0, 1.0, 0.1, 0.2, 0.3, 1e-16, -1e-16, 3.0, 1 / 3]


@pytest.mark.parametrize("length", range(1, small_tree.MAX_LIST_WIDTH + 1))
def test_run_sum_is_numpy_reduceat(length):
    rnd = random.Random(length)
    for _ in range(300):
        run = [rnd.choice(ZERO_HEAVY) for _ in range(length)]
        expected = np.add.reduceat(np.array(run), [0])[0]  # source: numpy itself
        assert bits([small_tree._reduceat_sum(run)]) == bits([expected])


def test_run_sum_differs_from_a_left_to_right_sum_where_numpy_does():
    """The check above has teeth: on this run the left-to-right sum is wrong."""
    run = [1.0, 1e-16, 1e-16]  # numpy: 1.0 + (1e-16 + 1e-16)
    assert small_tree._reduceat_sum(run) == np.add.reduceat(np.array(run), [0])[0]
    assert (run[0] + run[1]) + run[2] != small_tree._reduceat_sum(run)


@pytest.mark.parametrize("length", range(1, small_tree.MAX_LIST_WIDTH + 1))
def test_max_and_min_keep_the_zero_numpy_keeps(length):
    # Source: numpy itself, in the forms the array code uses. The rollback folds
    # np.maximum column by column (flattree._segment_best); the rest reduce.
    rnd = random.Random(length)
    for _ in range(300):
        run = [rnd.choice([0.0, -0.0, 1.0, -1.0, np.inf]) for _ in range(length)]
        array = np.array([run])
        fold = array[:, 0].copy()
        for j in range(1, length):
            np.maximum(fold, array[:, j], out=fold)
        assert bits([small_tree._max(run)]) == bits(fold)
        assert bits([small_tree._max_reduced(run)]) == \
            bits(np.maximum.reduceat(array, [0], axis=1)[0])
        assert bits([small_tree._min(run)]) == bits(np.minimum.reduceat(array, [0], axis=1)[0])


def test_a_zero_maximum_by_reduction_can_differ_from_the_fold():
    """Why ``_max_reduced`` exists: where numpy's reduction regroups a run (seen with
    AVX2 on this run of 5), the fold and the reduction keep different zeros, and each
    helper must give its own twin's. Elsewhere (seen with AVX-512) the two agree."""
    run = [0.0, 0.0, 0.0, -0.0, -1.0]
    fold = np.array([run[0]])
    for v in run[1:]:
        np.maximum(fold, np.array([v]), out=fold)
    reduced = np.maximum.reduceat(np.array([run]), [0], axis=1)[0]
    if bits(fold) == bits(reduced):
        pytest.skip("numpy's maximum reduction keeps the fold's zero on this processor")
    assert bits([small_tree._max(run)]) == bits(fold)
    assert bits([small_tree._max_reduced(run)]) == bits(reduced)
    assert bits([small_tree._max(run)]) != bits([small_tree._max_reduced(run)])


@pytest.mark.parametrize("length", range(1, 9))
def test_short_sums_are_numpy_sum(length):
    rnd = random.Random(100 + length)
    for _ in range(300):
        run = [rnd.choice(ZERO_HEAVY) for _ in range(length)]
        assert bits([small_tree._sum_of_at_most_8(run)]) == bits([np.sum(np.array(run))])  # source: numpy


def test_eight_terms_are_summed_in_pairs_as_numpy_sums_them():
    """The check above has teeth: numpy sums 8 terms in pairs of pairs, not left to right."""
    run = [1.0, 1e-16, 1e-16, 1e-16, 1e-16, 1e-16, 1e-16, 1e-16]
    left_to_right = 0.0
    for x in run:
        left_to_right += x
    assert small_tree._sum_of_at_most_8(run) == np.sum(np.array(run)) != left_to_right


@pytest.mark.parametrize("r", [0.5, 80.0, 5000.0])
def test_batched_certainty_equivalents_equal_the_utility_function(r):
    rnd = random.Random(int(r))
    lotteries = []
    for _ in range(200):
        n = rnd.randint(1, 8)
        values = [rnd.choice([0.0, -0.0, 1.0, -3.5, 0.1, 250.0, rnd.uniform(-500, 500)]) for _ in range(n)]
        probs = [rnd.choice([0.0, 0.1, 0.2, 1 / 3, 0.5]) for _ in range(n)]
        probs[rnd.randrange(n)] = 0.25  # one outcome at least is possible
        lotteries.append((values, probs))
    batched = small_tree._certainty_equivalents(lotteries, r)
    one_by_one = [certainty_equivalent(v, p, r) for v, p in lotteries]
    assert bits(batched) == bits(one_by_one)


def test_numpy_keeps_the_later_of_two_equal_zeros():
    """Why ``_max`` is not Python's ``max`` (which keeps the first)."""
    assert bits([np.maximum(-0.0, 0.0), np.maximum(0.0, -0.0)]) == bits([0.0, -0.0])
    assert bits([small_tree._max([-0.0, 0.0])]) == bits([0.0])
    assert bits([max(-0.0, 0.0)]) == bits([-0.0])


def _clairvoyant_on_both(doc):
    tree = built(doc)
    on_lists = small_tree.clairvoyant_value(small_tree.as_lists(tree, None))
    assert bits([on_lists]) == bits([clairvoyant_value(tree)])
    assert_same_document(doc, None)
    return on_lists


def test_three_equal_outcomes_are_merged_as_numpy_merges_them():
    """A chance node whose three branches all lead to 5: one outcome of probability
    0.1 + (0.2 + 0.7) = 0.9999999999999999 as numpy adds it; left to right it is 1.0."""
    doc = {"kind": "tree", "root": "c", "nodes": [
        {"id": "c", "kind": "chance", "branches": [
            {"label": f"b{j}", "to": f"e{j}", "probability": p} for j, p in enumerate([0.1, 0.2, 0.7])]},
        *({"id": f"e{j}", "kind": "end", "payoff": 5} for j in range(3))]}
    assert _clairvoyant_on_both(doc) == 5 * 0.9999999999999999 != 5 * ((0.1 + 0.2) + 0.7)


# -- what the lists leave to the arrays --------------------------------------------------------


def test_trees_the_lists_decline():
    tree = parse(alternating_tree(40, seed=1))
    assert small_tree.as_lists(tree, None) is not None
    assert small_tree.as_lists(tree, 1e301) is None  # a risk tolerance beyond the bound
    wide = {"kind": "tree", "root": "d", "nodes": [
        {"id": "d", "kind": "decision",
         "branches": [{"label": f"b{j}", "to": f"e{j}"} for j in range(9)]},
        *({"id": f"e{j}", "kind": "end", "payoff": j} for j in range(9))]}
    assert small_tree.as_lists(parse(wide), None) is None  # numpy regroups runs of 9
    # Amounts totalling 8e299, just within AMOUNT_TOTAL_LIMIT: a document may hold them.
    near = {"kind": "tree", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [{"label": "a", "to": "e"},
                                                     {"label": "b", "to": "f"}]},
        {"id": "e", "kind": "end", "payoff": 4e299}, {"id": "f", "kind": "end", "payoff": -4e299}]}
    assert small_tree.as_lists(parse(near), None) is not None
    # Twice as much no document may hold (flattree refuses it); the lists refuse it too.
    over = dataclasses.replace(parse(near), payoff=parse(near).payoff * 2)
    assert small_tree.as_lists(over, None) is None  # sums could overflow
    assert_same_document(wide, None)
    assert_same_document(near, 5.0)


@pytest.mark.parametrize("size", [7, 40])
def test_the_one_pass_reader_declines_on_small_trees_what_the_validating_reader_refuses(size):
    """The small-input shortcuts of the one-pass reader (one set for repeated labels,
    Python's len for name lengths) refuse what the validating reader refuses."""
    doc = alternating_tree(size, seed=3)
    bad = [("nodes", 0, "branches", 1, "label", "b0"), ("nodes", 0, "branches", 0, "label", ""),
           ("nodes", 0, "branches", 0, "label", "x" * 201), ("nodes", 0, "branches", 2, "label", "\t")]
    for *path, value in bad:
        changed = with_value_at(doc, path, value)
        assert _build_fast(changed) is None, path
        assert build_tree(changed, Problems()) is None, path
    for new_id in ("y" * 201, ""):  # node n1 renamed, and the branch to it too
        changed = json.loads(json.dumps(doc).replace('"n1"', json.dumps(new_id)))
        assert _build_fast(changed) is None, new_id
        assert build_tree(changed, Problems()) is None, new_id
    assert _build_fast(doc) is not None
    assert _build_fast(json.loads(json.dumps(doc).replace('"n1"', json.dumps("y" * 200)))) is not None


# -- the production thresholds, unpatched --------------------------------------------------


def _complete_ternary_tree(n: int, seed: int) -> dict:
    """Exactly ``n`` nodes: node i's children are 3i+1 .. 3i+3; decision and chance levels
    alternate; leaves pay seeded amounts; chance branches share 1 equally."""
    rnd = random.Random(seed)
    nodes = []
    for i in range(n):
        children = [c for c in range(3 * i + 1, 3 * i + 4) if c < n]
        level = _ternary_level(i)
        if not children:
            nodes.append({"id": f"n{i}", "kind": "end", "payoff": rnd.randint(-50, 150)})
            continue
        chance = level % 2 == 1
        nodes.append({"id": f"n{i}", "kind": "chance" if chance else "decision", "branches": [
            {"label": f"b{j}", "to": f"n{c}", "cash_flow": rnd.randint(-5, 5),
             **({"probability": 1 / len(children)} if chance else {})}
            for j, c in enumerate(children)]})
    return {"kind": "tree", "title": "threshold tree (invented)", "root": "n0", "nodes": nodes}


def _ternary_level(i: int) -> int:
    level, first = 0, 0
    while i > first + 3 ** level - 1:
        first += 3 ** level
        level += 1
    return level


@pytest.mark.parametrize("size", [
    small_tree.LIST_CLAIRVOYANT_NODES - 1, small_tree.LIST_CLAIRVOYANT_NODES,
    small_tree.LIST_CLAIRVOYANT_NODES + 1, small_tree.LIST_PATH_NODES,
    small_tree.LIST_PATH_NODES + 1])
def test_default_thresholds_give_the_array_document_on_either_side(size):
    # The other tests patch the limits; here the shipped ones decide the path, and the
    # document must still be the array path's on both sides of each limit.
    doc = _complete_ternary_tree(size, seed=11)
    tree = built(doc)
    assert tree.size == size
    lists = small_tree.as_lists(tree, None)
    assert (lists is not None) == (size <= small_tree.LIST_PATH_NODES)
    if size == small_tree.LIST_PATH_NODES:  # 9 levels: the clairvoyant value on the arrays
        assert not small_tree.clairvoyant_on_lists(lists)
    for r in (None, 1000.0):
        default = as_text(valuation.evaluate(doc, risk_tolerance=r))
        with arrays_only():
            assert default == as_text(valuation.evaluate(doc, risk_tolerance=r))
