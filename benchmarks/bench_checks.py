"""Cost of the checks that vouch for every number: for each bundled demo scenario, the
time of the unchecked modal series (the reference run, same process), of the Laplace
witness, of the choice and smoke alarm, and of the whole checked run; printed with
their ratios.

Run:  python benchmarks/bench_checks.py
"""
import glob
import os
import platform
import sys
import warnings

import numpy as np

from transport.solvers.checks import (assemble, choose, concentration_bounds, own_errors,
                              quantities)
from transport.model.column import has_source_zone
from transport.solvers.laplace import solve_laplace
from transport.solvers.modal.series import solve
from transport.solvers.timeline import solve_timeline_modal
from transport.api import solve_scenario
from transport.scenario.schema import load_scenario

HERE = os.path.join(os.path.dirname(__file__), "..", "scenarios")
sys.path.insert(0, os.path.dirname(__file__))
from bench_engines import timed as _best  # noqa: E402  (best of three, same process)


def main():
    print(f"python {platform.python_version()}, numpy {np.__version__}, "
          f"{os.cpu_count()} cores")
    print(f"{'scenario':34s} {'modal s':>8s} {'laplace s':>9s} {'choice s':>8s} "
          f"{'checked s':>9s} {'checks/run':>10s} {'engines':>14s}")
    for path in sorted(glob.glob(os.path.join(HERE, "*.toml"))):
        sc = load_scenario(path)
        if getattr(sc, "chain", None) is not None:
            print(f"{os.path.basename(path):34s} (a decay chain: not timed here)")
            continue
        if sc.timeline is not None and len(sc.timeline.stages) > 1:
            # staged: the whole checked run against the unchecked modal stages
            t_modal, _ = _best(lambda: solve_timeline_modal(
                sc.timeline, sc.times, sc.depths, initial=sc.initial,
                tolerance=sc.output.tolerance, max_modes=4000))
            t_run, (sol, _) = _best(lambda: solve_scenario(sc))
            print(f"{os.path.basename(path):34s} {t_modal:8.3f} {'(staged)':>9s} "
                  f"{'':>8s} {t_run:9.3f} {(t_run - t_modal) / t_run:10.0%} "
                  f"{'+'.join(sorted(set(sol.engine_by_time) - {'initial'})):>14s}")
            continue
        col, t, z, init = sc.column, sc.times, sc.depths, sc.initial
        if has_source_zone(col):
            t_run, (sol, _) = _best(lambda: solve_scenario(sc))
            print(f"{os.path.basename(path):34s} {'(zone)':>8s} {'':>9s} {'':>8s} "
                  f"{t_run:9.3f} {'':>10s} {'laplace alone':>14s}")
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t_modal, m = _best(lambda: solve(col, t, z, initial=init,
                                                    tolerance=sc.output.tolerance))
        t_lap, lap = _best(lambda: solve_laplace(col, t, z, initial=init))
        bounds = concentration_bounds(col, init, float(t.max()))
        cands = [("modal", quantities(m), {q: np.full(t.size, np.nan) for q in
                                           ("concentration", "total_flux",
                                            "cumulative_mass", "budget")}),
                 ("laplace", quantities(lap), own_errors(lap))]

        def pick():
            c = choose(t, cands, sc.output.tolerance, bounds, col, z,
                       budgets=[m.budget, lap.budget])
            return assemble(cands, c, [m.budget, lap.budget])
        t_choice, _ = _best(pick)
        t_run, (sol, _) = _best(lambda: solve_scenario(sc))
        print(f"{os.path.basename(path):34s} {t_modal:8.3f} {t_lap:9.3f} {t_choice:8.4f} "
              f"{t_run:9.3f} {(t_lap + t_choice) / t_run:10.0%} "
              f"{'+'.join(sorted(set(sol.engine_by_time) - {'initial'})):>14s}")
    print("checks/run: share of the checked run spent on the Laplace witness and the "
          "choice (staged: everything beyond the unchecked modal stages)")


if __name__ == "__main__":
    main()
