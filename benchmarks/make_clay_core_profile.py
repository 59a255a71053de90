"""Make the INVENTED demo data of scenarios/clay-core-fit.toml (run once; kept for the
record): two chloride pore-water cores through the clay of a fictional lagoon.

    python benchmarks/make_clay_core_profile.py   # writes data/clay-core-profile.csv

The "true" values below are invented. The profiles are computed with stratiflux itself
(this is demo data, never a check value: tests/test_fit.py checks the fit against an
independent closed form) and given a fixed-seed Gaussian error of 4 % + 8 mg/L, the
sigma written in the file.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from transport.analysis.fit_text import place_values
from transport.api import solve_scenario
from transport.io.atomic import write_text
from transport.scenario.schema import parse_scenario
from transport.units import MG_PER_L, YEAR

ROOT = Path(__file__).resolve().parent.parent
SCENARIO = ROOT / "scenarios" / "clay-core-fit.toml"
OUT = ROOT / "data" / "clay-core-profile.csv"
TRUE = {"layers[2].pore_diffusivity": '"4.2e-10 m^2/s"', "top.concentration": '"1650 mg/L"'}
AGE = 33.0  # years the lagoon had been in use at the first core (invented)
CORES = {2004: np.arange(0.1, 3.01, 0.2), 2024: np.arange(0.15, 4.01, 0.25)}
SEED = 20240611


def main():
    text, missed = place_values(SCENARIO.read_text(encoding="utf-8"), TRUE)
    assert not missed
    sc = parse_scenario(text, SCENARIO)
    rng = np.random.default_rng(SEED)
    lines = ["# INVENTED demo data (fictional Quillmere freight depot, east-yard lagoon):",
             "# chloride pore water of clay cores QC-1 (2004) and QC-2 (2024), made by",
             "# benchmarks/make_clay_core_profile.py. Not a measurement of any real site.",
             "# time is the year of coring; the fit's source_age places the first core.",
             "depth [m], concentration [mg/L], sigma [mg/L], time [yr]"]
    for year, depths in CORES.items():
        t = (AGE + year - min(CORES)) * YEAR
        sol, _ = solve_scenario(sc, depths=depths, times=np.array([t]))
        c = sol.concentration[0] / MG_PER_L
        sigma = 0.04 * c + 8.0
        noisy = np.maximum(c + sigma * rng.standard_normal(c.size), 0.0)
        lines += [f"{z:.2f}, {v:.1f}, {s:.1f}, {year}" for z, v, s in zip(depths, noisy, sigma)]
    write_text(OUT, "\n".join(lines) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
