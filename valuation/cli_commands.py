"""Sub-commands of ``python -m valuation``; each module adds its own parser."""

from __future__ import annotations


def register(sub) -> None:
    """Attach every sub-command to the argparse sub-parser collection."""
    for module_name in ("valuation.cli_evaluate", "valuation.cli_reliability", "valuation.cli_sensitivity"):
        try:
            module = __import__(module_name, fromlist=["add_parser"])
        except ModuleNotFoundError as exc:  # a module still being written
            if exc.name != module_name:
                raise
            continue
        module.add_parser(sub)
