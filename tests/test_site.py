"""Whole sites: log validation, station = single column, Monte Carlo, Dask.

External references used here:

* the single-column path of this project (``transport.scenario.schema.load_scenario`` +
  ``transport.solvers.modal.series.solve``) on a scenario file written out by hand for one boring;
* Crank 1975, *The Mathematics of Diffusion*, 2nd ed., ch. 4: plane sheet with a held
  surface and a sealed face (``tests/reference.py: crank_slab_series``) for the
  exact exceedance probability;
* scipy.stats.lognorm (the lognormal CDF) and the binomial standard error
  sqrt(p (1 - p) / N) of a Monte Carlo fraction (e.g. Rubinstein and Kroese 2017,
  *Simulation and the Monte Carlo Method*, 3rd ed., sec. 4.2 (from memory)); with a
  Latin hypercube in one dimension each of the N equal-probability strata holds one
  draw, so the fraction below a quantile p is within 1/N of p (McKay, Beckman and
  Conover 1979, Technometrics 21:239).

All site data below are invented test inputs (an invented site), not check values.
"""
from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import brentq

from reference import crank_slab_series
from transport.model.column import InputError
from transport.solvers.modal.series import solve
from transport.scenario.schema import ScenarioError, load_scenario
from transport.site.config import load_site, parse_site
from transport.site.batch import solve_site

YEAR = 365.25 * 86400.0

SITE_TOML = """\
title = "Test yard (invented)"
crs = "EPSG:32631"
borings_file = "borings.csv"
log_file = "log.csv"

[chemical]
free_water_diffusivity = "1.0e-9 m^2/s"
half_life = "10 yr"

[flow]
darcy_flux = "0.05 m/yr"

[materials.sand]
porosity = 0.35
bulk_density = "1.7 g/cm^3"
distribution_coefficient = "0.2 L/kg"
tortuosity = 0.6
dispersivity = "0.1 m"

[materials.clay]
porosity = 0.45
bulk_density = "1.5 g/cm^3"
distribution_coefficient = "1.0 L/kg"
pore_diffusivity = "2e-10 m^2/s"
dispersivity = "0.02 m"

[top]
kind = "concentration"
concentration = "10 mg/L"

[bottom]
kind = "free-outflow"

[output]
times = ["1 yr", "5 yr", "20 yr"]
depth_spacing = "25 cm"
receptor_depth = "2 m"
screening_level = "50 ug/L"
design_life = "30 yr"
{extra}
"""

BORINGS = """\
id,x [m],y [m],ground_elevation [m]
T-1,500000.0,5600000.0,20.0
T-2,500030.5,5600010.25,20.4
T-3,500061.0,5600020.5,20.9
T-4,500091.5,5600030.75,21.1
T-5,500122.0,5600041.0,21.6
"""

LOG = """\
id,top [m],bottom [m],material
T-1,0,2.5,sand
T-2,0,0.8,sand
T-2,0.8,1.3,clay
T-2,1.3,2.6,sand
T-3,0,1.0,sand
T-3,1.0,2.2,clay
T-4,0,3.0,sand
T-5,0,1.2,sand
T-5,1.2,1.6,clay
T-5,1.6,2.8,sand
"""


def write_small_site(folder, extra="", borings=BORINGS, log=LOG, toml=SITE_TOML):
    """Write the invented test site into ``folder``; return the site file path."""
    (folder / "borings.csv").write_text(borings, encoding="utf-8")
    (folder / "log.csv").write_text(log, encoding="utf-8")
    path = folder / "site.toml"
    path.write_text(toml.replace("{extra}", extra), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def small_site(tmp_path_factory):
    return load_site(write_small_site(tmp_path_factory.mktemp("site")))


@pytest.fixture(scope="module")
def deterministic(small_site):
    return solve_site(small_site, realizations=0, workers=1, chunk_size=2)


# ------------------------------------------------------------------------ validation
def test_bad_logs_list_every_offending_boring(tmp_path):
    """Gaps, overlaps, unknown material, boring without log, log without boring: ONE
    ScenarioError naming every offending boring with the file and line (common practice:
    report all input problems at once)."""
    log = textwrap.dedent("""\
        id,top [m],bottom [m],material
        T-1,0,1.0,sand
        T-1,1.2,2.5,sand
        T-2,0,1.0,sand
        T-2,0.9,2.6,clay
        T-3,0,2.2,gravel
        T-5,0,2.8,sand
        T-9,0,2.0,sand
        """)
    with pytest.raises(ScenarioError) as info:
        load_site(write_small_site(tmp_path, log=log))
    message = str(info.value)
    assert set(info.value.borings) == {"T-1", "T-2", "T-3", "T-4", "T-9"}
    assert "log.csv" in message
    assert "lines 2-3: gap from 1 m to 1.2 m" in message
    assert "lines 4-5: overlap from 0.9 m to 1 m" in message
    assert "line 6: unknown material 'gravel'" in message
    assert "T-4: borings.csv line 5: no rows in log.csv" in message
    assert "line 8: no such boring in borings.csv" in message
    assert "T-5" not in message


def test_receptor_elevation_gives_depth_below_ground(tmp_path):
    """receptor_elevation: depth = ground elevation - receptor elevation (definition)."""
    path = write_small_site(tmp_path)
    text = path.read_text().replace('receptor_depth = "2 m"', 'receptor_elevation = "19.5 m"')
    site = parse_site(text, path)
    for b in site.borings:
        assert b.receptor_depth == pytest.approx(b.ground_elevation - 19.5, abs=1e-12)


def test_lon_lat_borings_are_projected_with_pyproj(tmp_path):
    """Borings given as lon/lat land at pyproj's UTM x/y (EPSG:4326 -> EPSG:32631)."""
    import pyproj

    lon, lat = [3.01, 3.02], [50.51, 50.52]
    rows = "id,lon [deg],lat [deg],ground_elevation [m]\n" + "".join(
        f"T-{i + 1},{a},{b},20\n" for i, (a, b) in enumerate(zip(lon, lat)))
    log = "id,top [m],bottom [m],material\nT-1,0,2.5,sand\nT-2,0,2.5,sand\n"
    site = load_site(write_small_site(tmp_path, borings=rows, log=log))
    x, y = pyproj.Transformer.from_crs(4326, 32631, always_xy=True).transform(lon, lat)
    assert [b.x for b in site.borings] == pytest.approx(x, abs=1e-6)
    assert [b.y for b in site.borings] == pytest.approx(y, abs=1e-6)


def test_material_error_names_the_materials_key(tmp_path):
    """A bad value in [materials.<name>] is reported at materials.<name>.<key>, the key
    path of the site file (common practice: name the key the user wrote)."""
    path = write_small_site(tmp_path)
    text = path.read_text().replace("porosity = 0.45", "porosity = 1.45")
    with pytest.raises(ScenarioError) as info:
        parse_site(text, path)
    assert info.value.key == "materials.clay.porosity"
    assert "layers[" not in str(info.value)


def test_draw_outside_the_allowed_range_names_parameter_and_realization(tmp_path):
    """A normal distribution of porosity without bounds can draw values above 1: the
    run stops before solving, naming the parameter and the first bad realization (the
    limits are those of a scenario file's key; common practice)."""
    extra = textwrap.dedent("""
        [uncertainty]
        realizations = 200
        seed = 3
        [[uncertainty.parameters]]
        parameter = "materials.sand.porosity"
        distribution = "normal"
        mean = 0.9
        sd = 0.2
        lower = 0
        """)
    site = load_site(write_small_site(tmp_path, extra=extra))
    with pytest.raises(ScenarioError) as info:
        solve_site(site, workers=1)
    assert info.value.key == "uncertainty.parameters[1]"
    assert "materials.sand.porosity" in str(info.value) and "realization" in str(info.value)


# ------------------------------------------------------------ station = single column
def test_station_equals_single_column_run(tmp_path, small_site, deterministic):
    """Boring T-2 written by hand as a single-column scenario file and run through
    load_scenario + modal.solve equals the site station to 1e-12 (same column)."""
    scenario = tmp_path / "t2.toml"
    scenario.write_text(textwrap.dedent("""\
        title = "T-2 by hand"
        [chemical]
        free_water_diffusivity = "1.0e-9 m^2/s"
        half_life = "10 yr"
        [flow]
        darcy_flux = "0.05 m/yr"
        [[layers]]
        name = "sand"
        thickness = "0.8 m"
        porosity = 0.35
        bulk_density = "1.7 g/cm^3"
        distribution_coefficient = "0.2 L/kg"
        tortuosity = 0.6
        dispersivity = "0.1 m"
        [[layers]]
        name = "clay"
        thickness = "0.5 m"
        porosity = 0.45
        bulk_density = "1.5 g/cm^3"
        distribution_coefficient = "1.0 L/kg"
        pore_diffusivity = "2e-10 m^2/s"
        dispersivity = "0.02 m"
        [[layers]]
        name = "sand"
        thickness = "1.3 m"
        porosity = 0.35
        bulk_density = "1.7 g/cm^3"
        distribution_coefficient = "0.2 L/kg"
        tortuosity = 0.6
        dispersivity = "0.1 m"
        [top]
        kind = "concentration"
        concentration = "10 mg/L"
        [bottom]
        kind = "free-outflow"
        [output]
        times = ["1 yr", "5 yr", "20 yr"]
        receptor_depth = "2 m"
        """))
    sc = load_scenario(scenario)
    k = small_site.ids.index("T-2")
    ref, inside = assert_station_equals_column_run(small_site, deterministic, "T-2", sc)
    assert np.all(np.isnan(deterministic.fields["concentration"][k][:, ~inside]))
    # breakthrough: Brent root of the same continuous series (scipy.optimize.brentq)
    t_b = deterministic.metrics["breakthrough_time"][k]
    level = small_site.screening_level
    assert ref.concentration_at(2.0, [t_b])[0] == pytest.approx(level, rel=1e-8)


def assert_station_equals_column_run(site, result, boring_id, scenario):
    """The station's concentration and cumulative mass equal modal.solve on the
    scenario's column, initial state and the site's grid to 1e-12 of their peaks.
    Returns the single-column solution and the mask of grid depths inside the column."""
    k = site.ids.index(boring_id)
    inside = site.depths <= scenario.column.length + 1e-12
    ref = solve(scenario.column, site.times, site.depths[inside], initial=scenario.initial,
                tolerance=site.tolerance)
    for name in ("concentration", "cumulative_mass"):
        got, want = result.fields[name][k][:, inside], getattr(ref, name)
        if name == "concentration":
            # the site, as solve_column, moves a value below the physical lower bound
            # (C >= 0 for a non-negative source and initial state: the maximum
            # principle, Protter & Weinberger 1967, ch. 3, from memory) onto it when it lies within
            # its error bound; a rounding-level negative of the raw series becomes 0
            scale = np.max(np.abs(want))
            want = np.where((want < 0) & (want >= -site.tolerance * scale), 0.0, want)
        assert np.max(np.abs(got - want)) <= 1e-12 * np.max(np.abs(want)), name
    return ref, inside


# --------------------------------------------------------------------- Monte Carlo
DEGENERATE = """
[uncertainty]
realizations = 6
seed = 11
[[uncertainty.parameters]]
parameter = "chemical.half_life"
distribution = "lognormal"
median = "10 yr"
log_sd = 0
[[uncertainty.parameters]]
parameter = "materials.clay.distribution_coefficient"
distribution = "uniform"
low = "1.0 L/kg"
high = "1.0 L/kg"
"""


def test_degenerate_monte_carlo_equals_deterministic(tmp_path, deterministic):
    """Zero-spread distributions: every realization is the deterministic run, so the
    exceedance probability is 0 or 1 and the percentiles are the deterministic values
    (identity)."""
    site = load_site(write_small_site(tmp_path, extra=DEGENERATE))
    mc = solve_site(site, workers=1, chunk_size=5)
    det = deterministic.metrics
    assert mc.realizations == 6
    np.testing.assert_array_equal(mc.metrics["exceedance_probability"],
                                  (~np.isnan(det["breakthrough_time"])).astype(float))
    for q in ("p5", "p50", "p95"):
        np.testing.assert_allclose(mc.metrics[f"breakthrough_time_{q}"],
                                   det["breakthrough_time"], rtol=1e-12)
        np.testing.assert_allclose(mc.metrics[f"peak_concentration_{q}"],
                                   det["peak_concentration"], rtol=1e-12)


ANALYTIC_TOML = """\
title = "One sand layer (invented)"
crs = "EPSG:32631"
borings_file = "borings.csv"
log_file = "log.csv"

[materials.sand]
porosity = 0.3
bulk_density = "1.6 g/cm^3"
distribution_coefficient = "1 L/kg"
pore_diffusivity = "5e-10 m^2/s"

[top]
kind = "concentration"
concentration = "1 kg/m^3"

[bottom]
kind = "sealed"

[output]
times = ["2 yr", "20 yr"]
depth_spacing = "50 cm"
receptor_depth = "0.5 m"
screening_level = "0.1 kg/m^3"
design_life = "20 yr"
tolerance = 1e-9

[uncertainty]
realizations = 2000
seed = 4
sampling = "latin-hypercube"
[[uncertainty.parameters]]
parameter = "materials.sand.distribution_coefficient"
distribution = "lognormal"
median = "1 L/kg"
log_sd = 0.8
"""


def test_exceedance_probability_matches_lognormal_cdf(tmp_path):
    """Single layer, diffusion only, held surface, sealed base: C(z, t; R) depends on
    t/R only, so breakthrough is monotone in R and P(exceed) = P(Kd <= Kd*) with R* the
    root of C_Crank(z_r, T; D/R*) = level (Crank 1975 ch. 4 plane sheet; brentq) and
    the lognormal CDF at Kd* = (R* - 1) theta / rho_b. MC at N = 2000 (Latin
    hypercube) within one binomial standard error."""
    borings = "id,x [m],y [m],ground_elevation [m]\nA,500000,5600000,10\n"
    log = "id,top [m],bottom [m],material\nA,0,1.0,sand\n"
    site = load_site(write_small_site(tmp_path, borings=borings, log=log,
                                      toml=ANALYTIC_TOML))
    theta, rho_b, d, level, life = 0.3, 1600.0, 5e-10, 0.1, 20 * YEAR

    def excess(r):
        return crank_slab_series([0.5], [life], 1.0, d / r, surface=1.0)[0, 0] - level

    r_star = brentq(excess, 1.0 + 1e-9, 1e4, xtol=1e-14)
    kd_star = (r_star - 1.0) * theta / rho_b
    p_exact = stats.lognorm(s=0.8, scale=1e-3).cdf(kd_star)
    assert 0.2 < p_exact < 0.8  # the case is informative
    result = solve_site(site, workers=2, chunk_size=1)
    p_mc = result.metrics["exceedance_probability"][0]
    n = 2000
    assert abs(p_mc - p_exact) <= math.sqrt(p_exact * (1 - p_exact) / n)


# ----------------------------------------------------------------------------- Dask
def test_dask_local_cluster_equals_local_path(small_site, deterministic):
    """The same chunks on a dask.distributed LocalCluster (2 workers, threads) give the
    same numbers as the in-process path (identity)."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        result = solve_site(small_site, realizations=0, scheduler=cluster.scheduler_address,
                            chunk_size=2)
    for key, values in deterministic.fields.items():
        np.testing.assert_array_equal(result.fields[key], values)
    for key, values in deterministic.metrics.items():
        np.testing.assert_array_equal(result.metrics[key], values)


def test_load_site_of_a_loaded_site_says_so(small_site):
    """Passing a loaded site (not its path) is a TypeError that says what to pass, not
    one from deep inside pathlib (common practice for an API)."""
    with pytest.raises(TypeError, match="path of a site file, not a Site .*loaded already"):
        load_site(small_site)


_TOP0 = '[top]\nkind = "concentration"\nconcentration = "10 mg/L"'
_BOTTOM0 = '[bottom]\nkind = "free-outflow"'
_KINDS = {"conc": 'kind = "concentration"\nconcentration = "10 mg/L"',
          "conc0": 'kind = "concentration"\nconcentration = "0 mg/L"',
          "step": 'kind = "concentration"\nconcentration = '
                  '{ steps = [["0 yr", "10 mg/L"], ["8 yr", "0 mg/L"]] }',
          "flux": 'kind = "flux"\nflux = "5 mg/m^2/d"',
          "inlet0": 'kind = "inlet"\nconcentration = "0 mg/L"',
          "mass-transfer": 'kind = "mass-transfer"\ntransfer_coefficient = "0.1 m/yr"\n'
                           'outside_concentration = "0 mg/L"',
          "sealed": 'kind = "sealed"', "free": 'kind = "free-outflow"',
          "zone": 'kind = "source-zone"\nconcentration = "50 mg/L"\nthickness = "0.3 m"\n'
                  'water_content = 0.22\nbulk_density = "1.65 g/cm^3"\n'
                  'distribution_coefficient = "0.2 L/kg"'}


@pytest.mark.parametrize("top, bottom, flux", [
    ("sealed", "conc", "-0.02 m/yr"),  # water rising to a sealed top: no upper bound
    ("flux", "inlet0", "-0.5 m/yr"),  # a front held back by upward flow
    ("conc", "mass-transfer", "1.0 m/yr"),  # an exit slower than the flow
    ("step", "mass-transfer", "1.0 m/yr"),  # the same with the source switched off
    ("flux", "sealed", "0 m/yr"),  # diffusion into a closed column
])
def test_monte_carlo_across_boundary_kinds_reproduces_the_deterministic_peaks(
        tmp_path, top, bottom, flux):
    """Zero-spread draws make every realization the boring's deterministic column, so
    the peak quantiles equal the boring's own peak within the tolerance of that peak
    (common practice: a degenerate distribution reproduces the deterministic run), for
    boundary kinds and flow directions where the data bound the concentration and where
    they do not (mass piling up at an end). Before this was checked, the first set-up
    stopped with a TypeError and the second was refused."""
    toml = (SITE_TOML.replace('darcy_flux = "0.05 m/yr"', f'darcy_flux = "{flux}"')
            .replace(_TOP0, "[top]\n" + _KINDS[top])
            .replace(_BOTTOM0, "[bottom]\n" + _KINDS[bottom]))
    assert _KINDS[top] in toml and _KINDS[bottom] in toml
    site = load_site(write_small_site(tmp_path, extra=DEGENERATE, toml=toml))
    out = solve_site(site, workers=1, chunk_size=2).metrics
    peak = out["peak_concentration"]
    assert np.all(np.isfinite(peak)) and np.all(peak >= 0)
    for q in ("p5", "p50", "p95"):
        assert np.allclose(out[f"peak_concentration_{q}"], peak,
                           rtol=2 * site.tolerance, atol=1e-300)


def test_a_source_zone_is_refused_when_the_site_is_read(tmp_path):
    """A source zone cannot be solved by a site's engine: the site file is refused when
    it is read (stratiflux check finds it), naming the key and the way out, instead of
    stopping the run after it started with advice about engines a site does not have."""
    toml = SITE_TOML.replace(_TOP0, "[top]\n" + _KINDS["zone"])
    with pytest.raises(ScenarioError) as info:
        load_site(write_small_site(tmp_path, toml=toml))
    assert info.value.key == "top.kind" and "site runs" in str(info.value)
    assert "stratiflux run" in str(info.value)



def test_a_column_the_engines_cannot_take_is_named(tmp_path):
    """A boring whose column Peclet number (about 1370: 5 m/yr through sand with a
    0.5 mm dispersivity) is beyond what double precision represents: the InputError
    names the boring, as a refusal does (before, the message named no boring)."""
    toml = SITE_TOML.replace('dispersivity = "0.1 m"', 'dispersivity = "0.5 mm"').replace(
        'darcy_flux = "0.05 m/yr"', 'darcy_flux = "5 m/yr"')
    site = load_site(write_small_site(tmp_path, toml=toml))
    with pytest.raises(InputError, match=r"^boring T-1: the column Peclet number"):
        solve_site(site, realizations=0, workers=1, chunk_size=2)
