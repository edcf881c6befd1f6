"""Valuation core: decision trees, Bayesian revision, value of information, risk.

Pure Python and numpy; it never imports Django, so it can run in a notebook, a
batch job or the command line (``python -m valuation``).
"""
