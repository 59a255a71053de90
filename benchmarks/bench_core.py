"""Speed of the modal core: eigen-solve vs layer count, field synthesis vs a bare
matrix product of the same shape, and the scaling of both with layers and modes,
measured in one process.

Run:  python benchmarks/bench_core.py
"""
import platform
import time

import numpy as np

from transport.solvers import modal as sp
from transport.model.column import Boundary, Column, Layer
from transport.solvers.modal.series import build_series

YEAR = 365.25 * 86400.0


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


def main():
    print(f"machine: {platform.processor() or platform.machine()}, python "
          f"{platform.python_version()}, numpy {np.__version__}")
    print("eigen-solve, first 500 modes (eigenvalues + eigenfunctions):")
    for n_layers in (10, 100, 1000):
        op = sp.build_operator(_stack(n_layers))
        t_eig = _best(lambda: sp.eigenvalues(op, 500), repeat=1 if n_layers > 100 else 3)
        lam = sp.eigenvalues(op, 500)
        t_fun = _best(lambda: sp.modes(op, lam), repeat=1 if n_layers > 100 else 3)
        print(f"  {n_layers:5d} layers: eigenvalues {t_eig:7.3f} s, eigenfunctions {t_fun:7.3f} s")
    col = _stack(20)
    series = build_series(col, n_modes=1000)
    z = np.linspace(0, col.length, 1000)
    t = np.linspace(0.1, 50, 1000) * YEAR
    c_modes, _, c_lift, _ = series.fields(z)
    coef = series.coefficients(t)
    t_syn = _best(lambda: series.concentration(z, t))
    t_prod = _best(lambda: c_modes @ coef)
    t_syn_only = _best(lambda: (c_modes @ series.coefficients(t)).T
                       + c_lift @ series.signal_values(t))
    print("field synthesis, 1000 depths x 1000 times, 1000 modes:")
    print(f"  full (eigenfunctions at depths + coefficients + product): {t_syn:.3f} s")
    print(f"  synthesis given the eigenfunction matrix:                 {t_syn_only:.3f} s")
    print(f"  bare numpy matrix product of the same shape:              {t_prod:.3f} s")
    print(f"  ratio synthesis / bare product: {t_syn_only / t_prod:.2f} (target <= 2)")
    scaling()


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
        print(f"    {n:6d}: {t:8.3f} s{note}")


def _synthesis_time(col, n_modes, nz=200, nt=200):
    """Eigenfunctions at nz depths, coefficients at nt times and their product."""
    series = build_series(col, n_modes=n_modes)
    z = np.linspace(0.0, col.length, nz)
    t = np.linspace(0.1, 50, nt) * YEAR
    return _best(lambda: series.concentration(z, t), repeat=2)


def scaling():
    """Eigen-solve and synthesis time versus layers (500 modes) and modes (100 layers)."""
    print("scaling (exponent 1 = linear growth):")
    layers = (10, 100, 1000)
    t_eig, t_syn = [], []
    for n_layers in layers:
        op = sp.build_operator(_stack(n_layers))
        t_eig.append(_best(lambda: sp.eigenvalues(op, 500), repeat=1 if n_layers > 100 else 2))
        t_syn.append(_synthesis_time(_stack(n_layers), 500))
    _growth("eigenvalues, 500 modes, versus layers", layers, t_eig)
    _growth("synthesis 200 depths x 200 times, 500 modes, versus layers", layers, t_syn)
    counts = (100, 500, 2000, 5000)
    op = sp.build_operator(_stack(100))
    t_eig = [_best(lambda: sp.eigenvalues(op, n), repeat=1) for n in counts]
    _growth("eigenvalues, 100 layers, versus modes", counts, t_eig)
    t_syn = [_synthesis_time(_stack(100), n) for n in counts]
    _growth("synthesis 200 depths x 200 times, 100 layers, versus modes", counts, t_syn)


if __name__ == "__main__":
    main()
