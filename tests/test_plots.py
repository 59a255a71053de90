"""Figures: produced, non-empty PNG, axes with units, caution footer.

Unit conversions on the figures are checked against cf-units (UDUNITS-2): the shown
mg/L and years must equal the file's kg m-3 and seconds converted by that library.
The stand-in solution is the semi-infinite fixed-surface diffusion solution of Crank
(1975), *The Mathematics of Diffusion*, 2nd ed., eq. 2.45 (see tests/test_netcdf.py).
"""
from __future__ import annotations

import cf_units
import matplotlib.image
import numpy as np
import pytest

from test_netcdf import fake_solution, write_example
from transport.caution import CAUTION_SHORT
from transport.io.netcdf import read_column_netcdf
from transport.plot.column import (
    DPI,
    breakthrough_figure,
    plot_breakthrough,
    plot_profiles,
    profile_figure,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C / ISO 15948), section 5.2
KG_M3 = cf_units.Unit("kg m-3")
MG_L = cf_units.Unit("mg L-1")


def mg_per_l(c_kg_m3):
    return KG_M3.convert(np.asarray(c_kg_m3, dtype=float), MG_L)


def years(t_s):
    # UDUNITS-2 "year" is the tropical year; the figures use the Julian year of pint and
    # the IAU (365.25 d), so convert from "day" and divide by 365.25.
    return cf_units.Unit("s").convert(np.asarray(t_s, dtype=float), cf_units.Unit("day")) / 365.25


def footer_texts(fig):
    return " ".join(t.get_text().replace("\n", " ") for t in fig.texts)


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    path = tmp_path_factory.mktemp("plots") / "column.nc"
    write_example(path)
    return read_column_netcdf(path)


def _assert_png(path, min_bytes=10_000):
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    assert len(data) > min_bytes
    image = matplotlib.image.imread(path)
    assert image.shape[1] == round(6.5 * DPI)  # report width at dpi 150
    assert image[..., :3].std() > 0.05  # not a blank canvas


def test_profile_png_from_solution_and_from_file(tmp_path, dataset):
    """A PNG is written from a solution object and from a NetCDF dataset."""
    for source, name in ((fake_solution(), "sol.png"), (dataset, "file.png")):
        path = plot_profiles(source, tmp_path / name, screening_level=5e-6)
        _assert_png(tmp_path / name)
        assert str(path).endswith(name)


def test_breakthrough_png_from_solution_and_from_file(tmp_path, dataset):
    """A PNG is written from both sources (receptor depth read from the file)."""
    plot_breakthrough(fake_solution(), tmp_path / "sol.png", receptor_depth=0.5,
                      screening_level=1e-3)
    plot_breakthrough(dataset, tmp_path / "file.png")
    _assert_png(tmp_path / "sol.png")
    _assert_png(tmp_path / "file.png")


def test_profile_axes_carry_units_depth_down_layers_named(dataset):
    """Labels carry units; depth grows downward; layer bands named; caution footer."""
    fig = profile_figure(dataset)
    ax = fig.axes[0]
    assert "(mg/L)" in ax.get_xlabel()
    assert "depth" in ax.get_ylabel() and "(m)" in ax.get_ylabel()
    top, bottom = ax.get_ylim()[1], ax.get_ylim()[0]
    assert bottom > top and top == 0.0 and bottom == pytest.approx(2.0)
    labels = {t.get_text() for t in ax.texts}
    assert {"fill", "silty clay"} <= labels
    assert CAUTION_SHORT in footer_texts(fig)


def test_profile_values_are_mg_per_litre(dataset):
    """Plotted x = stored kg m-3 converted to mg/L by UDUNITS-2 (cf-units)."""
    fig = profile_figure(dataset, times=[float(10 * 365.25 * 86400)])
    line = fig.axes[0].lines[0]
    k = int(np.argmin(np.abs(dataset["time"].values - np.datetime64("2010-01-01", "ms"))))
    np.testing.assert_allclose(line.get_xdata(), mg_per_l(dataset["concentration"][k]),
                               rtol=1e-12)
    np.testing.assert_array_equal(line.get_ydata(), dataset["depth"].values)
    level_line = [ln for ln in fig.axes[0].lines if "screening" in ln.get_label()][0]
    assert level_line.get_xdata()[0] == pytest.approx(mg_per_l(5e-6), rel=1e-12)


def test_breakthrough_axes_units_and_screening_line():
    """Time in years, concentration in mg/L, screening level a horizontal line."""
    solution = fake_solution()
    fig = breakthrough_figure(solution, receptor_depth=0.5, screening_level=2e-3)
    ax = fig.axes[0]
    assert "(years)" in ax.get_xlabel()
    assert "(mg/L)" in ax.get_ylabel()
    level = [ln for ln in ax.lines if "screening" in ln.get_label()][0]
    np.testing.assert_allclose(level.get_ydata(), mg_per_l(2e-3), rtol=1e-12)
    assert CAUTION_SHORT in footer_texts(fig)


def test_breakthrough_follows_the_continuous_solution():
    """The curve is Crank (1975) eq. 2.45 at the receptor, sampled between stored times."""
    solution = fake_solution()
    fig = breakthrough_figure(solution, receptor_depth=0.5, n_samples=300)
    curve = fig.axes[0].lines[0]
    t_years = curve.get_xdata()
    assert t_years.size > solution.times.size * 10
    seconds = cf_units.Unit("day").convert(t_years * 365.25, cf_units.Unit("s"))
    np.testing.assert_allclose(curve.get_ydata(),
                               mg_per_l(solution.concentration_at(0.5, seconds)),
                               rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(years(solution.times[-1]), t_years[-1], rtol=1e-12)


def test_breakthrough_needs_a_receptor(tmp_path):
    """Without a receptor depth (not in the file, not given) a clear error is raised."""
    path = tmp_path / "nores.nc"
    write_example(path, receptor_depth=None)
    with pytest.raises(ValueError, match="receptor_depth"):
        breakthrough_figure(read_column_netcdf(path))


def test_breakthrough_log_axis_when_level_is_far_below_peak():
    """A level 1000x below the peak gets a log axis that shows it; else linear from 0."""
    solution = fake_solution()
    peak_value = float(np.max(solution.concentration_at(0.5, solution.times)))
    fig = breakthrough_figure(solution, receptor_depth=0.5, screening_level=peak_value / 1e3)
    ax = fig.axes[0]
    assert ax.get_yscale() == "log"
    low, high = ax.get_ylim()
    assert low < mg_per_l(peak_value / 1e3) < high
    linear = breakthrough_figure(solution, receptor_depth=0.5, screening_level=peak_value / 2)
    assert linear.axes[0].get_yscale() == "linear" and linear.axes[0].get_ylim()[0] == 0.0
