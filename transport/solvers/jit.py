"""Loading the compiled kernels (numba): one switch and one way to fall back.

numba is imported the first time a kernel is asked for, never in a single-column run.
``STRATIFLUX_JIT=0`` (or no, off, false) in the environment, or numba failing to import
or to compile, leaves the work to the array code, which gives the same numbers to
rounding.
"""
from __future__ import annotations

import os

__all__ = ["switched_on", "load"]


def switched_on() -> bool:
    """False where STRATIFLUX_JIT switches the compiled kernels off."""
    return os.environ.get("STRATIFLUX_JIT", "1").strip().lower() not in (
        "0", "no", "off", "false")


def load(state: dict, loader):
    """The kernel ``loader()`` returns (it imports, compiles or loads from numba's
    cache, and checks it on a small case), kept in ``state``; None where it is switched
    off or fails (the array code serves)."""
    if "kernel" not in state:
        state["kernel"] = None
        if switched_on():
            try:
                state["kernel"] = loader()
            except Exception:  # noqa: BLE001 - numba missing, broken or unable to
                state["kernel"] = None  # compile here: the array code serves
    return state["kernel"]
