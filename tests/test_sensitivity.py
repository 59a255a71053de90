"""stratiflux sensitivity: Sobol' estimators, one-at-a-time runs, the [sensitivity] table,
and the command's files.

External references:

* Ishigami & Homma (1990), Proc. ISUMA '90, 398-403: f = sin x1 + a sin^2 x2 +
  b x3^4 sin x1, x_i ~ U(-pi, pi). Its partial variances (Sobol' 1993, Math. Model.
  Comput. Exp. 1:407; Saltelli et al. 2008, "Global Sensitivity Analysis: The Primer",
  Wiley, sec. 4.9, formulas from memory): V = a^2/8 + b pi^4/5 + b^2 pi^8/18 + 1/2,
  V1 = (1 + b pi^4/5)^2 / 2, V2 = a^2/8, V3 = 0, V13 = b^2 pi^8 (1/18 - 1/50).
* A linear model Y = sum c_i X_i of independent inputs: S_i = S_Ti = c_i^2 V(X_i) /
  sum_j c_j^2 V(X_j) (Saltelli et al. 2008, ch. 1, from memory), with V of a uniform
  (b - a)^2/12, of a normal sd^2 and of a lognormal (e^{s^2} - 1) e^{2 mu + s^2}.
* Crank (1975), The Mathematics of Diffusion, 2nd ed., eq. 4.24a (equation number from
  memory): the amount per area through a membrane 0 < z < L, C = C1 at z = 0, C = 0 at
  z = L, clean at t = 0, is Q/(L C1) = kappa t/L^2 - 1/6 - (2/pi^2) sum_n (-1)^n/n^2
  exp(-kappa n^2 pi^2 t/L^2); for pore water with sorption C1 = theta R C0 and
  kappa = D/R (Crank ch. 14), so at late times Q = theta D C0 t/L - theta R C0 L/6
  (steady flux theta D C0 / L, Fick's first law, and time lag R L^2/(6 D)): additive
  in D and R, whose indices follow from the linear-model formula above.
* Crank (1975) eq. 2.45: semi-infinite medium, C = C0 erfc(z / (2 sqrt(D t / R))), so C
  reaches c at t = R z^2 / (4 D erfcinv(c/C0)^2).
"""
from __future__ import annotations

import math
import tomllib
from pathlib import Path

import mpmath as mp
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner
from scipy.special import erfcinv

import transport
import transport.analysis.sensitivity as sensitivity_module
import transport.plot.sensitivity as plot_module
from transport.analysis.metrics import receptor_metrics
from transport.analysis.sensitivity import load_study, parse_study, run_study
from transport.analysis.sensitivity_keys import toml_text
from transport.analysis.sobol import saltelli_design, sobol_indices
from transport.caution import CAUTION
from transport.cli.main import main
from transport.scenario.reader import ScenarioError
from transport.scenario.schema import load_scenario, parse_scenario
from transport.site.uncertainty import Distribution
from transport.solvers.checks import UnreliableResultError

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "sensitivity-demo.toml"
YEAR = 365.25 * 86400.0  # Julian year, as transport.units

# Invented single-layer membrane (demo inputs; the check values come from Crank 1975).
SLAB = """\
title = "Invented membrane slab"

[[layers]]
name = "clay"
thickness = "0.5 m"
porosity = 0.4
retardation_factor = 3.0
pore_diffusivity = "1.05e-9 m^2/s"

[top]
kind = "concentration"
concentration = "100 mg/L"

[bottom]
kind = "concentration"
concentration = "0 mg/L"

[output]
times = ["{first}", "{last}"]
depth_spacing = "5 cm"
receptor_depth = "0.5 m"

[sensitivity]
metric = "mass_to_receptor"
window = "whole-run"
samples = {samples}
seed = 7
resamples = 300

[[sensitivity.inputs]]
key = "layers[1].pore_diffusivity"
distribution = "uniform"
low = "1.0e-9 m^2/s"
high = "1.1e-9 m^2/s"

[[sensitivity.inputs]]
key = "layers[1].retardation_factor"
distribution = "uniform"
low = 1.0
high = 5.0
"""
THETA, C0, L = 0.4, 0.1, 0.5  # SI values of SLAB

# Invented long slab (as tests/test_cli.py): the bottom at 3 m is far enough that the
# receptor at 0.5 m sees a semi-infinite medium before 10 yr (image term ~ erfc(12)).
LONG = """\
title = "Invented long slab"

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
times = {{ start = "0.1 yr", stop = "10 yr", count = 6 }}
depth_spacing = "5 cm"
receptor_depth = "0.5 m"
screening_level = "{level}"

[sensitivity]
metric = "first_exceedance"
window = "whole-run"

[[sensitivity.inputs]]
key = "layers[1].pore_diffusivity"
low = "5e-10 m^2/s"
high = "2e-9 m^2/s"
"""


def slab_text(first="0.5 yr", last="3 yr", samples=8):
    return SLAB.format(first=first, last=last, samples=samples)


def ishigami(x, a=7.0, b=0.1):
    return np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + b * x[:, 2] ** 4 * np.sin(x[:, 0])


def design_values(model, dists, n, seed):
    """f(A), f(B), f(A_B^(i)) of the Saltelli design."""
    a, b = saltelli_design([d.ppf for d in dists], n, seed)
    ab = []
    for i in range(len(dists)):
        m = a.copy()
        m[:, i] = b[:, i]
        ab.append(model(m))
    return model(a), model(b), np.array(ab)


def crank_membrane_mass(d, r, t, dps=30):
    """Crank (1975) eq. 4.24a (number from memory) with C1 = theta R C0, kappa = D/R."""
    mp.mp.dps = dps
    kappa = mp.mpf(d) / r
    tau = kappa * t / mp.mpf(L) ** 2
    series = mp.nsum(lambda n: (-1) ** int(n) / n ** 2 * mp.exp(-n ** 2 * mp.pi ** 2 * tau),
                     [1, mp.inf])
    return float(THETA * r * C0 * L * (tau - mp.mpf(1) / 6 - 2 / mp.pi ** 2 * series))


# ------------------------------------------------------------------ Sobol' estimators
def test_ishigami_indices_match_the_analytic_values():
    """First-order and total-effect indices of the Ishigami function (Ishigami & Homma
    1990; analytic variances from Sobol' 1993 / Saltelli et al. 2008), N = 2^14: within
    0.005 of the analytic values, each inside its 95 % bootstrap interval."""
    a, b, pi = 7.0, 0.1, math.pi
    v = a ** 2 / 8 + b * pi ** 4 / 5 + b ** 2 * pi ** 8 / 18 + 0.5
    v1, v2, v13 = 0.5 * (1 + b * pi ** 4 / 5) ** 2, a ** 2 / 8, b ** 2 * pi ** 8 * (1 / 18 - 1 / 50)
    first = np.array([v1, v2, 0.0]) / v
    total = np.array([v1 + v13, v2, v13]) / v
    dists = [Distribution(f"x{i}", "uniform", (-pi, pi)) for i in range(3)]
    ix = sobol_indices(*design_values(ishigami, dists, 2 ** 14, seed=3), resamples=200,
                       seed=4)
    np.testing.assert_allclose(ix.first_order, first, atol=5e-3)
    np.testing.assert_allclose(ix.total_effect, total, atol=5e-3)
    for est, interval in ((first, ix.first_order_interval), (total, ix.total_effect_interval)):
        assert np.all(interval[:, 0] <= est) and np.all(est <= interval[:, 1])
        assert np.all(np.diff(interval, axis=1) < 0.1)


def test_linear_model_indices_are_the_variance_shares():
    """Y = 2 X1 - X2 + 0.5 X3 with a normal, a uniform and a truncation-free lognormal
    input: S_i = S_Ti = c_i^2 V_i / sum (Saltelli et al. 2008), within 0.01, N = 2^13."""
    dists = [Distribution("x1", "normal", (1.0, 0.5)),
             Distribution("x2", "uniform", (0.0, 3.0)),
             Distribution("x3", "lognormal", (2.0, 0.5))]
    c = np.array([2.0, -1.0, 0.5])
    variances = np.array([0.5 ** 2, 3.0 ** 2 / 12,
                          (math.exp(0.25) - 1) * math.exp(2 * math.log(2.0) + 0.25)])
    share = c ** 2 * variances / np.sum(c ** 2 * variances)
    ix = sobol_indices(*design_values(lambda x: x @ c, dists, 2 ** 13, seed=11),
                       resamples=200, seed=1)
    np.testing.assert_allclose(ix.first_order, share, atol=0.01)
    np.testing.assert_allclose(ix.total_effect, share, atol=0.01)


def test_constant_model_has_undefined_indices():
    """A model that does not vary has no variance to share: NaN indices and intervals,
    not a division warning (definition of S_i, Sobol' 1993)."""
    dists = [Distribution("x", "uniform", (0.0, 1.0)), Distribution("y", "uniform", (0.0, 1.0))]
    with np.errstate(all="raise"):
        ix = sobol_indices(*design_values(lambda x: np.full(x.shape[0], 3.0), dists, 16, 0),
                           resamples=50)
    assert np.all(np.isnan(ix.first_order)) and np.all(np.isnan(ix.total_effect_interval))
    assert ix.variance == 0.0


def test_design_refuses_a_sample_size_that_is_not_a_power_of_two():
    with pytest.raises(ValueError, match="power of two"):
        saltelli_design([Distribution("x", "uniform", (0.0, 1.0)).ppf], 48, 0)


# --------------------------------------------------------------- one at a time, solved
@pytest.mark.filterwarnings("ignore::UserWarning")
def test_one_at_a_time_equals_direct_solves_of_the_modified_scenario(tmp_path):
    """Each low/high metric of the demo equals transport.solve of the scenario file with
    that one value written in by hand (within the solver tolerance): the study adds
    nothing to the physics."""
    study = load_study(DEMO)
    result = run_study(study, one_at_a_time_only=True)
    text = DEMO.read_text(encoding="utf-8")
    lines = {"layers[2].pore_diffusivity": 'pore_diffusivity = "2.5e-10 m^2/s"',
             "layers[2].organic_carbon_fraction": 'organic_carbon_fraction = "0.4 %"',
             "flow.darcy_flux": 'darcy_flux = "0.12 m/yr"',
             "chemical.half_life": 'half_life = "3 yr"',
             "top.concentration": 'concentration = "40 mg/L"'}
    units = {"diffusivity": "m^2/s", "velocity": "m/s", "time": "s",
             "concentration": "kg/m^3"}
    for k, inp in enumerate(study.spec.inputs):
        assert text.count(lines[inp.key]) == 1
        for value, got in ((inp.low, result.low[k]), (inp.high, result.high[k])):
            written = (f"{value!r}" if inp.dimension == "dimensionless"
                       else f'"{value!r} {units[inp.dimension]}"')
            name = lines[inp.key].split(" = ")[0]
            path = tmp_path / "modified.toml"
            path.write_text(text.replace(lines[inp.key], f"{name} = {written}"),
                            encoding="utf-8")
            sc = load_scenario(path)
            out = sc.output
            sol = transport.solve(sc)
            direct = receptor_metrics(sol, out.receptor_depth, out.screening_level,
                                      out.design_life).peak_concentration
            assert got == pytest.approx(direct, rel=1e-6), inp.key
    assert np.all(result.swing == np.abs(result.high - result.low))
    assert list(result.order) == list(np.argsort(-result.swing, kind="stable"))


def test_mass_through_a_membrane_matches_crank():
    """One-at-a-time mass to the receptor at the exit face after 3 yr, D and R at their
    low and high values: Crank (1975) eq. 4.24a (transient series included), rtol 1e-6."""
    study = parse_study(slab_text(), "slab.toml")
    result = run_study(study, one_at_a_time_only=True)
    t = 3 * YEAR
    expected_low = [crank_membrane_mass(1.0e-9, 3.0, t), crank_membrane_mass(1.05e-9, 1.0, t)]
    expected_high = [crank_membrane_mass(1.1e-9, 3.0, t), crank_membrane_mass(1.05e-9, 5.0, t)]
    np.testing.assert_allclose(result.low, expected_low, rtol=1e-6)
    np.testing.assert_allclose(result.high, expected_high, rtol=1e-6)
    np.testing.assert_allclose(result.base, crank_membrane_mass(1.05e-9, 3.0, t), rtol=1e-6)
    np.testing.assert_allclose(result.swing, np.abs(np.array(expected_high)
                                                    - np.array(expected_low)), rtol=1e-5)


def test_late_membrane_mass_indices_are_the_variance_shares():
    """After 100 yr Q = theta C0 (D t/L - R L/6) (Crank 1975, eq. 4.24a, late times; the
    series is below 1e-10 there): additive in uniform D and R, so S = S_T = the variance
    shares (linear-model formula). N = 32 runs through the whole pipeline: within 0.02,
    and the analytic values inside the 95 % bootstrap intervals."""
    study = parse_study(slab_text(first="1 yr", last="100 yr", samples=32), "slab.toml")
    result = run_study(study)
    t = 100 * YEAR
    v_d = (THETA * C0 * t / L) ** 2 * (0.1e-9) ** 2 / 12
    v_r = (THETA * C0 * L / 6) ** 2 * 4.0 ** 2 / 12
    share = np.array([v_d, v_r]) / (v_d + v_r)
    ix = result.indices
    np.testing.assert_allclose(ix.first_order, share, atol=0.02)
    np.testing.assert_allclose(ix.total_effect, share, atol=0.02)
    for interval in (ix.first_order_interval, ix.total_effect_interval):
        assert np.all(interval[:, 0] <= share) and np.all(share <= interval[:, 1])
    assert result.plan.size == 2 * 2 + 1 + 32 * (2 + 2)


def test_first_exceedance_matches_crank_erfc_and_censors():
    """First exceedance of 10 mg/L at 0.5 m with D at 5e-10 and 2e-9 m^2/s: Crank (1975)
    eq. 2.45, t = R z^2 / (4 D erfcinv(0.1)^2), rtol 1e-6. With a level of 99 mg/L,
    never reached within 10 yr, every run is censored at the window's end."""
    result = run_study(parse_study(LONG.format(level="10 mg/L"), "long.toml"))
    t = [2.0 * 0.5 ** 2 / (4 * d * erfcinv(0.1) ** 2) for d in (5e-10, 2e-9)]
    np.testing.assert_allclose([result.low[0], result.high[0]], t, rtol=1e-6)
    assert not result.censored.any()
    high_level = run_study(parse_study(LONG.format(level="99 mg/L"), "long.toml"))
    assert high_level.censored.all()
    np.testing.assert_array_equal(high_level.metric, 10 * YEAR)


# ---------------------------------------------------------------- the [sensitivity] table
def study_error(text, path="study.toml") -> str:
    with pytest.raises(ScenarioError) as info:
        parse_study(text, path)
    message = str(info.value)
    assert message.startswith(f"{path}: ") and "Fix:" in message
    return message


@pytest.mark.parametrize("old, new, fragments", [
    ('key = "layers[1].retardation_factor"', 'key = "layers[1].retardaton_factor"',
     ["sensitivity.inputs[2].key", "unknown key", "did you mean 'layers[1].retardation_factor'"]),
    ('key = "layers[1].retardation_factor"', 'key = "layers[4].retardation_factor"',
     ["sensitivity.inputs[2].key", "layers has 1 entry", "indices 1 to 1"]),
    ('key = "layers[1].retardation_factor"', 'key = "layers[1].dispersivity"',
     ["the scenario does not give layers[1].dispersivity", "give layers[1].dispersivity"]),
    ('key = "layers[1].retardation_factor"', 'key = "layers[1].name"',
     ["layers[1].name = 'clay', not a number"]),
    ('key = "layers[1].retardation_factor"', 'key = "output.times"',
     ["cannot be varied"]),
    ('low = 1.0\nhigh = 5.0', 'low = 5.0\nhigh = 1.0',
     ["sensitivity.inputs[2].low", "reversed bounds", "swap low and high"]),
    ('low = "1.0e-9 m^2/s"', 'low = "1.0e-9 m"',
     ["sensitivity.inputs[1].low", "not a valid value for layers[1].pore_diffusivity"]),
    ('low = "1.0e-9 m^2/s"', 'low = "1.06e-9 m^2/s"',
     ["lies outside the range", "widen low/high"]),
    ('distribution = "uniform"\nlow = 1.0', 'distribution = "uniformm"\nlow = 1.0',
     ["sensitivity.inputs[2].distribution", "unknown distribution", "did you mean 'uniform'"]),
    ('distribution = "uniform"\nlow = 1.0\nhigh = 5.0',
     'distribution = "normal"\nmean = 3.0\nsd = 1.0',
     ["sensitivity.inputs[2].lower", "can draw negative values", "add a lower bound"]),
    ('distribution = "uniform"\nlow = 1.0\nhigh = 5.0',
     'distribution = "lognormal"\nmedian = 3.0',
     ["sensitivity.inputs[2].log_sd", "missing for a lognormal distribution"]),
    ('distribution = "uniform"\nlow = 1.0\nhigh = 5.0',
     'distribution = "lognormal"\nmedian = 3.0\nlog_sd = -1',
     ["sensitivity.inputs[2]", "log_sd >= 0", "correct the distribution"]),
    ("samples = 8", "samples = 48", ["sensitivity.samples", "power of two", "use 32 or 64"]),
    ('metric = "mass_to_receptor"', 'metric = "peak_concentraton"',
     ["sensitivity.metric", "did you mean 'peak_concentration'"]),
    ('metric = "mass_to_receptor"', 'metric = "first_exceedance"',
     ["needs a screening level", "add output.screening_level"]),
    ('window = "whole-run"', 'window = "design-life"', ["no design life"]),
])
def test_bad_sensitivity_tables_name_file_key_and_fix(old, new, fragments):
    """Each mistake is a ScenarioError naming the file, the key path and the fix."""
    text = slab_text()
    assert old in text
    message = study_error(text.replace(old, new))
    for fragment in fragments:
        assert fragment in message, (fragment, message)


def test_a_scenario_without_sensitivity_table_is_refused():
    text = slab_text().split("[sensitivity]")[0]
    assert "no [sensitivity] table" in study_error(text)


def test_an_invalid_sampled_value_names_the_run_and_its_inputs():
    """A range that reaches a porosity above 1 is refused before any solve, naming the
    run, every input value of it and the scenario's own key."""
    text = slab_text().replace('key = "layers[1].retardation_factor"\ndistribution = '
                               '"uniform"\nlow = 1.0\nhigh = 5.0',
                               'key = "layers[1].porosity"\nlow = 0.3\nhigh = 1.2')
    study = parse_study(text, "slab.toml")
    with pytest.raises(ScenarioError) as info:
        run_study(study, one_at_a_time_only=True)
    message = str(info.value)
    for fragment in ("slab.toml: sensitivity.inputs", "run 4", "layers[1].porosity = 1.2",
                     "layers[1].pore_diffusivity = 1.05e-09 m^2/s", "narrow the low/high"):
        assert fragment in message, (fragment, message)


def test_toml_text_round_trips_every_scenario():
    """Parsed TOML written back and read again is the same data, and the same column
    (an identity; tomllib is the reference reader, TOML 1.0)."""
    for path in sorted((ROOT / "scenarios").rglob("*.toml")):
        text = path.read_text(encoding="utf-8")
        data = tomllib.loads(text)
        assert tomllib.loads(toml_text(data)) == data, path.name
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    again = parse_scenario(toml_text(data), DEMO)
    assert again.column == load_scenario(DEMO).column
    odd = {"s": 'quote " back \\ tab\t del\x7f é', "f": [1e-300, -0.0, 1.5], "d": {"a b": 1}}
    assert tomllib.loads(toml_text(odd)) == odd


def test_demo_study_reads():
    """The demo: five inputs, four with a distribution, the written ranges kept."""
    study = load_study(DEMO)
    assert len(study.spec.inputs) == 5 and len(study.spec.sampled) == 4
    oc = study.spec.inputs[1]
    assert (oc.low, oc.base, oc.high) == pytest.approx((0.001, 0.004, 0.01))


# ------------------------------------------------------------------------- the command
def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_cli_writes_table_figures_and_runs_with_cautions(tmp_path):
    """sensitivity: exit 0; the table, indices and method are printed; the CSV, the
    NetCDF of every run and both figures are written, each with the caution; the
    NetCDF passes CF-1.11 (IOOS compliance-checker)."""
    from test_netcdf import failed_items, run_cf_checker

    study = tmp_path / "slab.toml"
    study.write_text(slab_text(), encoding="utf-8")
    result = invoke("sensitivity", study, "-o", tmp_path / "out")
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    for fragment in ("S_i [95 %]", "S_Ti [95 %]", "layers[1].retardation_factor",
                     "Saltelli et al. 2010", "Jansen 1999", "CAUTION", "Seed: 7"):
        assert fragment in text, fragment
    out = tmp_path / "out"
    csv_text = (out / "slab_sensitivity.csv").read_text(encoding="utf-8")
    assert f"# {CAUTION}" in csv_text and "rank,input,unit,base,low,high" in csv_text
    ds = xr.open_dataset(out / "slab_runs.nc")
    try:
        assert ds.attrs["comment"] == CAUTION and ds["metric"].attrs["comment"] == CAUTION
        assert ds.sizes["run"] == 5 + 8 * 4 and "Jansen 1999" in ds.attrs["references"]
        assert ds["metric"].attrs["units"] == "kg m-2"
        assert ds.attrs["scenario_text"] == study.read_text(encoding="utf-8")
    finally:
        ds.close()
    for name in ("slab_tornado.png", "slab_indices.png"):
        assert (out / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    report = run_cf_checker(out / "slab_runs.nc")
    assert failed_items(report, "high") == [] and failed_items(report, "medium") == []


def _snapshot(directory):
    return {p.name: p.read_bytes() for p in sorted(Path(directory).iterdir())}


def test_failed_studies_leave_earlier_files_byte_identical(tmp_path, monkeypatch):
    """After a good study: an invalid value (exit 2), a refused run (exit 3, naming the
    run's input values) and a failure while drawing leave every file as it was, with
    no temporary file behind (transport/io/atomic.py)."""
    study = tmp_path / "slab.toml"
    study.write_text(slab_text(), encoding="utf-8")
    out = tmp_path / "out"
    assert invoke("sensitivity", study, "-o", out, "--samples", "8").exit_code == 0
    before = _snapshot(out)

    study.write_text(slab_text().replace("high = 5.0", "high = 5.0\n\n[[sensitivity.inputs]]"
                                         '\nkey = "layers[1].porosity"\nlow = 0.3\n'
                                         "high = 1.5"), encoding="utf-8")
    bad = invoke("sensitivity", study, "-o", out)
    assert bad.exit_code == 2 and "layers[1].porosity = 1.5" in " ".join(bad.output.split())
    assert "Traceback" not in bad.output
    assert _snapshot(out) == before

    study.write_text(slab_text(), encoding="utf-8")
    real = sensitivity_module.solve_scenario

    def refuse_slow_runs(scenario, **kw):
        if scenario.column.layers[0].diffusivity > 1.09e-9:
            raise UnreliableResultError("no engine could vouch for the test's value")
        return real(scenario, **kw)

    monkeypatch.setattr(sensitivity_module, "solve_scenario", refuse_slow_runs)
    refused = invoke("sensitivity", study, "-o", out)
    text = " ".join(refused.output.split())
    assert refused.exit_code == 3, refused.output
    assert "layers[1].pore_diffusivity = 1.1e-09 m^2/s" in text and "refused" in text
    assert _snapshot(out) == before
    monkeypatch.setattr(sensitivity_module, "solve_scenario", real)

    def broken_figure(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(plot_module, "plot_indices", broken_figure)
    failed = invoke("sensitivity", study, "-o", out)
    assert failed.exit_code == 2 and "No space left on device" in failed.output
    assert _snapshot(out) == before


def test_first_exceedance_already_reached_at_the_earliest_output_is_noted(monkeypatch):
    """A run whose receptor is above the level at the earliest output time gives that
    time as its first exceedance (the crossing lies earlier, unresolved): the study
    notes it with the run, as the metrics say (ReceptorMetrics.exceeded_at_start, whose
    case is checked against mpmath in test_metrics). Here the metrics are those of a
    run above the level from the start, by construction."""
    from types import SimpleNamespace

    from transport.analysis import sensitivity as sens
    from transport.analysis.metrics import ReceptorMetrics

    year = 365.25 * 86400
    m = ReceptorMetrics(1.0, 1e-3, 50 * year, 1 * year, 49 * year, 10 * year, 0.5, None,
                        None, None, False, window_start=1 * year)
    monkeypatch.setattr(sens, "solve_scenario", lambda *a, **k: (None, []))
    monkeypatch.setattr(sens, "receptor_metrics", lambda *a, **k: m)
    out = SimpleNamespace(receptor_depth=1.0, design_life=50 * year, times=[year],
                          screening_level=1e-3)
    spec = SimpleNamespace(window="design-life",
                           metric=SimpleNamespace(name="first_exceedance",
                                                  field="first_exceedance"))
    value, censored, notes = sens.measure(SimpleNamespace(output=out), spec, None)
    assert value == 1 * year and not censored
    assert any("already reached at the earliest output time (1 yr)" in str(w) for w in notes)
