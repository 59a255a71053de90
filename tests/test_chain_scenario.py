"""A decay chain from a scenario file ([[chain]]) through `stratiflux run` and `plot`.

The engine itself is checked in tests/test_chain.py (Sun, Petersen & Clement 1999 with
van Genuchten & Alves 1982; an mpmath matrix-exponential reference).  Here: the scenario
builds the chain the documented way (each daughter's layers re-derived with its own
K_oc and D_w: R = 1 + rho_b K_oc f_oc / theta, Freeze & Cherry 1979 eq. 9.14, from
memory; yields from IUPAC molar masses), the file holds every species on one grid and
passes the CF checker, and the commands that take one species say so.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from test_netcdf import failed_items, run_cf_checker
from transport.cli.main import main
from transport.model import chemicals
from transport.model.column import InitialState
from transport.scenario.reader import ScenarioError
from transport.scenario.schema import load_scenario, parse_scenario
from transport.solvers.laplace.chain import solve_chain_laplace

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "dry-cleaner-chain.toml"

BASE = """
title = "Otterby tannery (fictional): chain"
[chemical]
name = "tetrachloroethene"
half_life = "3 yr"
[flow]
darcy_flux = "0.2 m/yr"
[[layers]]
name = "fill"
thickness = "1.0 m"
porosity = 0.35
water_content = 0.25
bulk_density = "1.7 g/cm^3"
organic_carbon_fraction = 0.002
{layer_extra}
[[chain]]
name = "trichloroethene"
half_life = "2 yr"
{chain_extra}
[top]
kind = "concentration"
concentration = "20 mg/L"
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr", "5 yr"]
depths = ["0 m", "0.5 m", "1 m"]
{more}
"""


def _text(layer_extra="", chain_extra="", more=""):
    return BASE.format(layer_extra=layer_extra, chain_extra=chain_extra, more=more)


def test_daughter_layers_follow_their_own_chemical():
    sc = parse_scenario(_text())
    pce, tce = chemicals.lookup("PCE"), chemicals.lookup("TCE")
    assert sc.chain.names == ("tetrachloroethene", "trichloroethene")
    assert math.isclose(sc.chain.yields[1], tce.molar_mass / pce.molar_mass, rel_tol=1e-12)
    for col, chem in zip(sc.chain.columns, (pce, tce)):
        lay = col.layers[0]
        # R = 1 + rho_b Koc foc / theta (Freeze & Cherry 1979, from memory)
        R = 1 + 1700.0 * chem.organic_carbon_partition * 0.002 / 0.25
        assert math.isclose(lay.retardation, R, rel_tol=1e-12)
    assert math.isclose(sc.chain.columns[1].layers[0].decay_rate, math.log(2) / (2 * 31557600.0),
                        rel_tol=1e-12)


def test_pore_diffusivity_is_scaled_by_the_free_water_ratio():
    sc = parse_scenario(_text('pore_diffusivity = "2e-10 m^2/s"'))
    ratio = (chemicals.lookup("TCE").free_water_diffusivity
             / chemicals.lookup("PCE").free_water_diffusivity)
    assert math.isclose(sc.chain.columns[1].layers[0].diffusivity, 2e-10 * ratio, rel_tol=1e-12)


@pytest.mark.parametrize("layer_extra, chain_extra, more, key, words", [
    ('retardation_factor = 3', "", "", "layers[1].retardation_factor", "organic_carbon_fraction"),
    ("", 'name = "trichloroethane"', "", "chain[1]", ""),
    ("", 'yield = -1', "", "chain[1].yield", ""),
    ("", 'colour = "red"', "", "chain[1].colour", "unknown key"),
    ("", "", '[[actions]]\nat = "2 yr"\nkind = "remove-source"', "chain", "not available"),
])
def test_chain_input_errors_name_the_key(layer_extra, chain_extra, more, key, words):
    text = _text(layer_extra, chain_extra, more)
    if 'name = "trichloroethane"' in text:
        text = text.replace('name = "trichloroethene"\n', "", 1)
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, "chain.toml")
    msg = str(info.value)
    assert "chain.toml" in msg and key in msg and words in msg


def test_parent_must_decay():
    text = _text().replace('half_life = "3 yr"\n', "", 1)
    with pytest.raises(ScenarioError, match="chemical.half_life"):
        parse_scenario(text, "chain.toml")


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("chain") / "dc.nc"
    res = CliRunner().invoke(main, ["run", str(DEMO), "-o", str(out)])
    assert res.exit_code == 0, res.output
    return out, res.output


def test_run_writes_every_species_and_they_equal_the_engine(demo_run):
    out, text = demo_run
    sc = load_scenario(DEMO)
    daughters = (InitialState.clean(),) * (len(sc.chain.names) - 1)
    ref = solve_chain_laplace(sc.chain, sc.times, sc.depths,
                              initials=(sc.initial,) + daughters)
    with xr.open_dataset(out, decode_times=False) as ds:
        assert list(ds["species_name"].values) == list(sc.chain.names)
        assert ds["concentration"].dims == ("species", "time", "depth")
        for j, sol in enumerate(ref):
            c = ds["concentration"].isel(species=j).values
            np.testing.assert_allclose(c, sol.concentration, rtol=0,
                                       atol=1e-8 * max(np.abs(sol.concentration).max(), 1e-30))
            b = {k: ds[v].isel(species=j).values for k, v in (
                ("stored", "stored_mass"), ("entered", "mass_entered_top"),
                ("left", "mass_left_bottom"), ("decayed", "mass_decayed"),
                ("produced", "mass_produced"), ("residual", "mass_balance_residual"))}
            scale = max(np.abs(b[k]).max() for k in b if k != "residual")
            assert np.abs(b["residual"]).max() <= 1e-8 * scale
        assert "regulator" in ds.attrs["comment"]
        assert ds.attrs["decay_chain"].startswith("tetrachloroethene -> trichloroethene")
    for name in sc.chain.names:
        assert f"species {name}" in " ".join(text.split())
    assert "CAUTION" in text


def test_allow_unreliable_leaves_out_each_species_metrics_it_cannot_vouch_for(
        tmp_path, monkeypatch):
    """A chain's receptor curves are the Laplace engine's, so a crossing or peak read
    between output times is vouched for by its own bound. With that bound made 1e9 x
    larger where a metric is read (the output times are vouched for as before), a plain
    run is refused (exit 3, no file); with --allow-unreliable the file is written with
    every species' fields equal to the chain engine's (as the test above) and no
    receptor metric, and the summary and the ``receptor_metrics`` attribute name each
    species left out."""
    from transport.solvers import chain

    path = tmp_path / "chain.toml"
    path.write_text(_text(more='receptor_depth = "1 m"\nscreening_level = "5 ug/L"'),
                    encoding="utf-8")
    real = chain.own_bound_at  # as the chain's evaluator reads it
    monkeypatch.setattr(chain, "own_bound_at", lambda t, solve: 1e9 * real(t, solve))
    res = CliRunner().invoke(main, ["run", str(path), "-o", str(tmp_path / "no.nc")])
    assert res.exit_code == 3, res.output
    assert not (tmp_path / "no.nc").exists()
    out = tmp_path / "chain.nc"
    res = CliRunner().invoke(main, ["run", str(path), "-o", str(out), "--allow-unreliable"])
    assert res.exit_code == 0, res.output
    text = " ".join(res.output.split())
    sc = load_scenario(path)
    ref = solve_chain_laplace(sc.chain, sc.times, sc.depths,
                              initials=(sc.initial, InitialState.clean()))
    with xr.open_dataset(out, decode_times=False) as ds:
        note = ds.attrs["receptor_metrics"]
        assert "peak_concentration" not in ds
        for j, (name, sol) in enumerate(zip(sc.chain.names, ref)):
            assert f"{name}: not reported: the" in note
            np.testing.assert_allclose(ds["concentration"].isel(species=j).values,
                                       sol.concentration, rtol=0,
                                       atol=1e-8 * np.abs(sol.concentration).max())
    assert text.count("CAUTION: receptor metrics not reported") == 2


def test_chain_file_passes_the_cf_checker(demo_run):
    report = run_cf_checker(demo_run[0])
    assert failed_items(report, "high") == []
    assert failed_items(report, "medium") == []


def test_plot_draws_each_species(demo_run, tmp_path):
    res = CliRunner().invoke(main, ["plot", str(demo_run[0]), "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    names = sorted(p.name for p in tmp_path.glob("*.png"))
    assert len(names) == 9 and "dc_vinyl-chloride_breakthrough.png" in names
    assert "dc_chain_breakthrough.png" in names


def test_single_species_commands_refuse_a_chain_with_the_fix(tmp_path):
    res = CliRunner().invoke(main, ["report", str(DEMO), "-o", str(tmp_path / "r.html")])
    assert res.exit_code == 2
    assert "this command takes one species" in " ".join(res.output.split())
    res = CliRunner().invoke(main, ["run", str(DEMO), "-o", str(tmp_path / "x.nc"),
                                    "--engine", "modal"])
    assert res.exit_code == 2 and "solved by the Laplace engine" in " ".join(res.output.split())


def test_check_prints_each_daughters_layers():
    res = CliRunner().invoke(main, ["check", str(DEMO)])
    assert res.exit_code == 0, res.output
    # yield TCE / PCE from IUPAC atomic weights: 131.38 / 165.822
    assert "Daughter trichloroethene (yield 0.7923 kg per kg of its parent decayed)" in res.output
    assert "Daughter vinyl chloride" in res.output
