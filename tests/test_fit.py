"""stratiflux fit: estimates, intervals, identifiability, errors and the command line.

External references:

* Crank (1975), *The Mathematics of Diffusion*, 2nd ed., eq. 2.45 (equation number as
  in tests/test_cli.py): a semi-infinite medium whose surface is held at C0 from t = 0,
  C = C0 erfc(z / (2 sqrt(D t / R))) for the retarded pore-water diffusion equation
  R dC/dt = D d2C/dz2, evaluated with scipy.special.erfc. The test column is 3 m deep
  and the profile's diffusion length sqrt(D t / R) at most 0.18 m, so its sealed bottom
  changes C by less than erfc(3 / 0.36) ~ 1e-31 (the semi-infinite solution applies).
* The coverage of linearised confidence intervals in nonlinear least squares is about
  their nominal rate when the model is close to linear in its parameters over the
  interval (Seber & Wild 1989, *Nonlinear Regression*, ch. 5, from memory); the count of
  covering intervals over independent draws is binomial (checked with
  scipy.stats.binom).
* The readback of the scenario text uses the standard library's TOML reader (tomllib).

Check values come from these formulas; the clay-core demo data are invented and only
exercise the command line.
"""
from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from matplotlib.text import Text
from scipy.special import erfc
from scipy.stats import binom

import transport.analysis.fit as fit_module
from transport.analysis.fit import FitError, FitRefused, fit_scenario
from transport.analysis.fit_input import MeasuredProfile, read_fit_spec, read_profile
from transport.analysis.fit_text import place_values
from transport.caution import CAUTION
from transport.cli.main import main
from transport.plot.fit import fit_figure
from transport.scenario.reader import ScenarioError
from transport.scenario.schema import load_scenario
from transport.solvers.checks import UnreliableResultError

ROOT = Path(__file__).resolve().parent.parent
YEAR = 365.25 * 86400.0  # Julian year, as transport.units
MG_L = 1e-3  # kg m-3 per mg/L
D_TRUE, R_TRUE, C0_TRUE, T_TRUE = 2e-10, 2.0, 120.0, 5.0  # m2/s, -, mg/L, yr
Z = np.linspace(0.02, 0.6, 15)  # m

# An invented single clay layer (test inputs; the check values come from Crank 1975).
SLAB = """\
title = "Invented test clay for fitting"

[[layers]]
name = "clay"
thickness = "3 m"
porosity = 0.4
retardation_factor = 2.0
pore_diffusivity = "3e-10 m^2/s"

[top]
kind = "concentration"
concentration = "100 mg/L"

[bottom]
kind = "sealed"

[output]
times = ["1 yr", "5 yr"]

[fit]
confidence = 0.95

[[fit.free]]
key = "layers[1].pore_diffusivity"
low = "1e-11 m^2/s"
high = "1e-8 m^2/s"
scale = "log"
"""
FREE_C0 = """
[[fit.free]]
key = "top.concentration"
low = "10 mg/L"
high = "500 mg/L"
"""
FREE_R = """
[[fit.free]]
key = "layers[1].retardation_factor"
low = 1
high = 20
scale = "log"
"""
FREE_AGE = """
[[fit.free]]
key = "source_age"
low = "0.5 yr"
high = "40 yr"
"""


def crank(z, t_yr, d=D_TRUE, r=R_TRUE, c0=C0_TRUE):
    """Crank (1975) eq. 2.45, mg/L."""
    return c0 * erfc(z / (2.0 * np.sqrt(d * t_yr * YEAR / r)))


def profile(values_mg_l, sigma_mg_l=None, times_yr=None, z=Z):
    sigma = None if sigma_mg_l is None else np.broadcast_to(sigma_mg_l, z.shape) * MG_L
    times = None if times_yr is None else np.asarray(times_yr, float) * YEAR
    units = (("depth", "m"), ("concentration", "mg/L"), ("sigma", "mg/L"), ("time", "yr"))
    return MeasuredProfile("synthetic.csv", z, np.asarray(values_mg_l) * MG_L, sigma, times,
                           units)


def by_key(result):
    return {e.key: e for e in result.estimates}


# ------------------------------------------------------------------- estimates
def test_recovers_diffusivity_and_source_from_exact_profile():
    """Noise-free Crank (1975) eq. 2.45 profile at the last output time (5 yr, the
    default without a time column): D and C0 come back to 1e-5 from a start 50 %
    (D) and 17 % (C0) off."""
    text = SLAB + FREE_C0
    result = fit_scenario(text, "slab.toml", profile(crank(Z, T_TRUE)), engine="laplace")
    est = by_key(result)
    assert est["layers[1].pore_diffusivity"].value == pytest.approx(D_TRUE, rel=1e-5)
    assert est["top.concentration"].value == pytest.approx(C0_TRUE * MG_L, rel=1e-5)
    assert result.identifiable and result.weighted_rms < 1e-4  # mg/L, unweighted


def test_recovers_source_age_from_two_profiles():
    """Two noise-free profiles 10 yr apart (Crank 1975 eq. 2.45 at 3 and 13 yr; the time
    column gives the calendar years 2010 and 2020): D and the source age at the first
    sampling are both recovered to 1e-4."""
    z = np.concatenate([Z, Z])
    values = np.concatenate([crank(Z, 3.0, c0=100.0), crank(Z, 13.0, c0=100.0)])
    years = np.repeat([2010.0, 2020.0], Z.size)
    result = fit_scenario(SLAB + FREE_AGE, "slab.toml",
                          profile(values, 1.0, years, z=z), engine="laplace")
    est = by_key(result)
    assert est["layers[1].pore_diffusivity"].value == pytest.approx(D_TRUE, rel=1e-4)
    assert est["source_age"].value == pytest.approx(3.0 * YEAR, rel=1e-4)
    assert result.identifiable


def test_noisy_profile_estimate_and_interval():
    """1 % noise (sigma 1.2 mg/L, fixed seed): D within 5 % of the truth and inside
    its 95 % interval; the interval on the log scale is asymmetric about D-hat."""
    rng = np.random.default_rng(7)
    obs = crank(Z, T_TRUE) + rng.normal(0.0, 1.2, Z.size)
    result = fit_scenario(SLAB + FREE_C0, "slab.toml", profile(obs, 1.2), engine="laplace")
    d = by_key(result)["layers[1].pore_diffusivity"]
    assert d.value == pytest.approx(D_TRUE, rel=0.05)
    assert d.lower < D_TRUE < d.upper
    assert d.upper / d.value == pytest.approx(d.value / d.lower, rel=1e-9)  # log scale
    assert abs(result.correlation[0, 1]) < 0.95 and result.dof == Z.size - 2


def test_intervals_cover_the_truth_at_their_stated_rate():
    """90 % intervals of D and C0 over 120 independent noisy draws (5 % noise, seed 2024)
    cover the truth a binomially plausible number of times: inside the central 99.9 %
    range of Binomial(120, 0.90) (scipy.stats.binom)."""
    text = SLAB.replace("confidence = 0.95", "confidence = 0.90") + FREE_C0
    spec = read_fit_spec(text, "slab.toml")
    rng = np.random.default_rng(2024)
    exact = crank(Z, T_TRUE)
    sigma = 0.05 * C0_TRUE
    draws, covered = 120, np.zeros(2, int)
    for _ in range(draws):
        obs = exact + rng.normal(0.0, sigma, Z.size)
        est = by_key(fit_scenario(text, "slab.toml", profile(obs, sigma), spec=spec,
                                  engine="laplace"))
        d, c0 = est["layers[1].pore_diffusivity"], est["top.concentration"]
        covered += [d.lower <= D_TRUE <= d.upper, c0.lower <= C0_TRUE * MG_L <= c0.upper]
    low, high = binom.interval(0.999, draws, 0.90)
    assert low <= covered[0] <= high and low <= covered[1] <= high, covered


# ------------------------------------------------------------- identifiability
def test_diffusivity_and_retardation_together_are_not_identifiable():
    """Pure diffusion from a fixed top concentration depends on D and R only through
    D / R (Crank 1975 eq. 2.45): with both free the fit says so and names both; with
    R fixed the same data identify D (the check can go either way)."""
    obs = profile(crank(Z, T_TRUE, c0=100.0), 1.0)  # the scenario's top concentration
    result = fit_scenario(SLAB + FREE_R, "slab.toml", obs, engine="laplace")
    est = by_key(result)
    assert not est["layers[1].pore_diffusivity"].identifiable
    assert not est["layers[1].retardation_factor"].identifiable
    said = " ".join(result.statements)
    assert "not identifiable" in said and "layers[1].pore_diffusivity" in said \
        and "layers[1].retardation_factor" in said
    # what the data do determine, D / R, is still right
    ratio = est["layers[1].pore_diffusivity"].value / est["layers[1].retardation_factor"].value
    assert ratio == pytest.approx(D_TRUE / R_TRUE, rel=1e-4)
    alone = fit_scenario(SLAB, "slab.toml", obs, engine="laplace")
    assert alone.identifiable and not any("not identifiable" in s for s in alone.statements)


def test_parameter_without_influence_is_not_identifiable():
    """Without flow, dispersivity adds nothing to D (D = D_w tau + alpha |v|, v = 0):
    zero sensitivity, reported by name."""
    free = '\n[[fit.free]]\nkey = "layers[1].dispersivity"\nlow = "0.001 m"\nhigh = "1 m"\n'
    result = fit_scenario(SLAB + free, "slab.toml",
                          profile(crank(Z, T_TRUE, c0=100.0), 1.0), engine="laplace")
    est = by_key(result)
    assert not est["layers[1].dispersivity"].identifiable
    assert est["layers[1].pore_diffusivity"].identifiable
    assert any("layers[1].dispersivity" in s and "zero sensitivity" in s
               for s in result.statements)


# ----------------------------------------------------------------------- errors
def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("header, rows, where, fix", [
    ("depth [m], sigma [mg/L]", "0.1, 1", "'concentration'", "add a 'concentration' column"),
    ("depth [mq], concentration [mg/L]", "0.1, 50", "column 'depth'", "give length units"),
    ("depth [m], concentration", "0.1, 50", "column 'concentration'", "in brackets"),
    ("depth [m], concentration [mg/kg]", "0.1, 50", "column 'concentration'",
     "pore-water"),
    ("depth [m], concentration [mg/L]", "0.1, fifty", "row 1, column 'concentration'",
     "plain number"),
])
def test_profile_errors_name_file_column_and_fix(tmp_path, header, rows, where, fix):
    """Missing column, unknown or missing units, soil units, a non-number."""
    path = write(tmp_path, "core.csv", f"# a core\n{header}\n{rows}\n")
    with pytest.raises(ScenarioError) as err:
        read_profile(path)
    text = str(err.value)
    assert "core.csv" in text and where in text and "Fix:" in text and fix in text


@pytest.mark.parametrize("old, new, key, fix", [
    ('key = "layers[1].pore_diffusivity"', 'key = "layers[1].pore_difusivity"',
     "fit.free[1].key", "did you mean layers[1].pore_diffusivity?"),
    ('key = "layers[1].pore_diffusivity"', 'key = "layers[3].pore_diffusivity"',
     "fit.free[1].key", "check the index"),
    ('low = "1e-11 m^2/s"\nhigh = "1e-8 m^2/s"', 'low = "1e-8 m^2/s"\nhigh = "1e-11 m^2/s"',
     "fit.free[1].high", "swap low and high"),
    ('low = "1e-11 m^2/s"', 'low = "1e-11 m/s"', "fit.free[1].low", "m^2/s"),
    ('scale = "log"', 'scale = "logarithmic"', "fit.free[1].scale", "log"),
    ('low = "0.5 yr"', 'low = "0 yr"', "fit.free[2].low", "low > 0"),
])
def test_fit_table_errors_name_file_key_and_fix(old, new, key, fix):
    """Unknown key path (with a did-you-mean), an index out of range, bounds reversed,
    wrong units of a bound, an unknown scale, a source age reaching t = 0."""
    with pytest.raises(ScenarioError) as err:
        read_fit_spec((SLAB + FREE_AGE).replace(old, new), "core-case.toml")
    text = str(err.value)
    assert text.startswith("core-case.toml: ") and key in text and "Fix:" in text
    assert fix in text


def test_data_that_cannot_serve_the_fit():
    """Too few samples, a sample below the column, absolute errors without sigma."""
    with pytest.raises(FitError, match="more samples than free parameters"):
        fit_scenario(SLAB + FREE_C0, "slab.toml", profile([50.0, 20.0], z=Z[:2]))
    with pytest.raises(ScenarioError, match="below the column bottom"):
        fit_scenario(SLAB, "slab.toml", profile(crank(Z, 1.0), z=Z + 2.5))
    absolute = SLAB.replace("confidence = 0.95", 'error_model = "absolute"')
    with pytest.raises(ScenarioError, match="column 'sigma'.*Fix: add a sigma column"):
        fit_scenario(absolute, "slab.toml", profile(crank(Z, 1.0)))


def test_unreliable_solve_during_the_fit_is_refused_clearly(monkeypatch):
    """An UnreliableResultError from an evaluation becomes FitRefused naming the trial
    values and the fix."""
    def refuse(*args, **kwargs):
        raise UnreliableResultError("no engine met the tolerance at t = 5 yr", [5 * YEAR],
                                    ["concentration"])
    monkeypatch.setattr(fit_module, "solve_scenario", refuse)
    with pytest.raises(FitRefused) as err:
        fit_scenario(SLAB, "slab.toml", profile(crank(Z, T_TRUE)))
    text = str(err.value)
    assert "slab.toml" in text and "layers[1].pore_diffusivity = 3e-10 m^2/s" in text
    assert "no engine met the tolerance" in text and "Fix:" in text
    assert isinstance(err.value, UnreliableResultError)


# -------------------------------------------------------------- text and figure
def test_values_are_placed_in_the_text_and_read_back():
    """Replaced in its table, added where absent, and inside a one-line inline table;
    the standard library's tomllib reads exactly the new values."""
    text = ('[top]\nkind = "concentration"\nconcentration = { initial = "120 mg/L", '
            'half_life = "8 yr" }  # source\n\n[[layers]]\nthickness = "1 m"\n\n'
            '[[layers]]\nthickness = "2 m"   # clay\n')
    new, missed = place_values(text, {"top.concentration.half_life": '"3 yr"',
                                      "layers[2].thickness": '"2.5 m"',
                                      "layers[1].porosity": "0.4"},
                               {"layers[2].thickness": "fitted"})
    assert missed == []
    data = tomllib.loads(new)
    assert data["top"]["concentration"] == {"initial": "120 mg/L", "half_life": "3 yr"}
    assert data["layers"] == [{"thickness": "1 m", "porosity": 0.4},
                              {"thickness": "2.5 m"}]
    assert '"2.5 m"  # fitted; clay' in new and "# source" in new


def test_figure_carries_estimates_and_caution():
    result = fit_scenario(SLAB, "slab.toml", profile(crank(Z, T_TRUE, c0=100.0), 1.0),
                          engine="laplace")
    texts = " ".join(t.get_text() for t in fit_figure(result, title="t").findobj(Text))
    assert "regulator" in texts and "layers[1].pore_diffusivity" in texts
    assert "linearised" in texts


# ------------------------------------------------------------------ command line
DEMO = ROOT / "scenarios" / "clay-core-fit.toml"


def outputs(out):
    return [out / f"clay-core-fit{s}" for s in ("_fit.png", "_fit_estimates.csv",
                                                "_fit_residuals.csv", "_fitted.toml")]


def test_cli_writes_figure_table_and_fitted_scenario(tmp_path):
    """The demo (invented data) runs; the four files appear with the cautions; the
    fitted scenario loads and holds the estimates; the data path still resolves."""
    out = tmp_path / "fit"
    result = CliRunner().invoke(main, ["fit", str(DEMO), "-o", str(out), "--engine",
                                       "laplace"])
    assert result.exit_code == 0, result.output
    assert "CAUTION" in result.output and "licensed professionals" in result.output
    assert "95 % interval" in result.output and "Correlation matrix" in result.output
    png, table, residuals, toml = outputs(out)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert CAUTION.split(":")[0] in table.read_text() and "regulator" in residuals.read_text()
    rows = [ln for ln in table.read_text().splitlines() if not ln.startswith("#")]
    assert rows[0].startswith("key,unit,estimate,lower,upper") and len(rows) == 4
    fitted = toml.read_text()
    assert fitted.startswith("# FITTED SCENARIO") and "fitted by stratiflux fit" in fitted
    sc = load_scenario(toml)
    d = float(rows[1].split(",")[2])
    assert sc.derived_table()[1]["pore_diffusivity"] == pytest.approx(d, rel=1e-5)
    spec = read_fit_spec(fitted, toml)
    assert (toml.parent / spec.data).resolve() == (ROOT / "data" / "clay-core-profile.csv")


def test_cli_failed_fit_leaves_previous_outputs_byte_identical(tmp_path, monkeypatch):
    """A fit that stops (evaluation budget; an engine refusal) exits 2 / 3 with the
    reason and the fix, and every existing output file keeps its bytes."""
    out = tmp_path / "fit"
    out.mkdir()
    before = {}
    for path in outputs(out):
        path.write_bytes(b"previous run " + path.name.encode())
        before[path] = path.read_bytes()
    case = write(tmp_path, "clay-core-fit.toml", DEMO.read_text().replace(
        'data = "../data/clay-core-profile.csv"',
        f'data = "{ROOT / "data" / "clay-core-profile.csv"}"\nmax_evaluations = 3'))
    result = CliRunner().invoke(main, ["fit", str(case), "-o", str(out)])
    assert result.exit_code == 2, result.output
    assert "did not converge within 3" in result.output and "Fix:" in result.output
    assert "Traceback" not in result.output
    assert {p: p.read_bytes() for p in before} == before

    def refuse(*args, **kwargs):
        raise UnreliableResultError("no engine could vouch for t = 30 yr")
    monkeypatch.setattr(fit_module, "solve_scenario", refuse)
    result = CliRunner().invoke(main, ["fit", str(DEMO), "-o", str(out)])
    assert result.exit_code == 3, result.output
    # the message is wrapped to the terminal width, which depends on the path's length
    assert "the fit stopped at layers[2].pore_diffusivity" in " ".join(result.output.split())
    assert {p: p.read_bytes() for p in before} == before
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in before)


def test_cli_bad_key_exits_2_naming_file_and_key(tmp_path):
    case = write(tmp_path, "case.toml", SLAB.replace("layers[1].pore_diffusivity",
                                                      "layers[1].porosityy"))
    data = write(tmp_path, "core.csv", "depth [m], concentration [mg/L]\n0.1, 50\n0.2, 30\n")
    result = CliRunner().invoke(main, ["fit", str(case), "--data", str(data)])
    assert result.exit_code == 2 and "Traceback" not in result.output
    assert "case.toml" in result.output and "fit.free[1].key" in result.output
    assert "did you mean" in result.output
