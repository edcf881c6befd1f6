"""Command line of the valuation core.

Exit codes: 0 success, 2 invalid input (the messages name each problem's
location), 1 an unexpected failure.
"""

from __future__ import annotations

import argparse
import sys

__all__ = ["main"]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m valuation",
        description="Value decisions under uncertainty and the studies that could inform them.",
    )
    sub = parser.add_subparsers(dest="command", required=True)
    from valuation import cli_commands

    cli_commands.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    return int(args.handler(args) or 0)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())


EXIT_INVALID = 2


def print_invalid(exc: Exception) -> int:
    """Print a refused input as ``error: location: rule`` lines; return the exit code for it.

    Every sub-command reports bad input the same way, so scripts can rely on it.
    """
    problems = getattr(exc, "problems", None)
    for line in problems if problems else [exc]:
        print(f"error: {line}", file=sys.stderr)
    return EXIT_INVALID
