"""``python -m valuation evaluate FILE [--json] [--risk-tolerance R]``."""

from __future__ import annotations

import gc
import json
import math
import sys

from valuation.cli import print_invalid
from valuation.errors import ValuationError
from valuation.evaluate import evaluate
from valuation.report import render_text

__all__ = ["add_parser", "run", "load_document"]



def add_parser(sub) -> None:
    parser = sub.add_parser("evaluate", help="evaluate a model document (JSON)")
    parser.add_argument("file", help="model document: a payoff table or a general tree ('-' for stdin)")
    parser.add_argument("--json", action="store_true", help="print the result document as JSON")
    parser.add_argument("--risk-tolerance", type=float, default=None, metavar="R",
                        help="exponential-utility risk tolerance in money")
    parser.set_defaults(handler=run)


def _reject_constant(name: str):
    raise ValueError(f"{name} is not a number JSON allows")


def load_document(path: str):
    """Read a JSON document, refusing NaN/Infinity and reporting the line of a syntax error."""
    try:
        if path == "-":
            return json.load(sys.stdin, parse_constant=_reject_constant)
        with open(path, "rb") as handle:
            return json.load(handle, parse_constant=_reject_constant)
    except OSError as exc:
        raise ValuationError(f"{path}: cannot read the file ({exc.strerror})") from None
    except json.JSONDecodeError as exc:
        raise ValuationError(f"{path}: line {exc.lineno} column {exc.colno}: {exc.msg}") from None
    except (ValueError, RecursionError) as exc:
        raise ValuationError(f"{path}: {exc}") from None


def run(args) -> int:
    try:
        if args.risk_tolerance is not None and not math.isfinite(args.risk_tolerance):
            raise ValuationError("--risk-tolerance: must be a positive finite number")
        document = load_document(args.file)
        # The parsed document lives until the process exits; freezing it spares the
        # collector full passes over what may be millions of objects (this process
        # runs one command on one thread, so the global switch is safe here).
        gc.freeze()
        result = evaluate(document, risk_tolerance=args.risk_tolerance)
    except ValuationError as exc:  # ModelValidationError included: one line a problem
        return print_invalid(exc)
    if args.json:
        json.dump(result, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        sys.stdout.write(render_text(result))
    return 0
