"""Time the memo of a 199-node tree in one fresh process: evaluate, sensitivity, PDF build.

Run by ``test_bench_memo.py`` in a child process (twice: with reportlab's C accelerator
``rl_accel`` and with it hidden, so reportlab falls back to pure Python), printing one
JSON object. Not collected by pytest (the name does not start with ``test_``)::

    SECRET_KEY=... python -m tests.benchmarks.memo_timing [--no-accel] [--profile N]

The data are assembled as ``decisions.services.memo.memo_data`` does, minus the few
database reads (decision, version, sign-offs): the stored results are
``valuation.evaluate``'s and the sensitivity section is ``sensitivity_data``'s.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import json
import pstats
import sys
import time

from tests.benchmarks.conftest import median_time


def _median(fn, runs: int) -> dict:
    wall, cpu = median_time(fn, runs)
    return {"wall": wall, "cpu": cpu}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--no-accel", action="store_true", help="hide reportlab's _rl_accel")
    parser.add_argument("--runs", type=int, default=7)
    parser.add_argument("--nodes", type=int, default=199)
    parser.add_argument("--profile", type=int, default=0, help="print the N costliest functions")
    args = parser.parse_args()
    if args.no_accel:
        sys.modules["_rl_accel"] = None  # import fails: reportlab uses its Python fallbacks
    import django

    django.setup()
    import reportlab.lib.rl_accel as accel

    import valuation
    from decisions.memo.build import build_memo
    from decisions.services.memo import sensitivity_data
    from tests.benchmarks.bench_inputs import alternating_tree

    doc = alternating_tree(args.nodes, seed=7)
    doc["title"] = "Memo benchmark tree (invented)"
    c0, w0 = time.process_time(), time.perf_counter()
    results = valuation.evaluate(doc)
    sens = sensitivity_data(doc, results)
    first_sens = {"wall": time.perf_counter() - w0, "cpu": time.process_time() - c0}
    data = {"decision": {"id": 1, "title": doc["title"], "team": "Benchmark team (invented)",
                         "status": "draft"},
            "version": {"number": 1, "content_sha256": "0" * 64, "results_sha256": "1" * 64,
                        "created_at": "2026-12-01 20:00:00 UTC", "author": "bench-analyst",
                        "change_note": "benchmark"},
            "generated_at": "2026-12-01 20:00:00 UTC", "document": doc, "results": results,
            "sensitivity": sens, "signoffs": [], "strategy": None}
    pdf = build_memo(data)  # warm-up: fonts, imports
    out = {
        "accelerated": "fp_str" in accel._c_funcs,
        "nodes": len(doc["nodes"]),
        "pdf_bytes": len(pdf),
        "first_evaluate_and_sensitivity": first_sens,
        "evaluate": _median(lambda: valuation.evaluate(doc), args.runs),
        "sensitivity": _median(lambda: sensitivity_data(doc, results), args.runs),
        "build": _median(lambda: build_memo(data), args.runs),
    }
    if args.profile:
        prof = cProfile.Profile()
        prof.runcall(build_memo, data)
        text = io.StringIO()
        pstats.Stats(prof, stream=text).sort_stats("tottime").print_stats(args.profile)
        out["profile_build"] = text.getvalue()
        prof = cProfile.Profile()
        prof.runcall(sensitivity_data, doc, results)
        text = io.StringIO()
        pstats.Stats(prof, stream=text).sort_stats("cumulative").print_stats(args.profile)
        out["profile_sensitivity"] = text.getvalue()
    print(json.dumps(out))


if __name__ == "__main__":
    main()
