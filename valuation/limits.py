"""Documented limits and tolerances of the valuation core.

They exist so that a mistyped or hostile document is refused with a message
instead of exhausting memory, and so that every user knows how close to 1 a
set of probabilities must sum.
"""

__all__ = [
    "PROBABILITY_SUM_TOLERANCE",
    "TIE_TOLERANCE",
    "MAX_TREE_NODES",
    "MAX_TREE_DEPTH",
    "MAX_STATES",
    "MAX_ALTERNATIVES",
    "MAX_TABLE_CELLS",
    "MAX_SIGNALS",
    "MAX_SOURCE_STATES",
    "MAX_STUDIES",
    "MAX_PROBLEMS_REPORTED",
    "MAX_NAME_LENGTH",
    "MAX_TIME_YEARS",
    "DETAIL_NODE_LIMIT",
    "EXPAND_NODE_LIMIT",
    "INFORMATION_NODE_LIMIT",
    "AMOUNT_TOTAL_LIMIT",
]

#: Probabilities of one chance node, or one likelihood row, must sum to 1 within this.
PROBABILITY_SUM_TOLERANCE = 1e-6
#: Two values within this relative distance are a tie; the first in document order wins.
TIE_TOLERANCE = 1e-9
#: A general tree may hold at most this many nodes (decision, chance and end).
MAX_TREE_NODES = 2_000_000
#: ... and be at most this many levels deep.
MAX_TREE_DEPTH = 500
#: Payoff tables: at most this many states, alternatives, cells, signals per study, studies.
MAX_STATES = 5_000
MAX_ALTERNATIVES = 5_000
MAX_TABLE_CELLS = 5_000_000
MAX_SIGNALS = 100
MAX_STUDIES = 20
#: A study source's claimed table (valuation.reliability) holds at most this many states, and
#: at most MAX_SIGNALS signals. Every read of a source calibrates every cell, once overall and
#: once per rolling window, so the work and the answer grow with states x signals: a
#: 5,000-state claim took 48 s and 4.9 GB per read. A source judged on more than a hundred
#: distinct outcomes is not a study a payoff table can use (its studies are meant to be read
#: by people), so 100 leaves ample room; 100 x 100 = 10,000 cells at most.
MAX_SOURCE_STATES = 100
#: Validation stops listing problems after this many (and says how many more).
MAX_PROBLEMS_REPORTED = 200
#: Names, labels and ids are at most this many characters.
MAX_NAME_LENGTH = 200
#: A cash flow may be dated at most this many years ahead.
MAX_TIME_YEARS = 200
#: Per-node details (value, best branch, pruned branches) are reported up to this tree size.
DETAIL_NODE_LIMIT = 20_000
#: A payoff table is expanded into an inspectable tree only up to this many nodes.
EXPAND_NODE_LIMIT = 200_000
#: Value of learning each chance node, and EVPI of a general tree, up to this tree size.
INFORMATION_NODE_LIMIT = 5_000
#: The amounts of a model (a tree's payoffs and cash flows after discounting; a payoff
#: table's study costs and its payoffs, counted as often as its equivalent tree holds them)
#: must total less than this in absolute value. The total bounds every path total and
#: expected value, a certainty equivalent (it lies between the worst outcome and the
#: expected value, to within PROBABILITY_SUM_TOLERANCE: it is taken over the probabilities
#: scaled to sum to 1, see ``utility.log_expectation``, the expected value over them as
#: given) and the difference of two of them (EVPI, EVSI, a swing), so none of them
#: overflows a double (IEEE 754: largest finite value about 1.8e308, Python's
#: ``sys.float_info.max``) and every number of a result document is finite, as JSON (the
#: API, ``--json``) requires. The margin of over 1e8 leaves room for rounding, for
#: probabilities that sum to 1 only within PROBABILITY_SUM_TOLERANCE, and for a risk
#: tolerance times a logarithm. Sensitivity sweeps are held to the same total.
AMOUNT_TOTAL_LIMIT = 1e300
