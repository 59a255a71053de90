"""The optimised site paths give the single-column numbers, on random sites.

The optimised paths: chunks solved in local worker processes and handed over packed
(the bytes of the chunk file with their checksum, made by the worker), written into the
NetCDF file in blocks (:mod:`transport.site.run`), Monte Carlo material layers derived
once per process, scan samples made once per window, the eigenvalues and eigenfunctions
of a boring's Monte Carlo columns solved in shared passes
(:func:`transport.site.chunks.shared_modes`).

References (outside the code under test):

* the single-column path of this project on each boring's column:
  :func:`transport.solvers.engines.solve_column` with both engines as candidates (the
  modal series and the Laplace engine, per output time the one vouched for: the site's
  rule), on the column a scenario file of that boring gives
  (:func:`transport.site.config.boring_scenario`, built by the scenario readers);
  fields to 1e-12 of their peak;
* each Monte Carlo realization solved alone on the column of
  ``boring_scenario(site, boring, overrides=draw)`` and summarised as empirical
  quantiles (inverted CDF, Hyndman and Fan 1996, Am. Stat. 50:361, definition 1, as
  numpy.quantile(method="inverted_cdf") gives them): to 1e-12;
* the previous implementation (``benchmarks/legacy_site``, the site modules before the
  throughput work), run in this process: identical arrays (identity).

The random sites are invented test inputs drawn from a fixed seed, not check values.
"""
from __future__ import annotations

import math
import re
import sys
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from transport.site.batch import solve_site
from transport.site.boring import realization_metrics
from transport.model.column import Boundary, Column, Layer
from transport.site import chunks
from transport.site.chunks import METRIC_KEYS, MC_KEYS, QUANTILES, draw_samples
from transport.solvers.modal import series as series_module
from transport.solvers.modal import sizing
from transport.solvers.modal.operator import SpectrumError
from transport.site.config import boring_scenario, load_site
from transport.site.run import run_site
from transport.solvers import engines
from transport.solvers.engines import solve_column
from transport.units import DAY

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))

SEEDS = (3, 11)
REALIZATIONS = 5


def write_random_site(folder: Path, rng) -> Path:
    """An invented site: 6 borings of 1-3 layers of three random materials, random
    flow, decay and receptor depth; four output times, the last one the design life;
    two uncertain parameters."""
    mats = {}
    for name in ("fill", "silt", "clay"):
        n = rng.uniform(0.3, 0.5)
        mats[name] = (f"porosity = {n:.4f}\nbulk_density = \"{rng.uniform(1.4, 1.8):.3f} "
                      f"g/cm^3\"\ndistribution_coefficient = \"{rng.uniform(0.05, 2):.4f} "
                      f"L/kg\"\ndispersivity = \"{rng.uniform(0.005, 0.1):.4f} m\"\n"
                      + (f"pore_diffusivity = \"{rng.uniform(1, 6):.3f}e-10 m^2/s\"\n"
                         if name == "clay" else f"tortuosity = {rng.uniform(0.3, 0.8):.3f}\n"))
    rows, logs, depths = [], [], []
    for k in range(6):
        rows.append(f"R-{k},{500000 + 20.0 * k:.1f},{5600000 + 15.0 * k:.1f},"
                    f"{20 + rng.uniform(0, 2):.2f}")
        faces = np.cumsum(rng.uniform(0.3, 1.0, int(rng.integers(1, 4))))
        depths.append(faces[-1])
        top = 0.0
        for face in faces:
            logs.append(f"R-{k},{top:.3f},{face:.3f},{rng.choice(list(mats))}")
            top = round(face, 3)
    receptor = rng.uniform(0.2, 0.9) * min(depths)
    toml = f"""title = "Random test yard (invented)"
crs = "EPSG:32631"
borings_file = "borings.csv"
log_file = "log.csv"
[chemical]
free_water_diffusivity = "1.0e-9 m^2/s"
half_life = "{rng.uniform(3, 30):.2f} yr"
[flow]
darcy_flux = "{rng.uniform(0.005, 0.08):.4f} m/yr"
[top]
kind = "concentration"
concentration = "10 mg/L"
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr", "4 yr", "12 yr", "30 yr"]
depth_spacing = "20 cm"
receptor_depth = "{receptor:.3f} m"
screening_level = "{rng.uniform(0.02, 2):.3f} mg/L"
design_life = "30 yr"
[uncertainty]
realizations = {REALIZATIONS}
seed = 5
sampling = "latin-hypercube"
[[uncertainty.parameters]]
parameter = "chemical.half_life"
distribution = "lognormal"
median = "10 yr"
log_sd = 0.5
[[uncertainty.parameters]]
parameter = "materials.silt.distribution_coefficient"
distribution = "uniform"
low = "0.05 L/kg"
high = "1.5 L/kg"
""" + "".join(f"[materials.{m}]\n{text}" for m, text in mats.items())
    (folder / "borings.csv").write_text("id,x [m],y [m],ground_elevation [m]\n"
                                        + "\n".join(rows) + "\n", encoding="utf-8")
    (folder / "log.csv").write_text("id,top [m],bottom [m],material\n" + "\n".join(logs)
                                    + "\n", encoding="utf-8")
    (folder / "site.toml").write_text(toml, encoding="utf-8")
    return folder / "site.toml"


@pytest.fixture(scope="module", params=SEEDS)
def runs(request, tmp_path_factory):
    """A random site run to files in two local processes (packed hand-over, NetCDF
    written in blocks) and in memory in this process."""
    folder = tmp_path_factory.mktemp(f"random-site-{request.param}")
    site = load_site(write_random_site(folder, np.random.default_rng(request.param)))
    files = run_site(site, folder / "out", workers=2, chunk_size=2)
    memory = solve_site(site, workers=1, chunk_size=4)
    return site, files, memory


def test_fields_equal_the_single_column_path(runs, monkeypatch):
    """Every station's concentration and cumulative mass, as written by the optimised
    path, equal solve_column on the boring's scenario column (both engines as
    candidates) to 1e-12 of their peak; fill values below the boring's bottom."""
    site, files, _ = runs
    times = np.asarray(site.times)
    with netCDF4.Dataset(files.netcdf) as nc:
        written = {k: nc[k][:].filled(np.nan) for k in ("concentration", "cumulative_mass")}
    for k, boring in enumerate(site.borings):
        scenario = boring_scenario(site, boring)
        inside = site.depths <= scenario.column.length * (1 + 1e-12)
        z = np.append(np.minimum(site.depths[inside], scenario.column.length),
                      boring.receptor_depth)
        # the modal series stays a candidate, as in the site run (never Laplace alone)
        monkeypatch.setattr(engines, "COST_FLOOR", math.inf)
        ref = solve_column(scenario.column, times, z, initial=scenario.initial,
                           tolerance=site.tolerance)
        for name in ("concentration", "cumulative_mass"):
            got, want = written[name][k][:, inside], getattr(ref, name)[:, :-1]
            assert np.max(np.abs(got - want)) <= 1e-12 * np.max(np.abs(want)), name
            assert np.all(np.isnan(written[name][k][:, ~inside]))


def test_files_equal_the_in_process_path(runs):
    """The metrics written by the optimised path (two processes, packed, in blocks)
    are the in-process in-memory numbers exactly (identity); times in days."""
    site, files, memory = runs
    with netCDF4.Dataset(files.netcdf) as nc:
        for name in METRIC_KEYS + MC_KEYS:
            if name in ("n_modes",):
                continue
            got = nc[name][:].filled(np.nan)
            want = memory.metrics[name]
            if nc[name].units == "d":
                want = want / DAY
            np.testing.assert_array_equal(got, want, err_msg=name)


def test_monte_carlo_equals_realizations_solved_alone(runs):
    """Exceedance probability and percentiles equal those of every realization solved
    alone on its scenario column (boring_scenario with the draw as overrides)."""
    site, _, memory = runs
    _assert_equals_alone(site, memory)


def test_monte_carlo_below_the_level_equals_realizations_solved_alone(tmp_path,
                                                                       monkeypatch):
    """The random site of seed 3 with its screening level raised to the median peak of
    the first boring's realizations: realizations whose curve cannot fall and ends
    below the level are read on the Laplace engine alone
    (:func:`transport.site.laplace_checks.stays_below`), the others in full, and both
    occur; the exceedance probability and percentiles, solved in this process and in
    two worker processes, still equal those of every realization solved alone."""
    path = write_random_site(tmp_path, np.random.default_rng(SEEDS[0]))
    site = load_site(path)
    samples = draw_samples(site, site.realizations, site.seed, site.sampling)
    names = [d.parameter for d in site.distributions]
    times = np.asarray(site.times)
    boring = site.borings[0]
    peaks = [realization_metrics(site, boring_scenario(site, boring, dict(zip(names, d))).column,
                                 boring.receptor_depth, float(times[times > 0].min()), times,
                                 boring.initial_state)[1] for d in samples]
    level = float(np.median(peaks)) * 1e3  # mg/L
    text = path.read_text(encoding="utf-8")
    text = re.sub(r'screening_level = "[^"]*"', f'screening_level = "{level!r} mg/L"', text)
    path.write_text(text, encoding="utf-8")
    site = load_site(path)
    read = []
    real = chunks.stays_below
    monkeypatch.setattr(chunks, "stays_below",
                        lambda *a, **k: read.append(real(*a, **k)) or read[-1])
    memory = solve_site(site, workers=1, chunk_size=4)
    assert any(r is None for r in read) and any(r is not None for r in read)
    _assert_equals_alone(site, memory)
    pooled = solve_site(site, workers=2, chunk_size=2)
    for name in MC_KEYS:
        np.testing.assert_array_equal(pooled.metrics[name], memory.metrics[name], name)


def _assert_equals_alone(site, memory):
    """The Monte Carlo summaries of the first three borings in ``memory`` equal those of
    every realization solved alone (empirical quantiles, inverted CDF)."""
    samples = draw_samples(site, site.realizations, site.seed, site.sampling)
    names = [d.parameter for d in site.distributions]
    times = np.asarray(site.times)
    t_start = float(times[times > 0].min())
    for k, boring in enumerate(site.borings[:3]):
        bt, pk = [], []
        for draw in samples:
            col = boring_scenario(site, boring, dict(zip(names, draw))).column
            b, p, _ = realization_metrics(site, col, boring.receptor_depth, t_start, times,
                                          boring.initial_state)
            bt.append(b)
            pk.append(p)
        bt, pk = np.array(bt), np.array(pk)
        m = memory.metrics
        assert m["exceedance_probability"][k] == np.mean(~np.isnan(bt))
        q_bt = np.quantile(np.where(np.isnan(bt), np.inf, bt), QUANTILES,
                           method="inverted_cdf")
        q_pk = np.quantile(pk, QUANTILES, method="inverted_cdf")
        for j, q in enumerate(("p5", "p50", "p95")):
            want = np.nan if np.isinf(q_bt[j]) else q_bt[j]
            np.testing.assert_allclose(m[f"breakthrough_time_{q}"][k], want, rtol=1e-12)
            np.testing.assert_allclose(m[f"peak_concentration_{q}"][k], q_pk[j], rtol=1e-12)


def test_previous_implementation_gives_identical_numbers(runs):
    """The site modules before the throughput work (benchmarks/legacy_site), run in
    this process on the same site: concentrations identical but for rounding-level
    values outside the physical bounds, which the site now moves onto them as the
    single-column path does (no negative concentration is written); cumulative masses
    and the metrics equal to rounding (the modal series now sums each mode's transient
    in closed form instead of cancelling two sums:
    ModalSeries.transient_integrals), 1e-12 of the largest value."""
    legacy = pytest.importorskip("legacy_site.batch")
    site, _, memory = runs
    old = legacy.solve_site(site, workers=1, chunk_size=4)
    new_m, old_m = memory.fields["cumulative_mass"], old.fields["cumulative_mass"]
    np.testing.assert_array_equal(np.isnan(new_m), np.isnan(old_m))
    np.testing.assert_allclose(new_m, old_m, rtol=0, atol=1e-12 * np.nanmax(np.abs(old_m)))
    new_c, old_c = memory.fields["concentration"], old.fields["concentration"]
    moved = ~((new_c == old_c) | (np.isnan(new_c) & np.isnan(old_c)))
    assert not np.any(new_c < 0)
    # only values outside the bounds moved, onto them, by less than the tolerance
    assert np.all(((old_c < 0) & (new_c == 0))[moved] | (new_c < old_c)[moved])
    assert np.all(np.abs(new_c - old_c)[moved]
                  <= site.tolerance * np.nanmax(np.abs(old_c)))
    # the windows now start at the release: where the previous path read the crossing
    # as the earliest output time (the level already reached there), it is resolved
    # earlier (against mpmath in tests/test_early_window.py); here those borings' window
    # metrics are only checked to move the right way
    times = np.asarray(site.times, float)
    t_start = float(times[times > 0].min())
    crossings = [k for k in old.metrics if "breakthrough_time" in k]
    early = np.zeros(len(site.borings), bool)
    for name in crossings:
        early |= np.asarray(old.metrics[name], float) == t_start
    for name, values in memory.metrics.items():
        ref = np.asarray(old.metrics[name], float)
        if name in crossings:
            assert np.all(values[early] <= ref[early]), name
        elif "time_above" in name:
            assert np.all(values[early] >= ref[early]), name
        if "breakthrough" in name or "time_above" in name or "peak" in name:
            values, ref = values[~early], ref[~early]
        np.testing.assert_array_equal(np.isnan(values), np.isnan(ref), err_msg=name)
        big = np.nanmax(np.abs(ref)) if np.isfinite(ref).any() else 0.0
        np.testing.assert_allclose(values, ref, rtol=0, atol=1e-12 * big, err_msg=name)
    assert memory.warnings == old.warnings


def test_monte_carlo_eigenvalues_are_shared(runs, monkeypatch):
    """Every column of a boring takes its eigenvalues and eigenfunctions from the
    shared (compiled) solve (the Monte Carlo columns side by side, the deterministic
    column alone), and every Monte Carlo column its series from the build side by side; no column solves its own spectrum or shoots its own modes but where
    the computed spectrum asks for more modes than the estimate (none here); so the
    summaries and fields checked above against columns
    solved alone come from the shared path."""
    site, _, _ = runs
    samples = draw_samples(site, site.realizations, site.seed, site.sampling)
    alone, shot = [], []
    real, real_modes = sizing.eigenvalues, series_module.modes

    def counted(op, n):
        alone.append(n)
        return real(op, n)

    def counted_modes(op, lam):
        shot.append(lam.size)
        return real_modes(op, lam)
    built_alone = []
    real_metrics = chunks.realization_metrics

    def metrics(*args, **kwargs):  # the last positional argument: the series built
        built_alone.append(args[-1] is None)  # side by side, or None
        return real_metrics(*args, **kwargs)
    monkeypatch.setattr(sizing, "eigenvalues", counted)
    monkeypatch.setattr(series_module, "modes", counted_modes)
    monkeypatch.setattr(chunks, "realization_metrics", metrics)
    chunks.clear_caches()
    chunks.solve_chunk(site, 0, 2, samples)
    chunks.clear_caches()
    # the demo's estimates suffice: nothing solved alone (before the deterministic
    # columns joined the compiled path, each solved its own spectrum here)
    assert alone == [] and shot == []
    # and every realization's series was built with the boring's others
    # (clean_series_many; tests/test_batched_series.py: the same numbers to the bit)
    assert len(built_alone) == 2 * site.realizations and not any(built_alone)


def test_shared_modes_leave_failures_to_each_column(monkeypatch):
    """A column the shared solve cannot size (a Peclet number beyond the modal engine)
    gets None, and so solves alone and reports its own error under its own name; if
    the shared solve fails, every column gets None (fault injection)."""
    good = [Column(layers=(Layer(1.0, 0.3, 1e-9 * f, 2.0), Layer(2.0, 0.4, 1e-10, 5.0)),
                   top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"))
            for f in (1.0, 2.0)]
    steep = Column(layers=(Layer(1.0, 0.3, 1e-12, 1.0), Layer(2.0, 0.4, 1e-12, 1.0)),
                   top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                   darcy_flux=1e-6)
    times = np.array([0.0, 1e7, 1e8, 1e9])
    out = chunks.shared_modes([good[0], steep, good[1]], times, 1e-8)
    assert out[1] is None and out[0].lam.size > 8 and out[2].lam.size > 8

    def fail(ops, ns, compiled=False):
        raise SpectrumError("injected")
    monkeypatch.setattr(chunks, "eigenvalues_many", fail)
    assert chunks.shared_modes(good, times, 1e-8) == [None, None]
