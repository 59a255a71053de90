"""Accuracy against cost of the three engines, and the early-time hand-over, measured in
one process against the high-precision mpmath reference (tests/reference.py).

Run:  python benchmarks/bench_engines.py
      python benchmarks/bench_engines.py thin   (1,000 invented layers of 1 mm: the auto
      engine's cost estimate, the modal path as before against the Laplace choice)
"""
import os
import platform
import sys
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "tests"))

from reference import laplace_reference  # noqa: E402
from transport.solvers import engines  # noqa: E402
from transport.solvers.engines import estimate_costs, solve_column  # noqa: E402
from transport.solvers.fv.engine import solve_fv  # noqa: E402
from transport.solvers.laplace import solve_laplace  # noqa: E402
from transport.solvers.modal.series import solve  # noqa: E402
from transport.model.column import Boundary, Column, Layer  # noqa: E402

YEAR = 365.25 * 86400.0

COLUMN = Column(layers=(Layer(0.8, 0.38, 4e-10, 2.5), Layer(1.2, 0.42, 2e-10, 3.0),
                        Layer(0.4, 0.48, 3e-11, 8.0), Layer(1.6, 0.33, 3e-10, 1.6),
                        Layer(1.0, 0.35, 5e-10, 1.2)),
                top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                darcy_flux=0.002 / YEAR)  # column Peclet number ~4: modal is rounding-safe
# the same column with 10x the flux (column Peclet ~44): modal rounding limits accuracy
FAST = Column(layers=COLUMN.layers, top=COLUMN.top, bottom=COLUMN.bottom, darcy_flux=0.02 / YEAR)
WEYL_TIME = sum(lay.thickness * (lay.retardation / lay.diffusivity) ** 0.5
                for lay in COLUMN.layers) ** 2  # (sum l sqrt(R/D))^2, the diffusion time
TIMES = np.array([5.0, 20.0, 100.0]) * YEAR
DEPTHS = np.linspace(0.0, COLUMN.length, 21)


def timed(fn, repeat=3):
    """Best wall time of ``repeat`` calls of ``fn`` (s) and the last result."""
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def _err(c, ref):
    """max |C - C_ref| relative to the source concentration (1)."""
    return float(np.max(np.abs(c - ref)))


def _cheapest(rows, target):
    ok = [w for e, w in rows if e <= target]
    return min(ok) if ok else float("nan")


def main():
    print(f"machine: {platform.machine()} {platform.processor() or ''}, {os.cpu_count()} cpus, "
          f"python {platform.python_version()}, numpy {np.__version__}, {platform.system()}")
    t0 = time.perf_counter()
    ref = laplace_reference(COLUMN, DEPTHS, TIMES, dps=30)
    print(f"reference: mpmath Talbot at 30 digits, {DEPTHS.size} depths x {TIMES.size} times, "
          f"{time.perf_counter() - t0:.1f} s")
    print("\n(1) accuracy vs cost, 5-layer column (max |error| / C0 over all outputs)")
    modal_rows, fv_rows = [], []
    for tol in (1e-4, 1e-6, 1e-8, 1e-10):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            w, sol = timed(lambda: solve(COLUMN, TIMES, DEPTHS, tolerance=tol))
        e = _err(sol.concentration, ref)
        modal_rows.append((e, w))
        print(f"  modal    tol {tol:7.0e} ({sol.n_modes:4d} modes): error {e:9.2e}  {w:8.4f} s")
    laplace_rows = []
    for n in (16, 24, 32, 48):
        w, sol = timed(lambda: solve_laplace(COLUMN, TIMES, DEPTHS, nodes=n))
        e = _err(sol.concentration, ref)
        laplace_rows.append((e, w))
        print(f"  laplace  {n:3d} Talbot nodes:          error {e:9.2e}  {w:8.4f} s")
    for cells in (10, 20, 40, 80, 160, 320, 640):
        w, c = timed(lambda: solve_fv(COLUMN, TIMES, DEPTHS, cells_per_layer=cells,
                                      tolerance=1e-10).concentration,
                     repeat=1 if cells > 80 else 3)
        e = _err(c, ref)
        fv_rows.append((e, w))
        print(f"  finite volume {cells:4d} cells/layer:   error {e:9.2e}  {w:8.4f} s")
    for target in (1e-4, 1e-6):
        wm, wf = _cheapest(modal_rows, target), _cheapest(fv_rows, target)
        note = "" if np.isfinite(wf) else " (finite volume did not reach it in this sweep)"
        wl = _cheapest(laplace_rows, target)
        print(f"  at error <= {target:.0e}: modal {wm:.4f} s, finite volume {wf:.4f} s, "
              f"speed ratio FV/modal {wf / wm:.1f}{note}; Laplace {wl:.4f} s "
              f"(FV/Laplace {wf / wl:.1f})")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w, sol = timed(lambda: solve_column(COLUMN, TIMES, DEPTHS))
    print(f"  auto (engines per time: {', '.join(sol.engine_by_time)}): error "
          f"{_err(sol.concentration, ref):9.2e}  {w:8.4f} s")
    print("\n(1b) the same column at column Peclet ~44 (10x the flux), tolerance 1e-8")
    ref_f = laplace_reference(FAST, DEPTHS, TIMES, dps=30)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w, sol = timed(lambda: solve(FAST, TIMES, DEPTHS, tolerance=1e-8))
    print(f"  modal only: error {_err(sol.concentration, ref_f):9.2e}  {w:8.4f} s "
          f"(rounding bound {sol.series.roundoff_bound(DEPTHS, TIMES).max():.1e})")
    w, sol = timed(lambda: solve_column(FAST, TIMES, DEPTHS))
    print(f"  auto ({', '.join(sol.engine_by_time)}): error "
          f"{_err(sol.concentration, ref_f):9.2e}  {w:8.4f} s")
    print(f"\n(2) early times, diffusion time (sum l sqrt(R/D))^2 = {WEYL_TIME / YEAR:.0f} yr")
    for frac in (1e-4, 1e-7, 1e-9):
        t_early = np.array([frac * WEYL_TIME])
        z = np.linspace(0.0, 0.02, 11)
        ref_e = laplace_reference(COLUMN, z, t_early, dps=30)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            w, sol = timed(lambda: solve(COLUMN, t_early, z), repeat=1)
        kinds = sorted({type(c.message).__name__ for c in caught})
        print(f"  t = {frac:.0e} x: modal only: error {_err(sol.concentration, ref_e):9.2e}, "
              f"{w:6.3f} s, {sol.n_modes} modes, warnings: {', '.join(kinds) or 'none'}")
        w, sol = timed(lambda: solve_column(COLUMN, t_early, z), repeat=1)
        print(f"               auto:       error {_err(sol.concentration, ref_e):9.2e}, "
              f"{w:6.3f} s, engine {sol.engine_by_time[0]}, estimated error "
              f"{sol.error_estimate[0]:.1e}")

def thin(n_layers=1000, seed=7):
    """auto on ``n_layers`` invented layers of 1 mm (clay to sand, 6 output times, 21
    depths): the modal path as before (cost rule off) against the cost-based choice."""
    rng = np.random.default_rng(seed)
    layers = tuple(Layer(1e-3, rng.uniform(0.2, 0.45), 10 ** rng.uniform(-12, -9),
                         rng.uniform(1, 50)) for _ in range(n_layers))
    col = Column(layers=layers, top=Boundary("concentration", 1.0),
                 bottom=Boundary("free-outflow"), darcy_flux=0.01 / YEAR)
    times = np.array([0.5, 1, 2, 5, 10, 20]) * YEAR
    depths = np.linspace(0.0, col.length, 21)
    cost = estimate_costs(col, times, 1e-8, n_depths=depths.size, reads=0)
    print(f"{n_layers} layers of 1 mm, {times.size} times x {depths.size} depths: estimated "
          f"modal {cost.modal:.2f} s ({cost.modes} modes), Laplace {cost.laplace:.2f} s")
    keep = engines.COSTLIER_BY
    engines.COSTLIER_BY = float("inf")  # the path before the estimate: both engines
    try:
        w_old, old = timed(lambda: solve_column(col, times, depths, reads=0), repeat=1)
    finally:
        engines.COSTLIER_BY = keep
    w_new, new = timed(lambda: solve_column(col, times, depths, reads=0), repeat=1)
    for name, w, sol in (("before (modal path + Laplace witness)", w_old, old),
                         ("after (cost estimate)", w_new, new)):
        print(f"  {name}: {w:7.2f} s, engines {', '.join(sorted(set(sol.engine_by_time)))}, "
              f"largest error bound {np.max(sol.error_estimate):.1e}")
    print(f"  ratio before/after: {w_old / w_new:.1f}x; "
          f"{new.diagnostics.get('engine_choice', 'no choice by cost')}")
    print(f"  largest difference between the two: "
          f"{np.max(np.abs(old.concentration - new.concentration)):.1e}")


if __name__ == "__main__":
    if sys.argv[1:2] == ["thin"]:
        thin()
    else:
        main()
