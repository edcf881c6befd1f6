"""Issue 9, targets 2 and 3: the whole ``python -m valuation evaluate`` command.

Each run is a fresh process; its wall time, CPU time and peak resident memory are
compared with a process that only does ``json.load`` of the same file, measured in
the same run (medians). Tree sizes 10^3 to 10^6 show how the cost grows.
"""

import json
import statistics

import pytest

import valuation
from tests.benchmarks.bench_inputs import alternating_tree, large_table, write_json
from tests.benchmarks.conftest import (
    PYTHON,
    check_target,
    json_load_argv,
    median_process,
    median_time,
    run_process,
    write_section,
)

pytestmark = pytest.mark.benchmark
SIZES = (1_000, 10_000, 100_000, 1_000_000)


def _in_process_load(path) -> float:
    def load():
        with open(path, "rb") as handle:
            json.load(handle)
    return median_time(load, 3)[0]


def _row(label, path, runs, extra_args=()):
    load = median_process(json_load_argv(path), runs)
    cli = median_process([PYTHON, "-m", "valuation", "evaluate", *extra_args, str(path)], runs)
    return {"label": label, "load": load, "cli": cli, "inproc": _in_process_load(path)}


def _table(rows) -> list[str]:
    lines = ["| input | json.load process: wall / CPU / peak | evaluate command: wall / CPU / peak | "
             "time ratio (wall, CPU) | memory ratio |", "|---|---:|---:|---:|---:|"]
    for r in rows:
        (lw, lc, lm), (cw, cc, cm) = r["load"], r["cli"]
        lines.append(f"| {r['label']} | {lw:.2f} s / {lc:.2f} s / {lm / 1024:.0f} MiB | "
                     f"{cw:.2f} s / {cc:.2f} s / {cm / 1024:.0f} MiB | {cw / lw:.2f}, {cc / lc:.2f} | "
                     f"{cm / lm:.2f} |")
    return lines


def _startup() -> tuple[float, float]:
    rows = [run_process([PYTHON, "-m", "valuation", "--help"]) for _ in range(3)]
    return statistics.median(r[0] for r in rows), statistics.median(r[1] for r in rows)


def test_evaluate_command_on_general_trees(bench_dir):
    rows, per_node = [], []
    for n in SIZES:
        doc = alternating_tree(n)
        path = write_json(doc, bench_dir / f"tree_{n}.json")
        rows.append(_row(f"tree, {n:,} nodes", path, 5 if n < 1_000_000 else 3))
        # Growth without start-up or parsing: validate, build, roll back and report in-process.
        per_node.append(median_time(lambda doc=doc: valuation.evaluate(doc), 5 if n < 1_000_000 else 3)[1] / n)
        del doc
    big = rows[-1]
    (lw, lc, lm), (cw, cc, cm) = big["load"], big["cli"]
    met_time = check_target(cw <= 3 * lw, f"evaluate {cw:.1f} s > 3 x json.load {lw:.1f} s")
    met_mem = check_target(cm < 4 * lm, f"peak {cm} KiB >= 4 x {lm} KiB")
    start_wall, start_cpu = _startup()
    lines = [
        *_table(rows),
        "",
        f"- 1,000,000 nodes: the command takes **{cw / lw:.2f} times** the json.load process "
        f"(wall; {cc / lc:.2f} by CPU) — target 3: {met_time}; peak memory **{cm / lm:.2f} times** — "
        f"target 4: {met_mem}.",
        f"- Start-up alone (`python -m valuation --help`, imports numpy and, through the reliability "
        f"command, scipy.stats): {start_wall:.2f} s wall, {start_cpu:.2f} s CPU.",
        "- Growth: CPU time per node of `valuation.evaluate(doc)` in-process (no start-up, no "
        "json.load), 10^3 / 10^4 / 10^5 / 10^6: "
        + " / ".join(f"{x * 1e6:.1f} µs" for x in per_node)
        + f" (10^6 vs 10^5: {per_node[3] / per_node[2]:.2f}; 1.0 = linear).",
        f"- json.load inside one process, 10^6 nodes: {big['inproc']:.2f} s.",
    ]
    write_section("Evaluate command, general trees (target 2)",
                  "python -m pytest tests/benchmarks/test_bench_cli.py -m benchmark -s -k trees",
                  "\n".join(lines))


def test_evaluate_json_command_on_a_million_payoff_table(bench_dir):
    path = write_json(large_table(), bench_dir / "table_1000x1000.json")
    row = _row("payoff table, 1,000 states x 1,000 alternatives, one 10-signal study", path, 5,
               ("--json",))
    (lw, lc, _), (cw, cc, _) = row["load"], row["cli"]
    start_wall, start_cpu = _startup()
    met_time = check_target(cw <= 3 * lw, f"evaluate --json {cw:.2f} s > 3 x json.load {lw:.2f} s")
    lines = [
        *_table([row]),
        "",
        f"- The command takes **{cw / lw:.2f} times** the json.load process (wall; {cc / lc:.2f} by "
        f"CPU) — target 3: {met_time}.",
        f"- Start-up alone (`python -m valuation --help`): {start_wall:.2f} s wall, {start_cpu:.2f} s CPU; "
        f"net of start-up the command takes {(cw - start_wall) / lw:.2f} times the json.load process.",
        f"- json.load inside one process: {row['inproc']:.2f} s.",
    ]
    write_section("Evaluate --json command, payoff table (target 3)",
                  "python -m pytest tests/benchmarks/test_bench_cli.py -m benchmark -s -k table",
                  "\n".join(lines))
