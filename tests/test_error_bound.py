"""The reported error estimates bound the actual errors.

Over 200 random cases drawn across the regime matrix (tests/test_regime_matrix.py: Peclet
number 0 to 1000 both ways, boundary kinds, signals, layer sets, initial states, decay
and layer sources; seeded numpy Generator, reproducible), ``solve_column(engine="auto")``
is compared with the independent mpmath Laplace reference (tests/reference.py,
laplace_reference_full, verified against published closed forms in
tests/test_reference.py).  For every quantity the solution gives an estimate for
(``solution.error``: concentration, total_flux, cumulative_mass, budget; else
``error_estimate`` for C only), per output time:

    max over depths (budget: over the terms) |engine - reference| <= estimate + slack,

slack = 4 eps (double precision) times the reference's largest value at that time: the
reference is exact to ~20 digits but is itself rounded to a double.  A refusal
(UnreliableResultError) is counted and reported, not an error.  Most draws are cheap
cells (Peclet number <= 10, 1-2 layers, 2 times, 3 depths) to keep the reference
affordable; the rest cover the advective regimes.  ``pytest -s`` prints the counts and
the worst ratio actual / estimate per quantity.
"""
from __future__ import annotations

import math
import multiprocessing
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np

from reference import laplace_reference_full
from test_regime_matrix import BUDGET_TERMS, LAYERS, Cell, build
from transport.solvers.checks import UnreliableResultError
from transport.solvers.engines import solve_column

N_CASES = 200
SEED = 20240611
EPS = np.finfo(float).eps
REF_DPS = 20
# the references (pure-Python mpmath, the bulk of the cost) run in two worker processes
# while the engines run here; spawned workers (no fork of a threaded BLAS)
WORKERS = 2

_FLOW_SOURCE = ("concentration", "inlet", "flux", "mass-transfer")
_FLOW_FAR = ("free-outflow", "concentration", "mass-transfer")
_STILL_SOURCE = ("concentration", "flux", "mass-transfer", "sealed")
_STILL_FAR = ("sealed", "concentration", "free-outflow", "mass-transfer", "flux")


def draw(rng: np.random.Generator):
    """One random case: (Cell, times, n_depths)."""
    cheap = rng.random() < 0.85
    if cheap:
        pe = float(rng.choice([0, 0, 1, 3, 10]))
        layers = str(rng.choice(["one", "contrast"]))
    else:
        pe = float(rng.choice([20, 40, 100, 300, 1000], p=[.3, .3, .25, .1, .05]))
        layers = str(rng.choice(list(LAYERS)))
    up = bool(rng.random() < 0.4) and pe > 0
    if pe:
        source = str(rng.choice(_FLOW_SOURCE))
        far = _FLOW_FAR + (("sealed",) if pe <= 1 else ())
        far = str(rng.choice(far))
    else:
        source, far = str(rng.choice(_STILL_SOURCE)), str(rng.choice(_STILL_FAR))
    kind = int(rng.integers(4))
    if kind == 3:
        signal = f"deplete-{10 ** rng.uniform(-1, 2):.3g}"
    else:
        signal = ("constant", "step-off", "table")[kind]
    initial = str(rng.choice(["clean", "uniform", "profile"], p=[.5, .2, .3]))
    partition = float(rng.choice([1.0, 0.5, 2.0])) if pe == 0 and layers != "one" else 1.0
    cell = Cell(pe, up, layers, source, far, signal, initial,
                decay=bool(rng.random() < 0.3), layer_source=bool(rng.random() < 0.2),
                partition=partition, tol=float(rng.choice([1e-8, 1e-8, 1e-10])))
    n_times = 2 if cheap or pe >= 300 else 3
    times = np.sort(10 ** rng.uniform(math.log10(0.02), math.log10(5.0), n_times))
    return cell, times


def _actual(sol, ref, qty):
    """(nt,) actual error and (nt,) reference magnitude of one quantity."""
    if qty == "budget":
        got = np.column_stack([np.asarray(sol.budget[k], float) for k in BUDGET_TERMS])
        want = np.column_stack([ref.budget[k] for k in BUDGET_TERMS])
    else:
        got = np.asarray(getattr(sol, qty), float)
        want = np.asarray(getattr(ref, qty), float)
    err = np.abs(got - want)
    err = np.where(np.isfinite(err), err, np.inf)
    return err.max(axis=1), np.abs(want).max(axis=1)


def cases():
    """The reproducible draws: (cell, column, times, depths, initial)."""
    rng = np.random.default_rng(SEED)
    out = []
    for _ in range(N_CASES):
        cell, frac = draw(rng)
        col, times, depths, init = build(cell)
        times = frac * times[1] / 0.5  # build()'s middle time is 0.5 t_char
        depths = depths[[0, len(depths) // 2, -1]] if depths.size > 3 else depths
        out.append((cell, col, times, depths, init))
    return out


def test_error_estimates_bound_the_actual_errors():
    t_start = time.perf_counter()
    drawn = cases()
    worst = {}  # quantity -> (ratio, case)
    refused, checked, violations = 0, 0, []
    refusals = []
    pool = ProcessPoolExecutor(WORKERS, mp_context=multiprocessing.get_context("spawn"))
    try:
        futures = [pool.submit(laplace_reference_full, col, depths, times, init, REF_DPS)
                   for cell, col, times, depths, init in drawn]
        for i, (cell, col, times, depths, init) in enumerate(drawn):
            _check_case(i, cell, col, times, depths, init, futures[i], worst, violations,
                        refusals)
    finally:
        pool.shutdown(cancel_futures=True)
    refused = len(refusals)
    checked = N_CASES - refused
    secs = time.perf_counter() - t_start
    print(f"\n\nerror bound: {N_CASES} cases, {checked} checked, {refused} refused, "
          f"{len(violations)} estimate violations ({secs:.0f} s)")
    for qty, (ratio, case) in sorted(worst.items()):
        print(f"  worst actual/estimate {qty:16s} {ratio:.6g}   {case}")
    for line in refusals:
        print(f"  refused {line}")
    for line in violations:
        print(f"  VIOLATION {line}")
    assert checked > N_CASES // 2, "most cases refused: the check is void"
    assert not violations, f"{len(violations)} estimates below the actual error: " + \
        "; ".join(violations[:5])


def _check_case(i, cell, col, times, depths, init, future, worst, violations, refusals):
    """Solve one case with auto; compare every estimated quantity with the reference."""
    try:
        sol = solve_column(col, times, depths, initial=init, engine="auto", tolerance=cell.tol)
    except UnreliableResultError as exc:
        refusals.append(f"#{i} {cell.name} ({','.join(exc.quantities)})")
        future.cancel()
        return
    ref = future.result()
    est = getattr(sol, "error", None)
    if not est:
        est = {"concentration": np.asarray(sol.error_estimate, float)}
    for qty, bound in est.items():
        bound = np.asarray(bound, float)
        actual, mag = _actual(sol, ref, qty)
        slack = 4 * EPS * mag
        ratio = np.where(actual == 0, 0.0, actual / np.maximum(bound, 1e-300))
        k = int(np.argmax(ratio))
        if ratio[k] > worst.get(qty, (-1.0, ""))[0]:
            worst[qty] = (float(ratio[k]), f"#{i} {cell.name} t={times[k]:.3g}s")
        bad = ~(actual <= bound + slack)
        if bad.any():
            j = int(np.flatnonzero(bad)[0])
            violations.append(f"#{i} {cell.name} {qty} t={times[j]:.3g}s: actual "
                              f"{actual[j]:.3g} > estimate {bound[j]:.3g}")
