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
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_rgb
from matplotlib.legend import Legend
from matplotlib.text import Text

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
from transport.plot.style import CURVE_COLOURS, LEVEL_COLOUR, curve_style

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
    texts = list(fig.texts) + [t for sub in fig.subfigs for t in sub.texts]
    return " ".join(t.get_text().replace("\n", " ") for t in texts)


def drawn(fig):
    """Draw ``fig`` on an Agg canvas and return the renderer."""
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def texts_outside(fig, tolerance_px=1.0):
    """Visible, non-empty text artists whose drawn extent leaves the figure (common
    practice: a label cut at the page edge cannot be read)."""
    renderer = drawn(fig)
    box = fig.bbox
    undrawn = set()  # tick labels outside the view limits exist but are not drawn
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            low, high = sorted(axis.get_view_interval())
            span = (high - low) * 1e-9
            for tick in axis.get_major_ticks() + axis.get_minor_ticks():
                if not low - span <= tick.get_loc() <= high + span:
                    undrawn.update((id(tick.label1), id(tick.label2)))
    bad = []
    for text in fig.findobj(Text):
        if (id(text) in undrawn or not text.get_visible()
                or not text.get_text().strip()):
            continue
        ext = text.get_window_extent(renderer)
        if (ext.x0 < box.x0 - tolerance_px or ext.y0 < box.y0 - tolerance_px
                or ext.x1 > box.x1 + tolerance_px or ext.y1 > box.y1 + tolerance_px):
            bad.append((text.get_text()[:40], tuple(np.round(ext.extents))))
    return bad


def legend_covered_fraction(fig):
    """Largest fraction of any curve's drawn points that falls inside a legend box."""
    renderer = drawn(fig)
    worst = 0.0
    for legend in fig.findobj(Legend):
        box = legend.get_window_extent(renderer)
        for ax in fig.axes:
            for line in ax.lines:
                x, y = (np.asarray(v, dtype=float) for v in line.get_data())
                if x.size < 3:
                    continue
                ok = np.isfinite(x) & np.isfinite(y)
                pts = line.get_transform().transform(np.column_stack([x[ok], y[ok]]))
                inside = ((pts[:, 0] > box.x0) & (pts[:, 0] < box.x1)
                          & (pts[:, 1] > box.y0) & (pts[:, 1] < box.y1))
                worst = max(worst, float(inside.mean()) if inside.size else 0.0)
    return worst


def level_visible(fig, level_mg_l):
    """True when a line labelled "screening level" lies at ``level_mg_l`` inside the
    visible range of its axes (x for a vertical line, y for a horizontal one)."""
    for ax in fig.axes:
        for line in ax.lines:
            if not line.get_label().startswith("screening level"):
                continue
            x, y = line.get_xdata(), line.get_ydata()
            if np.ptp(np.asarray(x, dtype=float)) == 0:  # vertical
                low, high = sorted(ax.get_xlim())
                value, scale = float(x[0]), ax.get_xscale()
            else:
                low, high = sorted(ax.get_ylim())
                value, scale = float(y[0]), ax.get_yscale()
            if value != pytest.approx(level_mg_l, rel=1e-12):
                continue
            # visible: inside the limits and, on a linear axis, more than 1 % of the
            # axis width away from the edge it would otherwise merge with
            if scale == "log" and low < value < high:
                return True
            if scale == "linear" and low + 0.01 * (high - low) < value < high:
                return True
    return False


def assert_readable(fig):
    """Checks every report figure passes: nothing cut, legends off the curves, caution
    in the footer, axis labels with units in parentheses."""
    assert texts_outside(fig) == []
    assert legend_covered_fraction(fig) <= 0.02
    assert CAUTION_SHORT in footer_texts(fig)
    labelled = [ax for ax in fig.axes if ax.get_xlabel() or ax.get_ylabel()]
    assert labelled and all("(" in ax.get_xlabel() + ax.get_ylabel() for ax in labelled)


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    path = tmp_path_factory.mktemp("plots") / "column.nc"
    write_example(path)
    return read_column_netcdf(path)


def assert_png(path, width_in=None, min_bytes=10_000):
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    assert len(data) > min_bytes
    image = matplotlib.image.imread(path)
    if width_in is not None:
        assert image.shape[1] == round(width_in * DPI)  # report width at dpi 150
    assert image[..., :3].std() > 0.05  # not a blank canvas


def test_profile_png_from_solution_and_from_file(tmp_path, dataset):
    """A PNG is written from a solution object and from a NetCDF dataset."""
    for source, name in ((fake_solution(), "sol.png"), (dataset, "file.png")):
        path = plot_profiles(source, tmp_path / name, screening_level=5e-6)
        assert_png(tmp_path / name, 7.0)
        assert str(path).endswith(name)


def test_breakthrough_png_from_solution_and_from_file(tmp_path, dataset):
    """A PNG is written from both sources (receptor depth read from the file)."""
    plot_breakthrough(fake_solution(), tmp_path / "sol.png", receptor_depth=0.5,
                      screening_level=1e-3)
    plot_breakthrough(dataset, tmp_path / "file.png")
    assert_png(tmp_path / "sol.png", 6.5)
    assert_png(tmp_path / "file.png", 6.5)


def test_profile_axes_carry_units_depth_down_layers_named(dataset):
    """Labels carry units; depth grows downward; layer bands named; caution footer."""
    fig = profile_figure(dataset)
    ax = fig.axes[0]
    assert "(mg/L)" in ax.get_xlabel()
    assert "depth" in ax.get_ylabel() and "(m)" in ax.get_ylabel()
    top, bottom = ax.get_ylim()[1], ax.get_ylim()[0]
    assert bottom > top and top == 0.0 and bottom == pytest.approx(2.0)
    labels = {t.get_text().replace("\n", " ") for a in fig.axes for t in a.texts}
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


def test_profile_shows_a_level_far_below_the_peak(dataset):
    """5 ug/L against 120 mg/L: a log panel where the level lies inside the visible
    range; the figure stays readable."""
    fig = profile_figure(dataset)
    assert level_visible(fig, mg_per_l(5e-6))
    assert any(ax.get_xscale() == "log" for ax in fig.axes)
    assert_readable(fig)


def test_profile_log_option_notes_values_it_cannot_show(dataset):
    """On a log axis, values <= 0 are named in the footer, never dropped silently."""
    fig = profile_figure(dataset, log_scale=True)
    assert fig.axes[0].get_xscale() == "log"
    rows = dataset["concentration"].values
    assert (rows <= 0).any()  # the t = 0 profile of the stored example is zero below 0
    assert "zero or negative" in footer_texts(fig)
    assert_readable(fig)


def test_breakthrough_marks_the_design_life():
    """A vertical line labelled "design life" at 30 yr on the years axis."""
    fig = breakthrough_figure(fake_solution(), receptor_depth=0.5, screening_level=2e-3,
                              design_life=30 * 365.25 * 86400.0)
    ax = fig.axes[0]
    life = [ln for ln in ax.lines if ln.get_label().startswith("design life")]
    assert len(life) == 1
    np.testing.assert_allclose(life[0].get_xdata(), years(30 * 365.25 * 86400.0),
                               rtol=1e-12)
    assert ax.get_xlim()[0] <= life[0].get_xdata()[0] <= ax.get_xlim()[1]
    assert level_visible(fig, mg_per_l(2e-3))
    assert_readable(fig)


def test_long_title_and_layer_names_are_not_cut():
    """A 200-character title and long layer names stay inside the figure."""
    title = "Invented site with a very long name " * 6
    layers = [("made ground with brick rubble and ash, loose", 0.0, 0.8),
              ("silty clay, firm, with rootlets and occasional gravel", 0.8, 2.0)]
    for fig in (profile_figure(fake_solution(), title=title, layers=layers,
                               screening_level=5e-6),
                breakthrough_figure(fake_solution(), receptor_depth=0.5, title=title,
                                    screening_level=5e-6, design_life=20 * 365.25 * 86400)):
        assert_readable(fig)


def test_curve_colours_never_take_the_screening_level_colour():
    """The palette (Okabe and Ito 2008, colour-universal design) keeps vermillion for
    the screening level alone; the first twenty comparison curves differ from it."""
    level = np.array(to_rgb(LEVEL_COLOUR))
    for i in range(20):
        rgb = np.array(to_rgb(curve_style(i)["color"]))
        assert np.abs(rgb - level).max() > 0.2
    assert LEVEL_COLOUR not in CURVE_COLOURS


def test_breakthrough_draws_rounding_level_negatives_as_zero():
    """As the printed values (solvers.checks.clip_to_bounds): a negative within the error
    the run allows (tolerance x scale) is drawn as 0 -- the footer names no negative
    concentration; a larger negative is kept and named (C >= 0 for a clean column with a
    non-negative source: the maximum principle, Protter & Weinberger 1967, ch. 3, from memory)."""
    import dataclasses

    base = fake_solution()
    for dip, named in ((-1e-13, False), (-1e-6, True)):
        def conc_at(depth, times, dip=dip):
            c = np.asarray(base.concentration_at(depth, times), float)
            return np.where(np.arange(c.size) < 20, dip, c)  # the first 20 samples
        sol = dataclasses.replace(base, tolerance=1e-8, scale={"concentration": 0.01},
                                  evaluator=conc_at, series=None)
        fig = breakthrough_figure(sol, receptor_depth=0.5, log_scale=True)
        assert ("lowest -" in footer_texts(fig)) is named
        assert "zero or negative" in footer_texts(fig)  # the dip is never dropped silently
