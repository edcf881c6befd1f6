"""Compare JSON values typed and to the last bit, for the JSON reader and writer tests.

``==`` takes 1 for 1.0 and 0.0 for -0.0; a faster reader or writer must not change a
value's type or a float's bits unnoticed.
"""

from __future__ import annotations


def typed(value):
    """``value`` as nested tuples that tell int from float and -0.0 from 0.0."""
    if isinstance(value, dict):
        return ("dict", tuple((key, typed(sub)) for key, sub in value.items()))
    if isinstance(value, list):
        return ("list", tuple(typed(sub) for sub in value))
    if isinstance(value, float):
        return ("float", value.hex())
    return (type(value).__name__, value)
