"""Whole sites: the site file (``config``), boring and log files (``logs``), SI columns
(``columns``), one boring solved and checked (``boring``), chunks (``chunks``), local or
Dask batches (``batch``), resumable runs to files (``run``), Monte Carlo (``uncertainty``).
"""
