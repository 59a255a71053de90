"""Command line (click CliRunner): run, check, modes, plot, new, and clean errors.

External references:

* Crank (1975), *The Mathematics of Diffusion*, 2nd ed., eq. 2.45: semi-infinite
  medium, fixed surface concentration C0: C = C0 erfc(z / (2 sqrt(D t / R))), so C
  reaches c at t = R z^2 / (4 D erfcinv(c / C0)^2).
* Crank (1975) ch. 2, instantaneous plane source in an infinite medium (eq. 2.6, from
  memory): C = M / (2 sqrt(pi D t)) exp(-z^2 / (4 D t)); at fixed z its peak is at
  t = z^2 / (2 D).
* Crank (1975) eq. 4.17 / Carslaw & Jaeger (1959) sec. 3.3: a slab 0 < z < L with fixed
  concentrations at both faces decays in modes exp(-lambda_n t),
  lambda_n = D n^2 pi^2 / (R L^2).
* The NetCDF written by ``run`` is compared with ``transport.solvers.modal.series.solve`` on the same
  scenario (the CLI must add nothing and lose nothing but float32 rounding).
"""
from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.special import erfc, erfcinv

from transport.cli.main import main
from transport.analysis.metrics import first_exceedance, peak
from transport.io.netcdf import elapsed_seconds, read_column_netcdf
from transport.solvers.modal.series import solve
from transport.solvers.laplace.engine import solve_laplace
from transport.model.column import has_source_zone
from transport.scenario.schema import load_scenario, starter_scenario_text

# single-species scenarios; a decay chain ([[chain]]) has its own tests (test_chain_scenario)
SCENARIOS = sorted(p for p in (Path(__file__).resolve().parent.parent / "scenarios").glob("*.toml")
                   if "[[chain]]" not in p.read_text(encoding="utf-8"))
YEAR = 365.25 * 86400.0  # Julian year, as transport.units

# An invented single-layer slab (demo inputs; the check values come from Crank 1975).
SLAB = """\
title = "Invented test slab"

[[layers]]
name = "uniform clay"
thickness = "3 m"
porosity = 0.4
retardation_factor = 2.0
pore_diffusivity = "1e-9 m^2/s"

[top]
kind = "concentration"
concentration = "100 mg/L"

[bottom]
kind = "concentration"
concentration = "0 mg/L"

[output]
times = { start = "0.1 yr", stop = "5 yr", count = 6 }
depth_spacing = "5 cm"
receptor_depth = "0.5 m"
screening_level = "10 mg/L"
"""
SLAB_D, SLAB_R, SLAB_L, SLAB_Z, SLAB_C0, SLAB_LEVEL = 1e-9, 2.0, 3.0, 0.5, 0.1, 0.01


def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def assert_clean_failure(result, *fragments):
    """Exit status 2, a message naming ``fragments``, no traceback."""
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit)
    assert "Traceback" not in result.output
    text = " ".join(result.output.split())  # the message is wrapped to 88 columns
    for fragment in fragments:
        assert fragment in text, (fragment, result.output)


@pytest.fixture
def slab(tmp_path):
    path = tmp_path / "slab.toml"
    path.write_text(SLAB, encoding="utf-8")
    return path


# --------------------------------------------------------------------------------- run
# The solver's accuracy warnings are printed by the CLI (checked elsewhere); the
# reference solve repeats them, and this test compares the two paths, not accuracy.
@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("scenario", SCENARIOS, ids=lambda p: p.stem)
def test_run_writes_the_core_solution(scenario, tmp_path):
    """run: the NetCDF fields equal transport.solvers.modal.series.solve on the same scenario, within
    the run's tolerance (auto serves the modal value where the Laplace engine confirms
    it, else the Laplace value); the budget closes to the tolerance."""
    out = tmp_path / f"{scenario.stem}.nc"
    result = invoke("run", scenario, "-o", out)
    assert result.exit_code == 0, result.output
    assert "CAUTION" in result.output and "Mass budget" in result.output
    sc = load_scenario(scenario)
    # a source zone is not a modal problem: its reference here is the Laplace engine
    # (both checked against mpmath in tests/test_source_zone.py)
    engine = solve_laplace if has_source_zone(sc.column) else solve
    ref = engine(sc.column, sc.times, sc.depths, initial=sc.initial,
                 tolerance=sc.output.tolerance)
    ds = read_column_netcdf(out, decode_times=False)  # stored float64 days, no ms rounding
    np.testing.assert_allclose(elapsed_seconds(ds), ref.times, rtol=1e-15)
    np.testing.assert_array_equal(ds["depth"].values, ref.depths)
    for name in ("concentration", "total_flux", "cumulative_mass"):
        expected = getattr(ref, name)
        scale = np.max(np.abs(expected)) or 1.0
        np.testing.assert_allclose(ds[name].values, expected, rtol=0,
                                   atol=2e-7 * scale)
    terms = [np.abs(ds[v].values) for v in ds.data_vars
             if ds[v].dims == ("time",) and v.startswith(("mass_", "stored", "entered",
                                                          "left", "decayed", "produced"))
             and v != "mass_balance_residual"]
    largest = np.max(np.vstack(terms), axis=0)
    assert np.all(np.abs(ds["mass_balance_residual"].values)
                  <= sc.output.tolerance * largest + 1e-15)
    assert set(ds["reliable"].values) == {1}
    assert ds.attrs["scenario_text"] == scenario.read_text(encoding="utf-8")
    assert "stratiflux run" in ds.attrs["history"]
    assert float(ds["receptor_depth"]) == sc.output.receptor_depth


@pytest.mark.parametrize("scenario", SCENARIOS[:1], ids=lambda p: p.stem)
def test_run_output_passes_cf_checker(scenario, tmp_path):
    """The file written for a demo scenario passes CF-1.11 (IOOS compliance-checker)."""
    from test_netcdf import failed_items, run_cf_checker

    out = tmp_path / "demo.nc"
    assert invoke("run", scenario, "-o", out).exit_code == 0
    report = run_cf_checker(out)
    assert failed_items(report, "high") == [] and failed_items(report, "medium") == []


def test_run_default_output_and_plots(tmp_path):
    """run without -o writes next to the scenario (.nc); --plots writes two PNGs."""
    scenario = tmp_path / "site.toml"
    scenario.write_text(SLAB, encoding="utf-8")
    result = invoke("run", scenario, "--plots", tmp_path / "figs")
    assert result.exit_code == 0, result.output
    assert (tmp_path / "site.nc").is_file()
    pngs = sorted(p.name for p in (tmp_path / "figs").glob("*.png"))
    assert pngs == ["site_breakthrough.png", "site_profiles.png"]


def test_run_breakthrough_matches_crank_erfc(slab, tmp_path):
    """Summary breakthrough time = Crank (1975) eq. 2.45 inverted (4 significant digits).

    The receptor is 0.5 m into a 3 m slab; until t = 5 yr the far face changes the
    erfc solution by less than erfc(2.5 m / sqrt(4 D t / R)) ~ 1e-50.
    """
    result = invoke("run", slab, "-o", tmp_path / "slab.nc")
    assert result.exit_code == 0, result.output
    match = re.search(r"first reached at ([0-9.]+) yr", result.output)
    assert match, result.output
    expected = SLAB_R * SLAB_Z ** 2 / (4 * SLAB_D * erfcinv(SLAB_LEVEL / SLAB_C0) ** 2)
    assert float(match.group(1)) == pytest.approx(expected / YEAR, rel=5e-4)


def test_run_refuses_missing_output_directory(slab, tmp_path):
    """An output in a missing directory fails before the solve, exit 2, no traceback."""
    result = invoke("run", slab, "-o", tmp_path / "nowhere" / "x.nc")
    assert_clean_failure(result, "does not exist")


def test_allow_unreliable_leaves_out_a_metric_no_engine_vouches_for(tmp_path, monkeypatch):
    """The slab read from 5 yr: the crossing of the level (Crank 1975, eq. 2.45
    inverted: 2.93 yr) lies before the earliest output time, where the Laplace engine
    serves the curve and its own bound vouches for what is read there. With that bound
    made 1e9 x larger (as read at the metric's time only; the output times are vouched
    for as before), a plain run is refused (exit 3, no file); with --allow-unreliable
    the fields are written, within the tolerance 1e-8 of the 100 mg/L scale of Crank's
    erfc solution (the far face changes it by less than erfc(7.7) ~ 1e-27 up to 8 yr),
    and no receptor metric is: the summary and the file's ``receptor_metrics``
    attribute say why (the first exceedance at 0.5 m)."""
    from transport.solvers import engines

    scenario = tmp_path / "late.toml"
    scenario.write_text(SLAB.replace('start = "0.1 yr", stop = "5 yr", count = 6',
                                     'start = "5 yr", stop = "8 yr", count = 4'),
                        encoding="utf-8")
    real = engines.own_bound_at
    monkeypatch.setattr(engines, "own_bound_at", lambda t, solve: 1e9 * real(t, solve))
    refused = invoke("run", scenario, "-o", tmp_path / "refused.nc")
    assert refused.exit_code == 3, refused.output
    assert "first exceedance at 0.5 m" in " ".join(refused.output.split())
    assert not (tmp_path / "refused.nc").exists()

    out = tmp_path / "late.nc"
    result = invoke("run", scenario, "-o", out, "--allow-unreliable")
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    assert "CAUTION: receptor metrics not reported: the first exceedance at 0.5 m" in text
    assert "first reached" not in text and "stays below" not in text
    ds = read_column_netcdf(out)
    assert "first exceedance at 0.5 m" in ds.attrs["receptor_metrics"]
    assert "first_exceedance_time" not in ds and "peak_concentration" not in ds
    assert bool(ds["reliable"].all())
    t = elapsed_seconds(ds)
    z = ds["depth"].values
    j = int(np.argmin(np.abs(z - SLAB_Z)))
    assert z[j] == pytest.approx(SLAB_Z, abs=1e-12)
    want = SLAB_C0 * erfc(SLAB_Z / np.sqrt(4 * SLAB_D / SLAB_R * t))
    got = ds["concentration"].values[:, j]
    assert np.max(np.abs(got - want)) <= 1e-8 * SLAB_C0


# -------------------------------------------------------------------- metric functions
def test_first_crossing_inverts_crank_erfc():
    """first_exceedance on eq. 2.45 returns the closed-form time to 1e-9 (relative)."""
    d, c0, z, level = 2e-10, 1.0, 0.3, 0.05

    def conc(depth, t):
        return c0 * erfc(depth / np.sqrt(4 * d * np.asarray(t, dtype=float)))

    expected = z ** 2 / (4 * d * erfcinv(level / c0) ** 2)
    t = first_exceedance(conc, z, level, 0.01 * YEAR, 50 * YEAR)
    assert t == pytest.approx(expected, rel=1e-9)
    assert first_exceedance(conc, z, level, 0.01 * YEAR, expected / 2) is None


def test_peak_of_plane_source():
    """peak() finds t = z^2 / (2 D) and C = M / (z sqrt(2 pi e)) for a plane source."""
    d, m, z = 1e-9, 1.0, 0.2

    def conc(depth, t):
        t = np.asarray(t, dtype=float)
        return m / (2 * np.sqrt(np.pi * d * t)) * np.exp(-depth ** 2 / (4 * d * t))

    t_peak, c_peak = peak(conc, z, 0.01 * YEAR, 100 * YEAR)
    assert t_peak == pytest.approx(z ** 2 / (2 * d), rel=1e-6)
    assert c_peak == pytest.approx(m / (z * math.sqrt(2 * math.pi * math.e)), rel=1e-12)


def test_summary_flags_breakthrough_within_solver_error():
    """A crossing where the solver's error estimate rivals the level is flagged.

    Curve: Crank (1975) eq. 2.45 (stand-in solution of tests/test_netcdf.py).
    """
    from test_netcdf import fake_solution
    from transport.analysis.summary import summary_lines

    base = fake_solution()
    for error, flagged in ((1e-9, False), (2e-2, True)):
        solution = type(base)(**{f: getattr(base, f) for f in base.__dataclass_fields__})
        object.__setattr__(solution, "error_estimate", np.full(np.size(base.times), error))
        text = " ".join(summary_lines(solution, title="stand-in", receptor_depth=0.3,
                                      screening_level=0.05))
        assert "first reached at" in text
        assert ("not reliable" in text) is flagged


# ------------------------------------------------------------------------------- check
@pytest.mark.parametrize("scenario", SCENARIOS, ids=lambda p: p.stem)
def test_check_prints_layer_table(scenario):
    """check: exit 0, each layer named, retardation factors as derived."""
    result = invoke("check", scenario)
    assert result.exit_code == 0, result.output
    sc = load_scenario(scenario)
    for row in sc.derived_table():
        assert row["name"] in result.output
        assert f"{row['retardation_factor']:.4g}" in result.output
    assert "OK:" in result.output


def test_check_bad_value_names_key_path(tmp_path):
    """A porosity above 1 exits 2 with the file and key path, no traceback."""
    bad = tmp_path / "bad.toml"
    bad.write_text(SLAB.replace("porosity = 0.4", "porosity = 1.4"), encoding="utf-8")
    for command in ("check", "run", "modes"):
        assert_clean_failure(invoke(command, bad), "bad.toml", "layers[1].porosity")


def test_bad_units_and_bad_toml_and_missing_file(tmp_path):
    """Wrong units, broken TOML and a missing file all exit 2 with a clear message."""
    units = tmp_path / "units.toml"
    units.write_text(SLAB.replace('"3 m"', '"3 kg"'), encoding="utf-8")
    assert_clean_failure(invoke("check", units), "layers[1].thickness")
    broken = tmp_path / "broken.toml"
    broken.write_text(SLAB.replace('title = "Invented test slab"', "title = Invented"),
                      encoding="utf-8")
    assert_clean_failure(invoke("check", broken), "broken.toml")
    assert_clean_failure(invoke("check", tmp_path / "absent.toml"), "absent.toml")


# ------------------------------------------------------------------------------- modes
def test_modes_match_slab_eigenvalues(slab):
    """modes: lambda_n = D n^2 pi^2 / (R L^2), Crank (1975) eq. 4.17, to 6 digits."""
    result = invoke("modes", slab, "-n", "4")
    assert result.exit_code == 0, result.output
    rows = re.findall(r"^\s+(\d+)\s+([0-9.eE+-]+)\s", result.output, flags=re.MULTILINE)
    assert [int(n) for n, _ in rows] == [1, 2, 3, 4]
    for n, value in rows:
        expected = SLAB_D * (int(n) * math.pi / SLAB_L) ** 2 / SLAB_R
        assert float(value) == pytest.approx(expected, rel=1e-6)
    assert re.search(r"Modes used: \d+", result.output)


@pytest.mark.parametrize("scenario", SCENARIOS[:1], ids=lambda p: p.stem)
def test_modes_runs_on_demo(scenario):
    """modes on a demo scenario lists increasing eigenvalues."""
    result = invoke("modes", scenario)
    assert result.exit_code == 0, result.output
    values = [float(v) for v in re.findall(r"^\s+\d+\s+([0-9.eE+-]+)\s", result.output,
                                            flags=re.MULTILINE)]
    assert len(values) >= 2 and np.all(np.diff(values) > 0)


# -------------------------------------------------------------------------------- plot
def test_plot_from_netcdf(slab, tmp_path):
    """plot FILE.nc writes the profile and breakthrough PNGs into --out."""
    nc = tmp_path / "slab.nc"
    assert invoke("run", slab, "-o", nc).exit_code == 0
    result = invoke("plot", nc, "--out", tmp_path / "figs")
    assert result.exit_code == 0, result.output
    for name in ("slab_profiles.png", "slab_breakthrough.png"):
        assert (tmp_path / "figs" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plot_rejects_non_netcdf(slab):
    """plot on a TOML file exits 2 with a message, no traceback."""
    assert_clean_failure(invoke("plot", slab), "Cannot read", "slab.toml")


# --------------------------------------------------------------------------------- new
def test_new_writes_starter_that_checks(tmp_path):
    """new writes the starter text, which passes check; refuses to overwrite."""
    target = tmp_path / "mine.toml"
    result = invoke("new", target)
    assert result.exit_code == 0, result.output
    assert target.read_text(encoding="utf-8") == starter_scenario_text()
    assert invoke("check", target).exit_code == 0
    target.write_text("# my edits\n", encoding="utf-8")
    assert_clean_failure(invoke("new", target), "already exists", "--force")
    assert target.read_text(encoding="utf-8") == "# my edits\n"
    assert invoke("new", target, "--force").exit_code == 0
    assert target.read_text(encoding="utf-8") == starter_scenario_text()


def test_new_default_path(tmp_path, monkeypatch):
    """new without PATH writes scenario.toml in the current directory."""
    monkeypatch.chdir(tmp_path)
    result = invoke("new")
    assert result.exit_code == 0, result.output
    assert (tmp_path / "scenario.toml").read_text(encoding="utf-8") == starter_scenario_text()


# -------------------------------------------------------------------------------- help
@pytest.mark.parametrize("command", ["run", "check", "modes", "plot", "new"])
def test_help_has_an_example(command):
    """Every command's --help shows an example invocation."""
    result = invoke(command, "--help")
    assert result.exit_code == 0
    assert "Example:" in result.output and f"stratiflux {command}" in result.output


def test_console_script_entry_behaves_as_the_group(tmp_path):
    """The console script's entry (transport.cli.program.run: collector off while the
    modules load, frozen objects) prints what the group prints and exits with its
    status: 0 for the demo run, 2 for a missing scenario file. Reference: the group
    itself through click's CliRunner."""
    import subprocess
    import sys

    entry = "import sys; from transport.cli.program import run; sys.exit(run())"
    scenario = Path(__file__).resolve().parent.parent / "scenarios" / "spill-layered-column.toml"
    out = tmp_path / "entry.nc"
    done = subprocess.run([sys.executable, "-c", entry, "run", str(scenario), "-o", str(out)],
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    direct = CliRunner().invoke(main, ["run", str(scenario), "-o", str(out)])
    assert direct.exit_code == 0
    assert done.stdout == direct.stdout
    missing = subprocess.run([sys.executable, "-c", entry, "run", str(tmp_path / "no.toml")],
                             capture_output=True, text=True)
    assert missing.returncode == 2 and "no.toml" in missing.stderr
