"""Hostile input: every bad scenario or site file gets one ScenarioError naming the
file, the key and the fix, within seconds; nothing is accepted that the model cannot
represent.  All inputs are invented test data (an invented site)."""
from __future__ import annotations

import os
import threading
import time

import numpy as np
import pytest

from test_site import BORINGS, LOG, SITE_TOML, write_small_site
from transport.solvers import laplace
from transport.solvers.laplace import transfer as laplace_transfer
from transport.analysis.metrics import receptor_metrics
from transport.api import solve_scenario
from transport.scenario.schema import (ScenarioError, load_alternatives, load_scenario,
                                parse_scenario, starter_scenario_text)
from transport.scenario.reader import MAX_TOML_BYTES
from transport.site.config import load_site

STARTER = starter_scenario_text()
SECRET = "root:x:0:0:secret-line-of-another-file:/root:/bin/bash"


def error_of(text, path="case.toml", seconds=5.0):
    """The ScenarioError that parsing ``text`` raises, within ``seconds``."""
    t0 = time.perf_counter()
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, path)
    assert time.perf_counter() - t0 < seconds
    assert str(info.value).startswith(f"{path}: ")
    return info.value


def with_(old, new, text=STARTER):
    assert old in text, old
    return text.replace(old, new, 1)


def finishes(fn, seconds=5.0):
    """Run fn in a thread: (result or exception) if it finished within ``seconds``."""
    out = {}

    def target():
        try:
            out["value"] = fn()
        except BaseException as exc:  # noqa: BLE001 - handed to the test
            out["error"] = exc
    th = threading.Thread(target=target, daemon=True)
    th.start()
    th.join(seconds)
    assert not th.is_alive(), f"still running after {seconds} s"
    return out


# --------------------------------------------------------------- duplicate layer names
THREE = with_('''[[layers]]
name = "sand"''', '''[[layers]]
name = "clay"
thickness = "0.5 m"
porosity = 0.45
bulk_density = "1.6 g/cm^3"
distribution_coefficient = "2 L/kg"
dispersivity = "0.02 m"

[[layers]]
name = "fill"''').replace('name = "fill"', 'name = "silt"')


def test_amend_layer_of_a_name_two_layers_share_is_refused():
    text = THREE + '\n[[actions]]\nat = "5 yr"\nkind = "amend-layer"\nlayer = "silt"\nhalf_life = "3 yr"\n'
    err = error_of(text)
    assert err.key == "actions[1].layer"
    assert "layers[1], layers[3]" in str(err) and "rename" in str(err)


def test_set_flow_keeps_each_same_named_layer_its_own_properties():
    """Two layers named "silt" with different dispersivities: a new Darcy flux re-derives
    each from its own table (before, both took the last one's)."""
    text = THREE.replace('dispersivity = "0.1 m"', 'dispersivity = "0.6 m"')
    staged = parse_scenario(text + '\n[[actions]]\nat = "5 yr"\nkind = "set-flow"\n'
                            'darcy_flux = "0.3 m/yr"\n')
    direct = parse_scenario(text.replace('darcy_flux = "0.1 m/yr"', 'darcy_flux = "0.3 m/yr"'))
    got = [lay.diffusivity for lay in staged.timeline.stages[-1].column.layers]
    want = [lay.diffusivity for lay in direct.column.layers]
    assert got == pytest.approx(want, rel=1e-14)
    assert got[0] != pytest.approx(got[2], rel=1e-3)


# ------------------------------------------------------------- accepted but should not
def test_design_life_before_the_first_output_time_is_refused():
    err = error_of(with_('design_life = "30 yr"', 'design_life = "0.5 yr"'))
    assert err.key == "output.design_life" and "earliest" in str(err)


def test_a_run_without_a_positive_output_time_is_refused():
    err = error_of(with_('times = { start = "1 yr", stop = "50 yr", count = 20 }',
                         'times = ["0 yr"]').replace('design_life = "30 yr"', ''))
    assert err.key == "output.times" and "after 0" in str(err)


def test_negative_source_rate_is_refused_with_the_reason():
    err = error_of(with_('dispersivity = "0.05 m"',
                         'dispersivity = "0.05 m"\nsource_rate = "-0.1 mg/L/d"'))
    assert err.key == "layers[1].source_rate"
    assert "negative" in str(err) and "half_life" in str(err)


@pytest.mark.parametrize("end, q", [("top", "-0.1 m/yr"), ("bottom", "0.1 m/yr")])
def test_inlet_where_the_water_leaves_is_refused(end, q):
    text = with_('darcy_flux = "0.1 m/yr"', f'darcy_flux = "{q}"')
    if end == "top":
        text = with_('kind = "concentration"', 'kind = "inlet"', text)
    else:
        text = with_('[bottom]\nkind = "free-outflow"',
                     '[bottom]\nkind = "inlet"\nconcentration = "1 mg/L"', text)
    err = error_of(text)
    assert err.key == f"{end}.kind" and "leaves the column" in str(err)


def test_inlet_at_the_bottom_under_upward_flow_is_accepted():
    text = with_('darcy_flux = "0.1 m/yr"', 'darcy_flux = "-0.1 m/yr"')
    text = with_('kind = "concentration"            #', 'kind = "sealed"            #', text)
    text = with_('concentration = "10 mg/L"', '', text)
    text = with_('[bottom]\nkind = "free-outflow"',
                 '[bottom]\nkind = "inlet"\nconcentration = "1 mg/L"', text)
    assert parse_scenario(text).column.bottom.kind == "inlet"


def test_set_flow_that_turns_an_inlet_into_an_outlet_is_refused():
    text = with_('kind = "concentration"', 'kind = "inlet"') + (
        '\n[[actions]]\nat = "5 yr"\nkind = "set-flow"\ndarcy_flux = "-0.05 m/yr"\n')
    err = error_of(text)
    assert err.key == "actions[1].darcy_flux" and "leaves the column" in str(err)


def test_broken_alternatives_fail_on_load(tmp_path):
    """load_scenario (what `stratiflux check` calls) validates every alternative."""
    path = tmp_path / "alts.toml"
    path.write_text(STARTER + '\n[[alternatives]]\nname = "A"\nactions = []\n\n'
                    '[[alternatives]]\nname = "B"\nactions = [{ at = "2 yr", kind = '
                    '"remove-sorce" }]\n', encoding="utf-8")
    for load in (load_scenario, load_alternatives):
        with pytest.raises(ScenarioError) as info:
            load(path)
        assert info.value.key == "alternatives[2].actions[1].kind"
        assert "remove-source" in str(info.value)


# --------------------------------------------------------------------- extreme values
@pytest.mark.parametrize("old, new, key", [
    ('tortuosity = "millington-quirk"', 'pore_diffusivity = "1e308 m^2/s"',
     "layers[1].pore_diffusivity"),
    ('dispersivity = "0.05 m"', 'dispersivity = "1e308 m"', "layers[1].dispersivity"),
    ('name = "trichloroethene"', 'name = "trichloroethene"\nhalf_life = "1e-308 yr"',
     "chemical.half_life"),
    ('darcy_flux = "0.1 m/yr"', 'darcy_flux = "1e308 m/yr"', "flow.darcy_flux"),
    ('organic_carbon_fraction = 0.002', 'retardation_factor = 1e308',
     "layers[1].retardation_factor"),
    ('screening_level = "5 ug/L"', 'screening_level = "1e-308 ug/L"', "output.screening_level"),
    ('dispersivity = "0.05 m"', 'dispersivity = "0.05 m"\ninitial_concentration = "1e300 mg/L"',
     "layers[1].initial_concentration"),
    ('concentration = "10 mg/L"', 'concentration = "1e308 mg/L"', "top.concentration"),
    ('organic_carbon_fraction = 0.002', 'distribution_coefficient = "1e300 L/kg"',
     "layers[1].distribution_coefficient"),
])
def test_values_the_model_cannot_represent_are_refused_with_the_range(old, new, key):
    err = error_of(with_(old, new))
    assert err.key == key
    assert "outside what the model represents" in str(err) and "Allowed:" in str(err)


def test_advection_the_engines_cannot_invert_is_refused_up_front():
    """1000 m/yr through a layer with D = 1e-20 m^2/s and no dispersivity: before, the
    Laplace engine tried to allocate 164 GiB for its contour."""
    text = with_('darcy_flux = "0.1 m/yr"', 'darcy_flux = "1000 m/yr"')
    text = with_('tortuosity = "millington-quirk"', 'pore_diffusivity = "1e-20 m^2/s"', text)
    err = error_of(with_('dispersivity = "0.05 m"', 'dispersivity = "0 m"', text))
    assert err.key == "flow.darcy_flux" and "dispersivity" in str(err) and "'fill'" in str(err)


def test_deeply_nested_toml_is_refused():
    for text in ("x = " + "[" * 500 + "]" * 500 + "\n",
                 "x = " + "{a = " * 300 + "1" + "}" * 300 + "\n"):
        err = error_of(text)
        assert err.key == "(TOML syntax)" and "nested" in str(err)


def test_utf8_byte_order_mark_is_accepted(tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + STARTER.encode("utf-8"))
    assert load_scenario(path).column.length == pytest.approx(3.0)


def test_list_indices_in_messages_count_from_one():
    err = error_of(with_('times = { start = "1 yr", stop = "50 yr", count = 20 }',
                         'times = ["1 yr", "-1 yr"]'))
    assert err.key == "output.times[2]"
    err = error_of(STARTER + '[initial]\nsamples = [["0 m", "1 mg/L"], ["9 m", "0 mg/L"]]\n')
    assert err.key == "initial.samples[2][1]"


# ------------------------------------------------------------------ input paths
def _special_paths(tmp_path):
    paths = {"folder": tmp_path}
    if os.path.exists("/dev/zero"):
        paths["device"] = "/dev/zero"
    if hasattr(os, "mkfifo"):
        fifo = tmp_path / "pipe.toml"
        os.mkfifo(fifo)
        paths["FIFO"] = fifo
    big = tmp_path / "big.toml"
    with open(big, "wb") as fh:
        fh.truncate(MAX_TOML_BYTES + 1)
    paths["MB"] = big
    return paths


def test_devices_fifos_folders_and_huge_files_are_refused_at_once(tmp_path):
    for what, path in _special_paths(tmp_path).items():
        out = finishes(lambda: load_scenario(path))
        err = out.get("error")
        assert isinstance(err, ScenarioError), (what, out)
        assert str(path) in str(err) and what in str(err)


def test_a_data_file_that_is_a_fifo_is_refused_at_once(tmp_path):
    if not hasattr(os, "mkfifo"):
        pytest.skip("no FIFOs here")
    os.mkfifo(tmp_path / "profile.csv")
    scen = tmp_path / "case.toml"
    scen.write_text(STARTER + '[initial]\nsamples_file = "profile.csv"\n', encoding="utf-8")
    err = finishes(lambda: load_scenario(scen))["error"]
    assert isinstance(err, ScenarioError) and err.key == "initial.samples_file"
    assert "FIFO" in str(err)


def test_an_unrelated_file_is_named_but_never_echoed(tmp_path):
    other = tmp_path / "passwd"
    other.write_text(SECRET + "\ndaemon:x:1:1::/usr/sbin:/usr/sbin/nologin\n", encoding="utf-8")
    cases = [
        (STARTER + f'[initial]\nsamples_file = "{other}"\n', "initial.samples_file"),
        (with_('concentration = "10 mg/L"', f'concentration = {{ table_file = "{other}" }}'),
         "top.concentration.table_file"),
    ]
    for text, key in cases:
        err = error_of(text, path=str(tmp_path / "case.toml"))
        assert err.key.startswith(key) and "passwd" in str(err)
        assert "secret-line" not in str(err)
    site = write_small_site(tmp_path, toml=SITE_TOML.replace('"borings.csv"', f'"{other}"'))
    with pytest.raises(ScenarioError) as info:
        load_site(site)
    assert "passwd" in str(info.value) and "secret-line" not in str(info.value)
    assert "id, x and y" in str(info.value)


# ------------------------------------------------------------------ memory cliffs
def test_an_output_grid_beyond_the_memory_budget_is_refused_with_its_size():
    text = with_('count = 20', 'count = 3000')
    text = with_('depth_spacing = "2 cm"', 'depth_spacing = "1 mm"', text)
    err = error_of(text)
    assert err.key == "output" and "GB of memory" in str(err) and "3000 output times" in str(err)


def test_ten_thousand_layers_are_refused_before_they_are_built():
    layer = '[[layers]]\nname = "x"\nthickness = "0.3 mm"\nporosity = 0.3\n'
    head, tail = STARTER.split("[[layers]]", 1)
    text = head + layer * 10_000 + "[top]" + tail.split("[top]", 1)[1]
    err = error_of(text, seconds=10)
    assert err.key == "layers" and "10000 layers" in str(err)


# ------------------------------------------------------------------ site files
def test_site_duplicated_column_is_refused(tmp_path):
    borings = BORINGS.replace("id,x [m],y [m],", "id,x [m],y [m],x [m],").replace(
        "500000.0,5600000.0,", "500000.0,5600000.0,1.0,")
    with pytest.raises(ScenarioError, match="'x' appears twice"):
        load_site(write_small_site(tmp_path, borings=borings))


def test_site_lon_lat_typed_into_projected_x_y_is_refused(tmp_path):
    rows = BORINGS.splitlines()
    lonlat = [rows[0]] + [f"{r.split(',')[0]},3.0{k},48.5{k},20.0" for k, r in enumerate(rows[1:])]
    with pytest.raises(ScenarioError, match="look like longitude and latitude"):
        load_site(write_small_site(tmp_path, borings="\n".join(lonlat) + "\n"))


def test_site_boring_outside_the_crs_area_of_use_is_refused(tmp_path):
    borings = BORINGS.replace("T-3,500061.0", "T-3,51230100.0")  # a slipped digit
    with pytest.raises(ScenarioError) as info:
        load_site(write_small_site(tmp_path, borings=borings))
    assert "boring T-3" in str(info.value) and "area of use" in str(info.value)


def test_site_hundred_thousand_unknown_borings_are_counted_not_listed(tmp_path):
    log = LOG + "".join(f"U-{k:06d},0,1,sand\n" for k in range(100_000))
    t0 = time.perf_counter()
    with pytest.raises(ScenarioError) as info:
        load_site(write_small_site(tmp_path, log=log))
    assert time.perf_counter() - t0 < 20
    text = str(info.value)
    assert "100000 boring(s) with problems" in text and "and 99980 more" in text
    assert len(text) < 5000


def test_site_log_of_five_thousand_intervals_is_refused(tmp_path):
    rows = "".join(f"T-1,{k * 0.0005:.4f},{(k + 1) * 0.0005:.4f},sand\n" for k in range(5000))
    log = "\n".join(ln for ln in LOG.splitlines() if not ln.startswith("T-1,")) + "\n" + rows
    with pytest.raises(ScenarioError, match="5000 intervals"):
        load_site(write_small_site(tmp_path, log=log))


def test_site_initial_concentration_beyond_the_model_is_refused(tmp_path):
    (tmp_path / "pore.csv").write_text("id,depth [m],concentration [mg/L]\nT-1,0.5,1e300\n",
                                       encoding="utf-8")
    site = write_small_site(tmp_path, toml=SITE_TOML.replace(
        'log_file = "log.csv"', 'log_file = "log.csv"\ninitial_file = "pore.csv"'))
    with pytest.raises(ScenarioError, match="outside what the model represents"):
        load_site(site)


def test_site_file_with_byte_order_mark_and_negative_source(tmp_path):
    path = write_small_site(tmp_path)
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    assert len(load_site(path).borings) == 5
    bad = write_small_site(tmp_path, toml=SITE_TOML.replace(
        'tortuosity = 0.6', 'tortuosity = 0.6\nsource_rate = "-1 mg/L/d"'))
    with pytest.raises(ScenarioError) as info:
        load_site(bad)
    assert info.value.key == "materials.sand.source_rate"


# --------------------------------------------------------------- cost of the metrics
def _stepped(n_steps):
    steps = ", ".join(f'["{i / 12:.6f} yr", "{10 if i % 2 == 0 else 4} mg/L"]'
                      for i in range(n_steps))
    text = with_('concentration = "10 mg/L"', f'concentration = {{ steps = [{steps}] }}')
    text = with_('depth_spacing = "2 cm"', 'depth_spacing = "10 cm"', text)
    return parse_scenario(with_("count = 20", "count = 10", text))


def test_metrics_of_a_monthly_stepped_source_served_by_laplace():
    """24 monthly steps served by the Laplace engine (each curve sample inverts 25
    switch-on groups): the receptor metrics come out, the first exceedance inside the
    run.  Its cost is measured by benchmarks/bench_checks.py, not here."""
    sc = _stepped(24)
    sol, _ = solve_scenario(sc, engine="laplace")
    m = receptor_metrics(sol, sc.output.receptor_depth, sc.output.screening_level,
                         sc.output.design_life)
    assert 1.0 < m.first_exceedance / (365.25 * 86400) < 30.0


def test_direct_lapack_call_gives_the_numbers_of_solve_banded(monkeypatch):
    """The engine's banded solves equal scipy.linalg.solve_banded's bit for bit."""
    from scipy.linalg import solve_banded

    sc = _stepped(3)
    times, depths = sc.times[:4], sc.depths[::5]
    fast = laplace.solve_laplace(sc.column, times, depths)

    def reference(kl, ku, ab, b, overwrite_ab=0, overwrite_b=0):
        b[:] = solve_banded((kl, ku), ab[kl:], b, check_finite=False)
        return None, None, b, 0
    monkeypatch.setattr(laplace_transfer, "zgbsv", reference)
    slow = laplace.solve_laplace(sc.column, times, depths)
    for name in ("concentration", "total_flux", "cumulative_mass", "error_estimate"):
        assert np.array_equal(getattr(fast, name), getattr(slow, name)), name
