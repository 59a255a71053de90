"""Speed of the Laplace engine with windows of output times sharing one hyperbolic
contour (and, in advective columns, windows sharing one parabolic contour), against one
Talbot contour per time and one parabola per retried time (the previous inversion
plan, run in the same process by planning no windows), on the inversions the tool makes
most:

* the check of a boring's fields: the five-layer stack of benchmarks/bench_site.py,
  100 log-spaced times from 1 to 100 yr, 79 depths;
* a receptor curve read at 240 log-spaced times, one depth (the Laplace evaluator of
  ``solve_column``, with the errors its tolerance needs);
* an advective column (column Peclet number 300, downward), 60 times over 3 decades.

For each: best wall time of 3 runs, transform evaluations, the ratio, the largest
difference between the two plans and the largest estimate of each, as fractions of
the largest value (the column data are invented).

Run:  python benchmarks/bench_laplace.py
"""
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))

from bench_core import _machine  # noqa: E402
from transport.model.column import Boundary, Column, Layer  # noqa: E402
from transport.solvers.checks import concentration_bounds, good_enough  # noqa: E402
from transport.solvers.laplace import contour, inversion, solve_laplace  # noqa: E402
from transport.units import YEAR  # noqa: E402

# made ground, silty sand, clay, silty sand, clay (invented, as the demo site's materials)
_STACK = [(0.8, 0.30, 6e-10, 1.4), (1.6, 0.33, 8e-10, 2.0), (0.9, 0.45, 2e-10, 6.0),
          (1.7, 0.33, 8e-10, 2.0), (1.0, 0.45, 2e-10, 6.0)]


def boring():
    layers = tuple(Layer(h, th, d, r) for h, th, d, r in _STACK)
    return Column(layers, Boundary("concentration", 1.0), Boundary("free-outflow"),
                  darcy_flux=0.08 / YEAR)


def advective():
    layers = (Layer(3.0, 0.3, 1e-9, 1.5), Layer(2.0, 0.35, 8e-10, 2.5))
    pe_per_q = sum(h / (th * d) for h, th, d, _ in [(3.0, 0.3, 1e-9, 1.5),
                                                      (2.0, 0.35, 8e-10, 2.5)])
    return Column(layers, Boundary("inlet", 1.0), Boundary("free-outflow"),
                  darcy_flux=300.0 / pe_per_q)


def _counted(fn):
    """Run fn, counting the transform evaluations (s values) of every inversion."""
    count = [0]
    real = inversion.invert_window, inversion.invert, inversion.invert_parabola

    def wrap(f):
        def counted(transform, *args):
            def tr(s):
                count[0] += np.size(s)
                return transform(s)
            return f(tr, *args)
        return counted
    inversion.invert_window, inversion.invert, inversion.invert_parabola = map(wrap, real)
    try:
        out = fn()
    finally:
        inversion.invert_window, inversion.invert, inversion.invert_parabola = real
    return out, count[0]


def _no_windows(times, n):
    return [], np.arange(np.size(times))


def _one_parabola_per_time(s0, times, limit=4.0):
    return [np.array([i]) for i in range(np.size(times))]


def _timed(fn, windows):
    plan = inversion.plan_windows, contour.plan_parabola
    if not windows:
        inversion.plan_windows = _no_windows
        contour.plan_parabola = _one_parabola_per_time
    try:
        best = np.inf
        for _ in range(3):
            t0 = time.perf_counter()
            sol, evaluations = _counted(fn)
            best = min(best, time.perf_counter() - t0)
    finally:
        inversion.plan_windows, contour.plan_parabola = plan
    return best, evaluations, sol


def compare(label, fn):
    t_old, n_old, old = _timed(fn, False)
    t_new, n_new, new = _timed(fn, True)
    scale = np.nanmax(np.abs(old.concentration))
    diff = np.nanmax(np.abs(new.concentration - old.concentration)) / scale
    print(f"{label}\n  one Talbot contour per time: {t_old * 1e3:8.1f} ms, {n_old:6d} "
          f"evaluations, estimate {np.max(old.error['concentration']) / scale:.1e}\n"
          f"  windows:                     {t_new * 1e3:8.1f} ms, {n_new:6d} "
          f"evaluations, estimate {np.max(new.error['concentration']) / scale:.1e}\n"
          f"  ratio {t_old / t_new:.1f}x faster ({n_old / max(n_new, 1):.1f}x fewer "
          f"evaluations); largest difference {diff:.1e} of the largest value")


def main():
    print(_machine())
    col = boring()
    times = np.geomspace(1.0, 100.0, 100) * YEAR
    depths = np.linspace(0.0, col.length, 79)
    compare("boring check: 5 layers, 100 times x 79 depths",
            lambda: solve_laplace(col, times, depths))
    enough = good_enough(col, concentration_bounds(col, None, times[-1]).scale, 1e-8)
    reads = np.geomspace(1.0, 100.0, 240) * YEAR
    compare("receptor curve: 240 times at 5 m, errors as a 1e-8 tolerance needs",
            lambda: solve_laplace(col, reads, [5.0], enough=enough))
    adv = advective()
    t_adv = np.geomspace(0.01, 10.0, 60) * YEAR
    compare("advective column: Peclet 300, 60 times over 3 decades x 51 depths",
            lambda: solve_laplace(adv, t_adv, np.linspace(0.0, adv.length, 51)))


if __name__ == "__main__":
    main()
