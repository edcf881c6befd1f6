"""``python -m valuation reliability RECORDS.csv --claimed CLAIMED.json [...]``.

Calibrates a study source's claimed accuracy from its track record and scores
the record: the figures of :func:`valuation.reliability.calibrate`, the scores
of :func:`valuation.reliability.score_record` with the *claimed* likelihoods
(how well the source's own claim forecast what came true), and with
``--window N`` the same over rolling windows of the latest N records.

Exit codes: 0 success; 2 invalid input (each problem on stderr, prefixed with
the file it concerns and located by line); 1 an unexpected failure (one line
on stderr, never a traceback).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
from typing import Any

from valuation.cli import EXIT_INVALID, print_invalid
from valuation.errors import ModelValidationError, Problem, ValuationError
from valuation.records_csv import read_records_csv
from valuation.reliability import (
    DEFAULT_PRIOR_STRENGTH,
    MAX_PRIOR_STRENGTH,
    MAX_ROLLING_CELLS,
    MAX_ROLLING_WINDOWS,
    calibrate,
    least_step,
    replace_non_finite,
    rolling,
    score_record,
    validate_likelihoods,
)

__all__ = ["add_parser", "run", "load_json_mapping", "render_text"]

EXIT_FAILURE = 1
#: A claim table or prior is a few lines; anything larger than this is a wrong file.
MAX_JSON_BYTES = 1024 * 1024

CAUTION = (
    "These figures are model outputs resting on stated assumptions (the claim counts as "
    "prior-strength past studies per state; records are taken as independent and "
    "representative). Weigh them with professional judgment and your organisation's own rules."
)


def add_parser(sub) -> None:
    parser = sub.add_parser(
        "reliability",
        help="calibrate a study source's claimed accuracy from its track record",
        description=(
            "Compare a study source's claimed accuracy with its record of past studies. "
            "RECORDS.csv needs the columns date (YYYY-MM-DD), signal and state; "
            "CLAIMED.json maps state -> signal -> claimed P(signal | state)."
        ),
    )
    parser.add_argument("records", metavar="RECORDS.csv", help="the source's past studies")
    parser.add_argument(
        "--claimed", required=True, metavar="CLAIMED.json", help="claimed P(signal | state)"
    )
    parser.add_argument(
        "--prior-strength",
        type=float,
        default=DEFAULT_PRIOR_STRENGTH,
        metavar="N",
        help=f"past studies per state the claim is worth (default {DEFAULT_PRIOR_STRENGTH:g}, "
        f"at most {MAX_PRIOR_STRENGTH:,.0f})",
    )
    parser.add_argument(
        "--window", type=int, default=None, metavar="N", help="also report rolling windows of N records"
    )
    parser.add_argument(
        "--step",
        type=int,
        default=None,
        metavar="K",
        help="with --window: records between window ends (default 1, or the least step "
        f"that keeps to {MAX_ROLLING_WINDOWS:,} windows and {MAX_ROLLING_CELLS:,} cells, "
        "windows x states x signals)",
    )
    parser.add_argument(
        "--prior",
        default=None,
        metavar="PRIOR.json",
        help="prior over states (state -> probability) for the scores; default uniform",
    )
    parser.add_argument("--json", action="store_true", help="print one JSON document")
    parser.set_defaults(handler=run)


def _reject_constant(name: str):
    raise ValueError(f"{name} is not a number JSON allows")


def _no_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"key {key!r} appears more than once in one object")
        out[key] = value
    return out


def load_json_mapping(path: str) -> Any:
    """Read a small JSON file strictly: size-limited, no NaN/Infinity, no duplicate keys."""
    try:
        if os.stat(path).st_size > MAX_JSON_BYTES:
            raise ValuationError(f"{path}: larger than {MAX_JSON_BYTES:,} bytes; not a claim table")
        with open(path, "rb") as handle:
            return json.loads(
                handle.read(MAX_JSON_BYTES + 1),
                parse_constant=_reject_constant,
                object_pairs_hook=_no_duplicate_keys,
            )
    except OSError as exc:
        raise ValuationError(f"{path}: cannot read the file ({exc.strerror})") from None
    except json.JSONDecodeError as exc:
        raise ValuationError(f"{path}: line {exc.lineno} column {exc.colno}: {exc.msg}") from None
    except (ValueError, RecursionError) as exc:
        raise ValuationError(f"{path}: {exc}") from None


def _with_file(path: str, problems: list[Problem]) -> list[str]:
    return [f"{path}: {p}" for p in problems]


def _compute(args) -> dict[str, Any]:
    strength = args.prior_strength
    if not math.isfinite(strength) or strength <= 0:
        raise ValuationError(f"--prior-strength: must be a number greater than 0, got {strength:g}")
    if strength > MAX_PRIOR_STRENGTH:
        # The API's limit too (decisions.services.sources takes it from the core).
        raise ValuationError(
            f"--prior-strength: must be at most {MAX_PRIOR_STRENGTH:,.0f} past studies "
            f"(a claim worth more is a typing mistake), got {strength:.10g}"
        )
    if args.window is not None and args.window < 1:
        raise ValuationError(f"--window: must be a whole number of at least 1, got {args.window}")
    if args.step is not None and args.step < 1:
        raise ValuationError(f"--step: must be a whole number of at least 1, got {args.step}")
    claimed = load_json_mapping(args.claimed)
    try:
        states, signals, _ = validate_likelihoods(claimed, every_signal_possible=True)
    except ModelValidationError as exc:
        raise _FileProblems(_with_file(args.claimed, exc.problems)) from None
    prior = load_json_mapping(args.prior) if args.prior else None
    try:
        records = read_records_csv(args.records, known_states=states, known_signals=signals)
    except ModelValidationError as exc:
        raise _FileProblems(_with_file(args.records, exc.problems)) from None
    except OSError as exc:
        raise ValuationError(f"{args.records}: cannot read the file ({exc.strerror})") from None
    calibration = calibrate(claimed, records, prior_strength=strength)
    try:
        scores = score_record(claimed, prior, records, per_record=False)
    except ModelValidationError as exc:
        # Prior problems belong to the prior file; the rest (a signal the claim gives
        # probability 0 everywhere) to the records, counted from 0 in file order.
        raise _FileProblems(
            [
                f"{args.prior if p.location.startswith('prior') else args.records}: {p}"
                for p in exc.problems
            ]
        ) from None
    result: dict[str, Any] = {
        "caution": CAUTION,
        "prior_strength": calibration["prior_strength"],
        "interval": calibration["interval"],
        "records": calibration["records"],
        "states": calibration["states"],
        "calibrated_likelihoods": calibration["calibrated_likelihoods"],
        "floored_cells": calibration["floored_cells"],
        "scored_with": "claimed likelihoods",
        "prior_source": scores["prior_source"],
        "hit_rate": scores["hit_rate"],
        "brier": scores["brier"],
        "brier_convention": scores["brier_convention"],
        "log_score": scores["log_score"],
    }
    if args.window is not None:
        step = args.step
        if step is None:  # the least step that keeps the report within the rolling limits
            step = least_step(len(records), args.window, len(states) * len(signals))
        try:
            result["rolling"] = rolling(
                claimed, records, window=args.window, step=step, prior_strength=strength, prior=prior
            )
        except ModelValidationError as exc:
            if [p.location for p in exc.problems] != ["step"]:
                raise
            raise ValuationError("--step: " + exc.problems[0].message) from None
    result, note = replace_non_finite(result)
    if note:
        result["non_finite"] = note
    return result


class _FileProblems(ValuationError):
    def __init__(self, lines: list[str]):
        self.lines = lines
        super().__init__("; ".join(lines))


def run(args: argparse.Namespace) -> int:
    try:
        result = _compute(args)
    except _FileProblems as exc:
        for line in exc.lines:
            print(f"error: {line}", file=sys.stderr)
        return EXIT_INVALID
    except ValuationError as exc:  # ModelValidationError included: one line a problem
        return print_invalid(exc)
    except Exception as exc:  # never a traceback to a user (house rule); exit 1
        print(f"error: unexpected failure ({type(exc).__name__}: {exc})", file=sys.stderr)
        return EXIT_FAILURE
    if args.json:
        # One line, no indent: the C encoder is used only without indent (10x faster on
        # long rolling reports); pipe through `python -m json.tool` to read it.
        sys.stdout.write(json.dumps(result, allow_nan=False, ensure_ascii=False) + "\n")
    else:
        sys.stdout.write(render_text(result))
    return 0


def _num(value: Any, digits: int = 3) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def _table(header: list[str], rows: list[list[str]], right: set[int]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  ".join(
            c.rjust(w) if i in right else c.ljust(w)
            for i, (c, w) in enumerate(zip(cells, widths, strict=True))
        ).rstrip()

    return [line(header), line(["-" * w for w in widths]), *(line(r) for r in rows)]


def render_text(result: dict[str, Any]) -> str:
    """A readable report of the ``reliability`` command's result, tables aligned."""
    out = [
        f"Study source reliability: {result['records']} records, claim worth "
        f"{result['prior_strength']:g} past studies per state",
        "",
    ]
    rows = []
    for state, block in result["states"].items():
        for signal, cell in block["signals"].items():
            low, high = cell["interval_90"]
            rows.append(
                [
                    state,
                    signal,
                    _num(cell["claimed"]),
                    _num(cell["observed"]),
                    str(cell["count"]),
                    _num(cell["posterior_mean"]),
                    f"[{_num(low)}, {_num(high)}]",
                ]
            )
    header = ["state", "signal", "claimed", "observed", "count", "posterior", "90% interval"]
    out += _table(header, rows, right={2, 3, 4, 5})
    out += ["", "Probability that the true accuracy is below the claim:"]
    for state, block in result["states"].items():
        out.append(
            f"  P({block['most_likely_signal']} | {state}) below "
            f"{_num(block['signals'][block['most_likely_signal']]['claimed'], 2)}: "
            f"{_num(block['prob_below_claim'])}  ({block['records']} records)"
        )
    out += [
        "",
        f"Record scored with the claimed likelihoods, prior over states {result['prior_source']}:",
        f"  hit rate {_num(result['hit_rate'])}   Brier {_num(result['brier'])}   "
        f"mean log score {_num(result['log_score'])}",
        f"  Brier convention: {result['brier_convention']}",
    ]
    if "non_finite" in result:
        out.append("  Figures shown as - are not finite: " + result["non_finite"]["meaning"] + ".")
    if result.get("floored_cells"):
        cells = ", ".join(f"{s} / {k}" for s, k in result["floored_cells"])
        out.append(f"  Claimed 0 read as almost never (prior pseudo-count 0.01): {cells}")
    if "rolling" in result:
        roll = result["rolling"]
        every = f", every {roll['step']} records" if roll["step"] > 1 else ""
        out += ["", f"Rolling windows of {roll['window']} records{every} (oldest first):"]
        if not roll["windows"]:
            out.append(f"  fewer records ({roll['records']}) than the window")
        else:
            states = list(result["states"])
            header = ["from", "to", "hit rate", "Brier", *[f"P(below) {s}" for s in states]]
            rows = [
                [
                    w["start_date"],
                    w["end_date"],
                    _num(w["hit_rate"]),
                    _num(w["brier"]),
                    *[_num(w["states"][s]["prob_below_claim"]) for s in states],
                ]
                for w in roll["windows"]
            ]
            out += ["  " + r for r in _table(header, rows, right=set(range(2, len(header))))]
    out += ["", CAUTION, ""]
    return "\n".join(out)
