"""Seeded generators of large model documents for the benchmarks (invented data).

Kept out of test collection (the name does not start with ``test_``); the
benchmark files import it, and ``python tests/benchmarks/bench_inputs.py``
writes the inputs to a folder for measuring the command line by hand.
"""

from __future__ import annotations

import json
import random
import sys
from pathlib import Path

__all__ = ["alternating_tree", "large_table", "write_json"]


def alternating_tree(n_nodes: int, seed: int = 1, branches: int = 3) -> dict:
    """A general tree of exactly ``n_nodes`` nodes (when ``(n_nodes - 1) % branches == 0``).

    Breadth-first: decision nodes at even depths, chance nodes at odd depths, each
    with ``branches`` branches, until the node budget is spent; the remaining
    frontier nodes are end nodes. Decision branches carry a cash flow, chance
    branches the probabilities 0.5, 0.25, 0.25 (exact binary fractions), end
    nodes an integer payoff, so the rollback is exact in floating point.
    """
    rnd = random.Random(seed)
    probs = [0.5, 0.25, 0.25] if branches == 3 else [1.0 / branches] * branches
    nodes: list[dict] = []
    frontier = [0]
    depth_of = {0: 0}
    created = 1
    while frontier:
        nxt = []
        for nid in frontier:
            d = depth_of.pop(nid)
            if created + branches > n_nodes:
                nodes.append({"id": f"n{nid}", "kind": "end", "payoff": rnd.randint(-1000, 5000)})
                continue
            decision = d % 2 == 0
            brs = []
            for j in range(branches):
                cid = created
                created += 1
                depth_of[cid] = d + 1
                br = {"label": f"b{j}", "to": f"n{cid}"}
                if decision:
                    br["cash_flow"] = -rnd.randint(0, 300)
                else:
                    br["probability"] = probs[j]
                brs.append(br)
                nxt.append(cid)
            nodes.append({"id": f"n{nid}", "kind": "decision" if decision else "chance",
                          "branches": brs})
        frontier = nxt
    return {"kind": "tree", "title": "benchmark tree (invented)", "currency": "EUR",
            "objective": "max", "root": "n0", "nodes": nodes}


def large_table(n_states: int = 1000, n_alternatives: int = 1000, n_signals: int = 10,
                seed: int = 2) -> dict:
    """A payoff table with one study; prior and likelihoods are dyadic so rows sum to 1 exactly."""
    rnd = random.Random(seed)
    states = [f"state {j}" for j in range(n_states)]
    signals = [f"signal {k}" for k in range(n_signals)]
    prior = _dyadic(rnd, n_states)
    likelihoods = {s: dict(zip(signals, _dyadic(rnd, n_signals), strict=True)) for s in states}
    return {
        "kind": "payoff_table", "title": "benchmark table (invented)", "currency": "EUR",
        "objective": "max",
        "states": [{"name": s, "probability": p} for s, p in zip(states, prior, strict=True)],
        "alternatives": [{"name": f"alternative {i}",
                          "payoffs": {s: round(rnd.uniform(-1e6, 1e6), 2) for s in states}}
                         for i in range(n_alternatives)],
        "studies": [{"name": "survey (invented)", "cost": 1000, "signals": signals,
                     "likelihoods": likelihoods}],
    }


def _dyadic(rnd: random.Random, n: int) -> list[float]:
    """``n`` positive multiples of 2**-30 summing to exactly 1."""
    unit = 2 ** 30
    weights = [rnd.randint(1, 1000) for _ in range(n)]
    total = sum(weights)
    parts = [w * unit // total for w in weights]
    parts[0] += unit - sum(parts)
    return [p / unit for p in parts]


def write_json(doc: dict, path: Path) -> Path:
    with open(path, "w") as handle:
        json.dump(doc, handle, separators=(",", ":"))
    return path


if __name__ == "__main__":
    out = Path(sys.argv[1] if len(sys.argv) > 1 else ".")
    out.mkdir(parents=True, exist_ok=True)
    for n in (1_000, 10_000, 100_000, 1_000_000):
        write_json(alternating_tree(n), out / f"tree_{n}.json")
    write_json(large_table(), out / "table_1000x1000.json")
