"""Speed of the modal core, measured in one process: the eigen-solve (eigenvalues and
eigenfunction set-up) of 1000 layers x 500 modes, new and previous implementation
(tests/reference_core.py, kept verbatim) and their ratio; the same for a small
column (a typical boring); field synthesis against a bare matrix product of the same
shape; and the scaling of both with layers and modes.

Run:  python benchmarks/bench_core.py
"""
import os
import platform
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "tests"))

import reference_core as previous  # noqa: E402
from transport.model.column import Boundary, Column, Layer  # noqa: E402
from transport.solvers import modal as sp  # noqa: E402
from transport.solvers.modal.series import build_series  # noqa: E402
from transport.solvers.modal.spectrum import eigenvalues_many  # noqa: E402
from transport.units import YEAR  # noqa: E402

EIGEN_TARGET = 0.5  # s, 1000 layers x 500 modes (issue 12)
SYNTHESIS_TARGET = 1.3  # synthesis / bare product (issue 12)


def _stack(n_layers, seed=1):
    rng = np.random.default_rng(seed)
    layers = tuple(Layer(float(rng.uniform(0.01, 0.2)), float(rng.uniform(0.2, 0.5)),
                         float(10 ** rng.uniform(-11, -9)), float(rng.uniform(1, 5)))
                   for _ in range(n_layers))
    return Column(layers=layers, top=Boundary("concentration", 1.0),
                  bottom=Boundary("free-outflow"))


def _best(fn, repeat=3):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def _machine():
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            names = [ln.split(":", 1)[1].strip() for ln in fh if ln.startswith("model name")]
        cpu = names[0] if names else cpu
    except OSError:
        pass
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    return (f"machine: {cpu}, {os.cpu_count()} cores (load {load:.1f}), python "
            f"{platform.python_version()}, numpy {np.__version__}")


def _eigen_solve(module, op, n):
    lam = module.eigenvalues(op, n)
    return module.modes(op, lam)


def eigen_solve():
    """1000 layers x 500 modes, then a 5-layer boring (60 modes), new vs previous."""
    print("eigen-solve (eigenvalues + eigenfunction set-up), best of 3 (previous: 1):")
    for n_layers, n_modes in ((1000, 500), (5, 60)):
        op = sp.build_operator(_stack(n_layers))
        rep_new, rep_old = (3, 1) if n_layers > 100 else (20, 20)
        # the first call loads the compiled kernel's library (numba, its cached code)
        t_first = _best(lambda: sp.eigenvalues(op, n_modes), 1)
        t_eig = _best(lambda: sp.eigenvalues(op, n_modes), rep_new)
        t_arr = _best(lambda: eigenvalues_many([op], [n_modes], compiled=False), rep_new)
        lam = sp.eigenvalues(op, n_modes)
        t_fun = _best(lambda: sp.modes(op, lam), rep_new)
        t_new = _best(lambda: _eigen_solve(sp, op, n_modes), rep_new)
        t_old = _best(lambda: _eigen_solve(previous, op, n_modes), rep_old)
        target = f" (target < {EIGEN_TARGET} s)" if n_layers == 1000 else ""
        print(f"  {n_layers:5d} layers x {n_modes} modes: new {t_new:8.4f} s{target} "
              f"[eigenvalues {t_eig:.4f}, eigenfunctions {t_fun:.4f}], previous "
              f"{t_old:8.4f} s, previous / new {t_old / t_new:5.1f}")
        print(f"        eigenvalues: first call in the process {t_first:.4f} s (compiled "
              f"library loaded where used), array code alone {t_arr:.4f} s "
              f"({t_arr / t_eig:.1f}x the default)")


def synthesis():
    """C(z, t) of a built series (eigenfunctions at the depths cached) against the bare
    product of the eigenfunction and coefficient matrices of the same shape."""
    col = _stack(20)
    series = build_series(col, n_modes=1000)
    z = np.linspace(0, col.length, 1000)
    t = np.linspace(0.1, 50, 1000) * YEAR
    c_modes = series.fields(z)[0]
    coef = series.coefficients(t)
    fresh = iter(range(1, 100))  # new depths each time: the eigenfunctions are evaluated
    t_full = _best(lambda: series.concentration(z * (1.0 - 1e-12 * next(fresh)), t), 2)
    series.concentration(z, t)  # the fields at z are cached from here on
    t_syn = _best(lambda: series.concentration(z, t), 5)
    t_prod = _best(lambda: c_modes @ coef, 5)
    print("field synthesis C(z, t), 1000 depths x 1000 times, 1000 modes, 20 layers:")
    print(f"  with the eigenfunctions at new depths:         {t_full:.3f} s")
    print(f"  series.concentration, eigenfunctions cached:   {t_syn:.3f} s")
    print(f"  bare matrix product (1000 x 1000) @ (1000 x 1000): {t_prod:.3f} s")
    print(f"  ratio synthesis / bare product: {t_syn / t_prod:.2f} "
          f"(target <= {SYNTHESIS_TARGET})")


def _growth(label, sizes, times):
    """Print times and the growth exponent log(t2/t1)/log(n2/n1) between neighbours
    (1 = linear)."""
    print(f"  {label}")
    for i, (n, t) in enumerate(zip(sizes, times)):
        note = ""
        if i > 0:
            ratio = t / times[i - 1]
            expo = np.log(ratio) / np.log(n / sizes[i - 1])
            note = f"   x{ratio:6.2f} for x{n / sizes[i - 1]:.1f} (exponent {expo:.2f})"
        print(f"    {n:6d}: {t:8.4f} s{note}")


def _synthesis_time(col, n_modes, nz=200, nt=200):
    """C at nz depths and nt times from a built series, eigenfunctions cached."""
    series = build_series(col, n_modes=n_modes)
    z = np.linspace(0.0, col.length, nz)
    t = np.linspace(0.1, 50, nt) * YEAR
    series.concentration(z, t)
    return _best(lambda: series.concentration(z, t), repeat=3)


def scaling():
    """Eigen-solve and synthesis time versus layers (500 modes) and modes (100 layers)."""
    print("scaling (exponent 1 = linear growth):")
    layers = (10, 100, 1000)
    t_eig, t_syn = [], []
    for n_layers in layers:
        op = sp.build_operator(_stack(n_layers))
        t_eig.append(_best(lambda: _eigen_solve(sp, op, 500), 2))
        t_syn.append(_synthesis_time(_stack(n_layers), 500))
    _growth("eigen-solve, 500 modes, versus layers", layers, t_eig)
    _growth("synthesis 200 depths x 200 times, 500 modes, versus layers", layers, t_syn)
    counts = (100, 500, 2000, 5000)
    op = sp.build_operator(_stack(100))
    t_eig = [_best(lambda: _eigen_solve(sp, op, n), 2) for n in counts]
    _growth("eigen-solve, 100 layers, versus modes", counts, t_eig)
    t_syn = [_synthesis_time(_stack(100), n) for n in counts]
    _growth("synthesis 200 depths x 200 times, 100 layers, versus modes", counts, t_syn)


def main():
    print(_machine())
    eigen_solve()
    synthesis()
    scaling()


if __name__ == "__main__":
    main()
