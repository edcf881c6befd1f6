"""``python -m valuation sensitivity FILE``: list inputs, one-way sweeps, tornado, two-way grid.

Modes (one of):
  --list                      every input with its kind, base value and readable label
  --parameter NAME            one-way sweep: value and best plan per point, break-even values
  --tornado                   swing in value per input between its low and high
  --two-way X Y               best plan on a grid of two inputs

Text by default (aligned tables), one JSON document with ``--json``. Exit codes:
0 success, 2 invalid input (each problem on its own line, never a traceback).
"""

from __future__ import annotations

import json
import math
import sys

from valuation.cli import print_invalid
from valuation.cli_evaluate import load_document
from valuation.errors import ValuationError
from valuation.parameters import MONEY_KINDS, RESCALING_NOTE, list_parameters
from valuation.report import CAUTION
from valuation.sensitivity import one_way, sweep_points, tornado, two_way

__all__ = ["add_parser", "run"]

_PLAN_MARKS = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789"


def add_parser(sub) -> None:
    parser = sub.add_parser(
        "sensitivity", help="sensitivity analysis: one-way sweeps, break-even values, tornado, "
                            "two-way grid",
        description="Vary the inputs of a model document. " + RESCALING_NOTE)
    parser.add_argument("file", help="model document: a payoff table or a general tree ('-' for stdin)")
    mode = parser.add_mutually_exclusive_group(required=True)
    mode.add_argument("--list", action="store_true", help="list every input that can be varied")
    mode.add_argument("--parameter", metavar="NAME",
                      help="one-way sweep of this input, e.g. 'states[0].probability'")
    mode.add_argument("--tornado", action="store_true", help="tornado table over every input")
    mode.add_argument("--two-way", nargs=2, metavar=("X", "Y"), help="grid of the best plan over two inputs")
    parser.add_argument("--low", type=float, help="sweep from this value (one-way)")
    parser.add_argument("--high", type=float, help="sweep to this value (one-way)")
    parser.add_argument("--points", type=int, default=None,
                        help="points of the sweep (default 41) or per axis of the grid (default 11)")
    parser.add_argument("--values", metavar="V1,V2,...", help="explicit sweep values (one-way)")
    parser.add_argument("--x-values", metavar="V1,V2,...", help="explicit grid values of X (two-way)")
    parser.add_argument("--y-values", metavar="V1,V2,...", help="explicit grid values of Y (two-way)")
    parser.add_argument("--swing", type=float, default=0.2,
                        help="tornado: amounts move by -/+ this fraction of their base (default 0.2)")
    parser.add_argument("--probability-step", type=float, default=0.1,
                        help="tornado: probabilities move by -/+ this (default 0.1)")
    parser.add_argument("--top", type=int, default=None, help="tornado: show the N largest swings only")
    parser.add_argument("--json", action="store_true", help="print one JSON document")
    parser.add_argument("--risk-tolerance", type=float, default=None, metavar="R",
                        help="exponential-utility risk tolerance in money (values become "
                             "certainty equivalents)")
    parser.set_defaults(handler=run)


def _numbers(option: str, text: str | None) -> list[float] | None:
    if text is None:
        return None
    try:
        values = [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise ValuationError(f"{option}: must be numbers separated by commas, got {text!r}") from None
    if not values:
        raise ValuationError(f"{option}: give at least one number")
    for v in values:
        if not math.isfinite(v):
            raise ValuationError(f"{option}: must be finite numbers, got {v}")
    return values


def _check_options(args) -> None:
    one_way_only = [("--low", args.low), ("--high", args.high), ("--values", args.values)]
    if not args.parameter:
        for option, value in one_way_only:
            if value is not None:
                raise ValuationError(f"{option}: only applies to a one-way sweep (--parameter)")
    if not args.two_way:
        for option, value in (("--x-values", args.x_values), ("--y-values", args.y_values)):
            if value is not None:
                raise ValuationError(f"{option}: only applies to a two-way grid (--two-way)")
    if args.values is not None and (args.low is not None or args.high is not None
                                    or args.points is not None):
        raise ValuationError("--values: give either explicit values or --low/--high/--points")
    if args.top is not None and args.top < 1:
        raise ValuationError(f"--top: must be 1 or more, got {args.top}")


def _compute(args, doc) -> tuple[str, object]:
    r = args.risk_tolerance
    if args.list:
        return "list", list_parameters(doc)
    if args.parameter:
        values = _numbers("--values", args.values)
        points = 41 if args.points is None else args.points
        return "one_way", one_way(doc, args.parameter, values, points=points,
                                  low=args.low, high=args.high, risk_tolerance=r)
    if args.tornado:
        rows = tornado(doc, swing=args.swing, probability_step=args.probability_step,
                       risk_tolerance=r)
        return "tornado", rows[: args.top] if args.top else rows
    px, py = args.two_way
    points = 11 if args.points is None else args.points
    xs = _numbers("--x-values", args.x_values) or sweep_points(doc, px, points=points)
    ys = _numbers("--y-values", args.y_values) or sweep_points(doc, py, points=points)
    return "two_way", two_way(doc, px, xs, py, ys, risk_tolerance=r)


def run(args) -> int:
    try:
        _check_options(args)
        doc = load_document(args.file)
        mode, result = _compute(args, doc)
    except ValuationError as exc:  # ModelValidationError included: one line a problem
        return print_invalid(exc)
    if args.json:
        json.dump({"mode": mode, "result": result}, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
        return 0
    currency = doc.get("currency", "") if isinstance(doc, dict) else ""
    render = {"list": _render_list, "one_way": _render_one_way, "tornado": _render_tornado,
              "two_way": _render_two_way}[mode]
    sys.stdout.write(render(result, currency))
    return 0


# -- text rendering ------------------------------------------------------------------------


def _table(header: list[str], rows: list[list[str]], right: set[int]) -> list[str]:
    widths = [max(len(h), *(len(r[c]) for r in rows)) if rows else len(h)
              for c, h in enumerate(header)]

    def line(cells):
        return "  ".join(c.rjust(widths[i]) if i in right else c.ljust(widths[i])
                         for i, c in enumerate(cells)).rstrip()

    return [line(header), line(["-" * w for w in widths]), *(line(r) for r in rows)]


def _num(value, kind: str) -> str:
    if value is None:
        return "-"
    if kind in MONEY_KINDS or kind == "money":
        return f"{value:,.2f}"
    return f"{value:.6g}"


def _upper_first(text: str) -> str:
    return text[:1].upper() + text[1:]


def _axis(value: float, kind: str) -> str:
    if kind in MONEY_KINDS and abs(value) >= 100:
        return f"{value:,.0f}"
    return f"{value:.4g}"


def _footer(note: str = "") -> list[str]:
    lines = [""]
    if note:
        lines.append(note)
    lines.append(CAUTION)
    return lines


def _render_list(params: list[dict], currency: str) -> str:
    rows = [[p["name"], p["kind"], _num(p["base"], p["kind"]), p["label"]] for p in params]
    lines = _table(["Input", "Kind", "Base", "Label"], rows, {2})
    lines.append("")
    lines.append(RESCALING_NOTE)
    return "\n".join(lines) + "\n"


def _criterion(result: dict, currency: str) -> str:
    what = "certainty equivalent" if result["criterion"] == "certainty_equivalent" else (
        "expected cost" if result.get("objective") == "min" else "expected value")
    return f"{what}{f' ({currency})' if currency else ''}"


def _worth(be: dict) -> str:
    """Why the plan changes: an exact crossing, or a tie rule hand-over with no crossing near."""
    if be.get("tie_rule"):
        return (f"they do not cross here: both worth {_num(be['value_from'], 'money')} to within "
                "the tie tolerance, and the tie rule prefers the first in document order")
    return f"both worth {_num(be['value_from'], 'money')}"


def _render_one_way(res: dict, currency: str) -> str:
    base = _num(res["base"], res["kind"])
    lines = [f"One-way sensitivity to {res['label']} ({res['parameter']}), base {base}", ""]
    rows = [[_num(x, res["kind"]), _num(v, "money"), plan]
            for x, v, plan in zip(res["x"], res["value"], res["plan"], strict=True)]
    lines += _table([_upper_first(res["kind"].replace("_", " ")),
                     _upper_first(_criterion(res, currency)), "Best plan"], rows, {0, 1})
    lines.append("")
    if res["break_even"]:
        lines.append("Break-even values (the best plan changes):")
        for be in res["break_even"]:
            lines.append(f"  at {_num(be['value'], res['kind'])}: '{be['from']}' -> '{be['to']}' "
                         f"({_worth(be)})")
    else:
        lines.append("No break-even value in this range: the best plan is the same throughout.")
    return "\n".join(lines + _footer(res["note"])) + "\n"


def _render_tornado(rows: list[dict], currency: str) -> str:
    table = [[r["label"], _num(r["low"], r["kind"]), _num(r["high"], r["kind"]),
              _num(r["value_low"], "money"), _num(r["value_high"], "money"), _num(r["swing"], "money")]
             for r in rows]
    unit = f" ({currency})" if currency else ""
    lines = ["Tornado: value of the whole problem as each input moves from low to high", ""]
    lines += _table(["Input", "Low", "High", f"Value at low{unit}", f"Value at high{unit}", "Swing"],
                    table, {1, 2, 3, 4, 5})
    return "\n".join(lines + _footer(RESCALING_NOTE)) + "\n"


def _render_two_way(res: dict, currency: str) -> str:
    marks = [(_PLAN_MARKS[i] if i < len(_PLAN_MARKS) else "?") for i in range(len(res["labels"]))]
    x, y = res["x"], res["y"]
    lines = [f"Best plan by {x['label']} (across) and {y['label']} (down)", ""]
    xs = [_axis(v, x["kind"]) for v in x["values"]]
    ys = [_axis(v, y["kind"]) for v in y["values"]]
    cell = max(len(s) for s in xs)
    left = max(len(s) for s in ys)
    lines.append(" " * left + " | " + " ".join(s.rjust(cell) for s in xs))
    lines.append("-" * left + "-+-" + "-" * ((cell + 1) * len(xs) - 1))
    for label, row in zip(ys, res["best"], strict=True):
        lines.append(label.rjust(left) + " | " + " ".join(marks[i].rjust(cell) for i in row))
    lines.append("")
    lines += [f"{marks[i]} = {label}" for i, label in enumerate(res["labels"])]
    return "\n".join(lines + _footer(res["note"])) + "\n"
