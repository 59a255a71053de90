"""``stratiflux plot`` on every NetCDF file the tool writes: a single run, a comparison
(``scenario`` dimension) and a site (``station`` dimension), each made here from the
bundled demo scenarios and data on small grids; anything else gets one paragraph and
exit status 2, never a traceback.

Each figure is a PNG (signature from the PNG specification, W3C / ISO 15948, section
5.2) and passes the readability checks of tests/test_plots.py (common practice for
report figures: nothing cut at the edge, legends off the curves, caution in the footer,
the screening level visible, the design life marked at its time).
"""
from __future__ import annotations

import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from test_plots import PNG_SIGNATURE, assert_readable, level_visible
from transport.cli.main import main
from transport.io.gis import station_table
from transport.io.netcdf import read_column_netcdf
from transport.plot.compare import breakthrough_comparison, view_of_dataset
from transport.plot.site_map import crs_name, scale_bar_length, site_map_figure
from transport.units import MG_PER_L, YEAR

ROOT = Path(__file__).resolve().parents[1]
LIFE_YR = 50.0  # the design life written in the demo scenarios


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def small(text: str, spacing: str | None = "5 cm") -> str:
    """A demo scenario with 12 output times (and a coarser depth grid): the same case,
    fast."""
    if spacing:
        text = re.sub(r'depth_spacing = "[^"]*"', f'depth_spacing = "{spacing}"', text)
    return re.sub(r"count = \d+", "count = 12", text)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    root = tmp_path_factory.mktemp("plotcmd")
    run_toml = root / "spill.toml"
    run_toml.write_text(small((ROOT / "scenarios/spill-layered-column.toml").read_text()))
    assert cli("run", run_toml, "-o", root / "spill.nc").exit_code == 0
    cmp_toml = root / "depot.toml"
    cmp_toml.write_text(small((ROOT / "scenarios/depot-alternatives.toml").read_text(),
                              spacing=None))
    result = cli("compare", cmp_toml, "-o", root / "cmp")
    assert result.exit_code == 0, result.output
    site = root / "site"
    site.mkdir()
    shutil.copy(ROOT / "data/site-demo/site.toml", site / "site.toml")
    borings = (ROOT / "data/site-demo/borings.csv").read_text().splitlines()
    keep = borings[:2] + borings[2:8]  # comment, header and six borings
    (site / "borings.csv").write_text("\n".join(keep) + "\n")
    ids = {line.split(",")[0] for line in keep[2:]}
    log = (ROOT / "data/site-demo/layer-log.csv").read_text().splitlines()
    (site / "layer-log.csv").write_text(
        "\n".join(log[:2] + [ln for ln in log[2:] if ln.split(",")[0] in ids]) + "\n")
    result = cli("site", site / "site.toml", "-o", root / "siteout")
    assert result.exit_code == 0, result.output
    return {"run": root / "spill.nc", "comparison": root / "cmp" / "comparison.nc",
            "site": root / "siteout" / "site.nc"}


def pngs(output):
    return [Path(line) for line in output.splitlines() if line.endswith(".png")]


def assert_pngs(paths, count):
    assert len(paths) == count
    for path in paths:
        assert path.read_bytes()[:8] == PNG_SIGNATURE and path.stat().st_size > 10_000


def test_plot_a_run_file(files, tmp_path):
    """Profiles and breakthrough; the design life given on the command line is drawn."""
    result = cli("plot", files["run"], "--out", tmp_path, "--design-life", LIFE_YR)
    assert result.exit_code == 0, result.output
    assert_pngs(pngs(result.output), 2)


def test_plot_a_comparison_file(files, tmp_path):
    """Metrics and profiles from the file; the breakthrough with a receptor depth."""
    result = cli("plot", files["comparison"], "--out", tmp_path)
    assert result.exit_code == 0, result.output
    assert_pngs(pngs(result.output), 2)
    assert "--receptor-depth" in result.output  # says how to get the third figure
    result = cli("plot", files["comparison"], "--out", tmp_path, "--receptor-depth", 4,
                 "--screening-level", 0.005, "--design-life", LIFE_YR)
    assert result.exit_code == 0, result.output
    assert_pngs(pngs(result.output), 3)


def test_comparison_figure_from_the_file_is_readable(files):
    """Level inside the visible range, design life at 50 yr, nothing cut or covered;
    the curve of each alternative is the stored concentration at 4 m (interpolated
    linearly in depth, numpy.interp as an independent check)."""
    ds = read_column_netcdf(files["comparison"])
    view = view_of_dataset(ds, receptor_depth=4.0, screening_level=5e-6,
                           design_life=LIFE_YR * YEAR)
    fig = breakthrough_comparison(view, "Comparison of alternatives")
    assert level_visible(fig, 5e-6 / MG_PER_L)
    ax = fig.axes[0]
    life = [ln for ln in ax.lines if ln.get_label().startswith("design life")]
    assert len(life) == 1 and life[0].get_xdata()[0] == pytest.approx(LIFE_YR)
    depths = ds["depth"].values
    for k, label in enumerate(ds["label"].values):
        curve = [ln for ln in ax.lines if ln.get_label() == str(label)][0]
        expected = [np.interp(4.0, depths, row) for row in ds["concentration"].values[k]]
        np.testing.assert_allclose(curve.get_ydata(), np.array(expected) / MG_PER_L)
    assert_readable(fig)


def test_plot_a_site_file(files, tmp_path):
    """A site file gives the map; the map names each boring and the CRS, with a north
    arrow and a scale bar."""
    result = cli("plot", files["site"], "--out", tmp_path)
    assert result.exit_code == 0, result.output
    assert_pngs(pngs(result.output), 1)
    table = station_table(files["site"])
    fig = site_map_figure(table)
    texts = {t.get_text() for ax in fig.axes for t in ax.texts}
    assert set(map(str, table["station_id"])) <= texts
    assert "N" in texts and any(t.endswith(" m") for t in texts)
    # pyproj names EPSG:32630 "WGS 84 / UTM zone 30N" (EPSG registry, code 32630)
    assert crs_name(table.attrs["crs_wkt"]) == "WGS 84 / UTM zone 30N (EPSG:32630)"
    assert "WGS 84 / UTM zone 30N" in " ".join(t.get_text() for t in fig.findobj(
        lambda a: hasattr(a, "get_text"))).replace("\n", " ")
    assert_readable(fig)


def _grid_table(n: int, spacing: float, mc: bool = True):
    """A station table of ``n`` borings on a square grid (invented positions and values:
    a drawing test, no result is checked here)."""
    import pandas as pd

    side = int(np.ceil(np.sqrt(n)))
    k = np.arange(n)
    table = pd.DataFrame({"x_m": 500000.0 + spacing * (k % side),
                          "y_m": 5700000.0 + spacing * (k // side),
                          "station_id": [f"BH-{i:05d}" for i in k],
                          "breakthrough_yr": np.where(k % 7 == 0, np.nan, 5.0 + k % 40),
                          "exceedance_probability": (k % 11) / 10.0})
    table.attrs.update(realizations=16 if mc else 0, design_life_yr=50.0,
                       title="Invented yard", screening_level_mg_L=0.005, crs_wkt="")
    return table


@pytest.mark.parametrize("n", [2500, 30])
def test_site_map_stays_readable_as_borings_crowd(n):
    """Markers never overlap their neighbours, and boring ids are drawn only where they
    fit between the borings (else the title says where the ids are): overprinted
    labels and merged discs cannot be read (common practice for report maps)."""
    from matplotlib.collections import PathCollection

    fig = site_map_figure(_grid_table(n, 10.0))
    fig.canvas.draw()
    ax = fig.axes[0]
    metre = abs(ax.transData.transform((10.0, 0.0))[0] - ax.transData.transform((0.0, 0.0))[0])
    metre *= 72.0 / fig.dpi / 10.0  # points per metre as drawn
    discs = [c for c in ax.collections if isinstance(c, PathCollection)]
    diameter = max(float(np.sqrt(c.get_sizes().max())) for c in discs)  # points
    assert diameter <= 0.85 * 10.0 * metre
    labels = [t for a in fig.axes for t in a.texts if t.get_text().startswith("BH-")]
    title = " ".join(t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text")))
    if n > 100:
        assert labels == []
        assert "too close together" in title.replace("\n", " ")
    else:
        assert len(labels) == 2 * n  # both panels
        widest = max(t.get_window_extent().width for t in labels) * 72.0 / fig.dpi
        assert widest < 10.0 * metre  # a label fits between two borings
    assert_readable(fig)


def test_scale_bar_lengths_are_round():
    """1, 2 or 5 times a power of ten, at most a fifth of the span (common practice)."""
    for span, expected in ((180.0, 20.0), (1000.0, 200.0), (26.0, 5.0), (7.0, 1.0)):
        assert scale_bar_length(span) == expected


def test_other_files_get_one_paragraph(tmp_path):
    """A NetCDF file of another program, and a file that is not NetCDF: exit 2, a
    message naming what was expected, no traceback."""
    other = tmp_path / "other.nc"
    xr.Dataset({"a": ("x", [1.0, 2.0])}).to_netcdf(other)
    text = tmp_path / "notes.nc"
    text.write_text("not a NetCDF file\n")
    for path in (other, text):
        result = cli("plot", path, "--out", tmp_path)
        assert result.exit_code == 2
        assert "Traceback" not in result.output and result.exception is None or \
            isinstance(result.exception, SystemExit)
        assert "stratiflux" in result.output
