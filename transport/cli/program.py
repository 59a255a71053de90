"""The ``stratiflux`` console script (``[project.scripts]`` in pyproject.toml).

It runs the command group :data:`transport.cli.main.main` as click's own entry point
would, with less work for Python's cyclic garbage collector at start-up and at exit:

* while the command line's modules load, the collector is off: loading allocates some
  hundred thousand objects (functions, classes, constants of numpy, scipy, pint and
  stratiflux) that live until the process ends, and a collection every few thousand
  allocations would traverse them again and again;
* those objects are then moved to the collector's permanent generation
  (:func:`gc.freeze`, Python >= 3.7), and so is everything alive when the command
  returns, so that neither the collections during the run nor those of the
  interpreter's exit traverse them. Together about a tenth of the demo run's wall time
  (benchmarks/bench_startup.py).

Reference counting frees objects as usual. Only objects in reference cycles that are
still alive when the command returns are left to the operating system at exit instead
of the collector (their ``__del__``, if any, is not called; every file a command
writes is closed and renamed into place before it returns). Tests drive the group
itself (``main``), which does none of this.
"""
from __future__ import annotations

import gc

__all__ = ["run"]


def run():
    """Run ``stratiflux`` with the process's arguments; exits with the command's status."""
    gc.disable()
    try:
        # imported here so that the collector is off while the modules load
        from transport.cli.main import main
    finally:
        gc.enable()
    gc.freeze()
    try:
        return main()
    finally:
        gc.freeze()
