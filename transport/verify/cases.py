"""Case definitions of the verification suite (:mod:`transport.verify.report`).

Each case is a :class:`Case`: name, description, published source, engine, tolerance
and a ``run(quick) -> (error, note, profile)`` callable; :func:`cases` lists them in
the order the suite runs them.

Error measures: the maximum absolute error of C over the listed depths and times,
divided by the concentration scale of the case (the boundary or inlet value, or the
largest |C|), unless a case says otherwise.  Tolerances are set from the engine's own
accuracy: the modal series is asked for 1e-8 (tail bound), the finite-volume engine is
second order in space (measured errors at 40 cells per layer are 1e-4 to 2e-3 of the
scale), the Laplace engine reports its own inversion bound.
"""
from __future__ import annotations

import importlib
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from transport.model.column import Boundary, Column, InitialState, Layer, has_source_zone
from transport.model.schedules import Schedule
from transport.scenario.schema import load_scenario
from transport.solvers.fv.engine import solve_fv, solve_fv_result
from transport.solvers.modal import series as modal
from transport.solvers.modal.eigenfunctions import modes
from transport.solvers.modal.operator import build_operator
from transport.solvers.modal.spectrum import count_below, eigenvalues
from transport.units import YEAR
from transport.verify import closed_forms as cf

MODAL_TOL = 1e-8  # requested accuracy of the modal series


@dataclass(frozen=True)
class Case:
    """One verification case: what is checked, against which source, with which
    engine, to which tolerance; ``run(quick)`` returns ``(error, note, profile)`` with
    ``profile`` a ``(depths, |error|)`` pair or ``()``; ``quick``: part of the quick
    suite."""

    name: str
    description: str
    source: str
    engine: str
    tolerance: float
    run: object  # callable(quick) -> (error, note, profile)
    quick: bool = True


def _rel(got, want, scale=None):
    got, want = np.asarray(got, float), np.asarray(want, float)
    scale = float(np.max(np.abs(want))) if scale is None else scale
    return float(np.max(np.abs(got - want))) / scale


def _profile(z, got, want):
    return (np.asarray(z, float), np.max(np.abs(np.asarray(got) - np.asarray(want)), axis=0))


def _modal(column, t, z, initial=None):
    with warnings.catch_warnings():
        warnings.simplefilter("error", modal.AccuracyWarning)
        warnings.simplefilter("error", modal.ModeCapWarning)
        return modal.solve(column, t, z, initial=initial, tolerance=MODAL_TOL)


# ------------------------------------------------------------------ published solutions
THETA, D, R = 0.4, 1.0e-9, 2.0


def _split_slab(bottom):
    return Column((Layer(0.2, THETA, D, R), Layer(0.3, THETA, D, R)),
                  Boundary("concentration", 1.0), bottom)


def _crank_noflux(quick):
    z, t = np.linspace(0, 0.5, 26), np.array([2e6, 3e7, 3e8])
    got = _modal(_split_slab(Boundary("sealed")), t, z).concentration
    want = cf.slab_noflux(z, t, 0.5, D / R)
    return _rel(got, want, 1.0), "", _profile(z, got, want)


def _crank_two_faces(quick):
    z, t = np.linspace(0, 0.5, 26), np.array([2e6, 3e7, 3e8])
    col = _split_slab(Boundary("concentration", 0.3))
    got = _modal(col, t, z, InitialState.uniform([0.5, 0.5])).concentration
    want = cf.slab_two_faces(z, t, 0.5, D / R, 1.0, 0.3, 0.5)
    return _rel(got, want, 1.0), "", _profile(z, got, want)


def _decay_column():
    mu = 2e-9
    return Column((Layer(0.4, 0.3, D, 1.5, mu), Layer(5.6, 0.3, D, 1.5, mu)),
                  Boundary("concentration", 1.0), Boundary("sealed")), mu


def _danckwerts(quick):
    col, mu = _decay_column()
    z, t = np.linspace(0, 0.6, 25), np.array([1e7, 5e7, 1e8])
    got = _modal(col, t, z).concentration
    want = cf.half_space_decay(z, t, D / 1.5, mu)
    return _rel(got, want, 1.0), "6 m column for the half-space", _profile(z, got, want)


def _advective_column(top):
    theta, ret, q, mu = 0.3, 1.5, 3e-9, 2e-9
    col = Column(tuple(Layer(h, theta, D, ret, mu) for h in (0.4, 0.6, 2.0)),
                 top, Boundary("free-outflow"), darcy_flux=q)
    return col, q / (theta * ret), D / ret, mu


def _inlet_case(kind, closed_form):
    """Modal engine against a semi-infinite advection-dispersion closed form, for a
    first-type (``concentration``) or third-type (``inlet``) top boundary."""
    def run(quick):
        col, v, dr, mu = _advective_column(Boundary(kind, 1.0))
        z, t = np.linspace(0, 1.2, 25), np.array([1e7, 5e7, 1e8])
        got = _modal(col, t, z).concentration
        want = closed_form(z, t, v, dr, mu)
        return (_rel(got, want, 1.0), "3 m column, column Peclet number 30",
                _profile(z, got, want))
    return run


_ogata_banks = _inlet_case("concentration", cf.first_type_inlet)
_third_type = _inlet_case("inlet", cf.third_type_inlet)


def _time_lag(quick):
    col = Column((Layer(0.1, 0.35, 4e-10, 3.0), Layer(0.2, 0.35, 4e-10, 3.0)),
                 Boundary("concentration", 1.0), Boundary("concentration", 0.0))
    lag = cf.time_lag(0.3, 4e-10 / 3.0)
    t = lag * np.array([0.3, 1.0, 3.0, 10.0])
    got = _modal(col, t, [0.3]).cumulative_mass[:, 0]
    want = cf.time_lag_through(t, 0.3, 4e-10 / 3.0, capacity=0.35 * 3.0)
    return _rel(got, want), f"time lag {lag / YEAR:.3g} yr", ()


def _uptake(quick):
    col = _split_slab(Boundary("sealed"))
    t = np.array([1e6, 1e7, 1e8, 5e8])
    got = _modal(col, t, [0.0]).budget["stored"]
    want = cf.uptake_noflux(t, 0.5, D / R, capacity=THETA * R)
    return _rel(got, want), "", ()


# ------------------------------------------------------------------------ Laplace engine
def laplace_engine():
    """:func:`transport.solvers.laplace.solve_laplace`, or None where that engine is
    not available (its cases are then skipped)."""
    try:
        return importlib.import_module("transport.solvers.laplace").solve_laplace
    except (ImportError, AttributeError):
        return None


def _laplace_half_space(quick):
    solve_laplace = laplace_engine()
    col = Column((Layer(0.3, 0.3, D, 1.5, 2e-9), Layer(1.0, 0.3, D, 1.5, 2e-9)),
                 Boundary("concentration", 1.0), Boundary("sealed"))
    z, t = np.linspace(0, 0.6, 25), np.array([1e5, 1e7, 1e8])
    got = solve_laplace(col, t, z, semi_infinite_bottom=True).concentration
    want = cf.half_space_decay(z, t, D / 1.5, 2e-9)
    return _rel(got, want, 1.0), "semi-infinite bottom layer", _profile(z, got, want)


def _laplace_third_type(quick):
    solve_laplace = laplace_engine()
    col, v, dr, mu = _advective_column(Boundary("inlet", 1.0))
    z, t = np.linspace(0, 1.2, 25), np.array([1e6, 1e7, 1e8])
    got = solve_laplace(col, t, z, semi_infinite_bottom=True).concentration
    want = cf.third_type_inlet(z, t, v, dr, mu)
    return _rel(got, want, 1.0), "semi-infinite bottom layer", _profile(z, got, want)


def _laplace_vs_modal(quick):
    solve_laplace = laplace_engine()
    col = _contrast_column()
    z, t = np.linspace(0, col.length, 41), np.array([1, 5, 20]) * YEAR
    got = solve_laplace(col, t, z).concentration
    want = _modal(col, t, z).concentration
    return _rel(got, want, 1.0), "", _profile(z, got, want)


# ------------------------------------------------------------------ modal vs finite volume
def _contrast_column():
    return Column((Layer(0.5, 0.35, 8e-10, 1.5, name="fill"),
                   Layer(0.3, 0.5, 2e-11, 12.0, 1e-9, name="clay"),
                   Layer(1.2, 0.3, 5e-10, 1.2, name="sand")),
                  Boundary("concentration", 1.0), Boundary("mass-transfer", 0.1, 1e-8))


def _thin_layer_column():
    return Column((Layer(0.3, 0.35, 5e-10, 1.5, name="gravel"),
                   Layer(0.002, 1.0, 3e-13, 1.0, name="sheet"),
                   Layer(0.75, 0.4, 4e-10, 3.0, name="clay")),
                  Boundary("concentration", 1.0), Boundary("mass-transfer", 0.0, 1e-7))


def _partition_column():
    return Column((Layer(0.3, 0.4, 5e-10, 2.0, partition_to_next=80.0),
                   Layer(0.2, 0.4, 1e-11, 1.0), Layer(0.5, 0.3, 6e-10, 1.0)),
                  Boundary("concentration", 1.0), Boundary("sealed"))


def _peclet_column():
    d = 5e-10
    q = 50 * 0.3 * d / 1.0  # column Peclet number 50 over 1 m of the first layer's data
    return Column((Layer(0.4, 0.3, d, 1.5), Layer(0.6, 0.4, 2 * d, 3.0, 5e-10)),
                  Boundary("inlet", 1.0), Boundary("free-outflow"), darcy_flux=q)


def _scheduled_column():
    """Source held 4 yr then removed, a depleting source in the second layer (half-life
    3 yr, from 1 yr): every kind of time signal both engines take."""
    top = Schedule.steps([0.0, 4 * YEAR], [1.0, 0.0])
    depleting = Schedule.depletion(1.0, math.log(2) / (3 * YEAR), start=1 * YEAR)
    return Column((Layer(0.4, 0.35, 6e-10, 2.0, 1e-9),
                   Layer(0.3, 0.4, 3e-10, 2.5, source_rate=2e-9, source_schedule=depleting),
                   Layer(0.5, 0.45, 1e-10, 3.0)),
                  Boundary("concentration", 0.0, schedule=top), Boundary("free-outflow"),
                  darcy_flux=1e-10)


def _cross(column_fn, times, initial=None):
    def run(quick):
        col = column_fn()
        z = np.unique(np.concatenate([np.linspace(0, col.length, 61), col.interfaces]))
        t = np.asarray(times, float)
        want = _modal(col, t, z, initial).concentration
        cells = 80 if quick else 160
        got = solve_fv(col, t, z, initial=initial, cells_per_layer=cells,
                       tolerance=1e-10).concentration
        scale = float(np.max(np.abs(want)))
        return _rel(got, want, scale), f"{cells} cells per layer", _profile(z, got, want)
    return run


def _zone_balance(sc, t):
    """Relative residual of a source zone's mass balance at times t, Laplace engine:
    what the zone held = what entered the column through that end (cumulative flux)
    + what it still holds (Gamma C_s, C_s the column's concentration there) + what it
    lost by decay and to water passing through it (Gamma lambda + q_out) int C_s dt
    (composite Gauss-Legendre on geometric panels).  The flux and the concentration are
    inverted separately, so the balance tests the engine, not an identity of its own."""
    from transport.solvers.laplace import solve_laplace

    col = sc.column
    end = "top" if col.top.kind == "source-zone" else "bottom"
    bc, depth, sign = ((col.top, 0.0, 1.0) if end == "top" else
                       (col.bottom, col.length, -1.0))
    sol = solve_laplace(col, t, [depth], initial=sc.initial)
    released = sign * sol.cumulative_mass[:, 0]
    remaining = bc.capacity * sol.concentration[:, 0]
    rate = bc.capacity * bc.decay_rate + bc.zone_outflow(col.darcy_flux, end)
    lost = np.zeros_like(t)
    if rate > 0:
        x, w = np.polynomial.legendre.leggauss(16)
        for i, ti in enumerate(t):
            edges = np.concatenate([[0.0], ti * np.geomspace(1e-9, 1.0, 40)])
            a, b = edges[:-1, None], edges[1:, None]
            nodes = (0.5 * (b - a) * (x + 1) + a).ravel()
            c = solve_laplace(col, nodes, [depth], initial=sc.initial).concentration[:, 0]
            lost[i] = rate * np.dot((0.5 * (b - a) * w).ravel(), c)
    held = bc.zone_inventory()
    resid = held - released - remaining - lost
    return (float(np.max(np.abs(resid))) / held,
            f"{t.size} times, source zone at the {end}, Laplace engine", ())


def _zone_scenario(path) -> bool:
    """Whether the demo scenario at ``path`` has a source zone (False if it does not
    load: its case then reports the error)."""
    try:
        return has_source_zone(load_scenario(path).column)
    except Exception:  # noqa: BLE001 - the case itself shows why the file fails
        return False


def _scenario_case(path):
    def run(quick):
        sc = load_scenario(path)
        col = sc.column
        t = np.asarray(sc.times, float)
        t = t[t > 0]
        if quick:
            t = t[:: max(1, t.size // 4)]
        if has_source_zone(col):  # neither modal nor finite volumes take a source zone
            return _zone_balance(sc, t)
        z = np.unique(np.concatenate([np.linspace(0, col.length, 81), col.interfaces]))
        want = _modal(col, t, z, sc.initial).concentration
        cells = 160 if quick else 320  # a measured profile with a 2 cm jump needs fine cells
        # tolerance 1e-9: tighter steps round in the implicit solve of the stiff polymer sheet
        got = solve_fv(col, t, z, initial=sc.initial, cells_per_layer=cells,
                       tolerance=1e-9).concentration
        scale = float(np.max(np.abs(want)))
        return (_rel(got, want, scale), f"{t.size} times, {cells} cells per layer",
                _profile(z, got, want))
    return run


# ----------------------------------------------------------------------------- identities
def _budget_modal(quick):
    col = _contrast_column()
    t = np.array([0.5, 5, 50]) * YEAR
    b = _modal(col, t, [0.0]).budget
    scale = max(np.max(np.abs(b["entered_top"])), np.max(np.abs(b["stored"])))
    return float(np.max(np.abs(b["residual"]))) / scale, "", ()


def _budget_fv(quick):
    col = _peclet_column()
    t = np.array([0.5, 5, 50]) * YEAR
    b = solve_fv_result(col, t, [0.0], initial=InitialState.uniform([0.3, 0.1]),
                        cells_per_layer=40).budget
    scale = max(np.max(np.abs(b["entered_top"])), np.max(np.abs(b["stored"])))
    return float(np.max(np.abs(b["residual"]))) / scale, "", ()


def _orthogonality(quick):
    col = _partition_column()
    op = build_operator(col)
    lam = eigenvalues(op, 30)
    md = modes(op, lam)
    xg, wg = np.polynomial.legendre.leggauss(64)
    gram = np.zeros((lam.size, lam.size))
    for i in range(op.n_layers):
        z0, z1 = op.z[i], op.z[i + 1]
        edges = np.linspace(z0, z1, 9)
        for a_, b_ in zip(edges[:-1], edges[1:]):
            zq = 0.5 * (a_ + b_) + 0.5 * (b_ - a_) * xg
            psi, _ = md.evaluate(zq, exp_sign=0)
            gram += (psi * (0.5 * (b_ - a_) * wg * op.a[i])[:, None]).T @ psi
    return float(np.max(np.abs(gram - np.eye(lam.size)))), "30 modes, weight theta R kappa", ()


def _pruefer(quick):
    col = Column(tuple(Layer(h, THETA, D, R) for h in (0.05, 0.001, 0.3, 0.149)),
                 Boundary("concentration", 0.0), Boundary("concentration", 0.0))
    op = build_operator(col)
    n = np.arange(1, 201)
    exact = (n * math.pi / 0.5) ** 2 * D / R  # Crank 1975 ch. 4: (n pi / l)^2 kappa
    mid = 0.5 * (exact[:-1] + exact[1:])
    counts = count_below(op, mid)
    miss = int(np.sum(counts != n[:-1]))
    lam = eigenvalues(op, 200)
    err = float(np.max(np.abs(lam / exact - 1)))
    return err + miss, f"{miss} wrong counts in 199 gaps; max relative eigenvalue error", ()


# ------------------------------------------------------------------------------ nonlinear
def _freundlich_linear(quick):
    theta, rho, kf = 0.35, 1600.0, 2e-4
    ret = 1 + rho * kf / theta
    lay = dict(thickness=0.5, water_content=theta, diffusivity=6e-10, decay_rate=1e-9)
    top, bot = Boundary("concentration", 1.0), Boundary("mass-transfer", 0.0, 1e-8)
    lin = Column((Layer(retardation=ret, **lay), Layer(0.5, 0.45, 1e-10, ret)), top, bot)
    non = Column((Layer(retardation=1.0, **lay), Layer(0.5, 0.45, 1e-10, 1.0)), top, bot)
    iso = ({"kind": "freundlich", "coefficient": kf, "exponent": 1.0, "bulk_density": rho},
           {"kind": "freundlich", "coefficient": kf * 0.45 / theta, "exponent": 1.0,
            "bulk_density": rho})
    z, t = np.linspace(0, 1, 41), np.array([0.5, 2, 10]) * YEAR
    got = solve_fv(non, t, z, cells_per_layer=80, isotherm=iso).concentration
    want = _modal(lin, t, z).concentration
    return _rel(got, want, 1.0), "Freundlich exponent 1, 80 cells per layer", _profile(z, got, want)


def _front_width(z, c, c0, low=0.1, high=0.9):
    def cross(level):
        i = int(np.flatnonzero(c < level)[0])
        return z[i - 1] + (level - c[i - 1]) * (z[i] - z[i - 1]) / (c[i] - c[i - 1])
    return cross(low * c0) - cross(high * c0)


def _langmuir_front(quick):
    """Late-time 10-90 % width of a Langmuir front, Richardson-extrapolated in the cell
    size, against the travelling wave; the front has travelled 1.3 m (the transient
    approach to the wave is then below 0.1 %, measured)."""
    theta, rho, disp, q, c0, length = 0.4, 1600.0, 2e-9, 1e-7, 0.01, 1.5
    kl, smax = 1000.0, 1e-6
    col = Column((Layer(length, theta, disp, 1.0),), Boundary("inlet", c0),
                 Boundary("free-outflow"), darcy_flux=q)
    iso = {"kind": "langmuir", "capacity": smax, "affinity": kl, "bulk_density": rho}
    want = cf.langmuir_front_width(q, theta, disp, rho, smax, kl, c0)
    speed = cf.front_speed(q, theta, rho, c0, smax * kl * c0 / (1 + kl * c0))
    z = np.linspace(0, length, 6001)
    cells = (450, 900)
    widths = [_front_width(z, solve_fv(col, [1.3 / speed], z, cells_per_layer=n, grading=1.0,
                                       isotherm=iso).concentration[0], c0) for n in cells]
    extrap = widths[1] + (widths[1] - widths[0]) / 3  # Richardson, second order
    return (abs(extrap / want - 1), f"relative; width {extrap:.5g} m (Richardson from "
            f"{cells[0]}/{cells[1]} cells: {widths[0]:.5g}, {widths[1]:.5g}) vs {want:.5g} m", ())


def _budget_freundlich(quick):
    col = Column((Layer(0.5, 0.35, 1e-9, 1.0, 2e-9), Layer(0.5, 0.4, 3e-10, 1.5)),
                 Boundary("inlet", 0.02), Boundary("free-outflow"), darcy_flux=3e-9)
    iso = ({"kind": "freundlich", "coefficient": 5e-4, "exponent": 0.6,
            "bulk_density": 1650.0},
           {"kind": "langmuir", "capacity": 2e-5, "affinity": 300.0, "bulk_density": 1500.0})
    t = np.array([0.5, 3, 20]) * YEAR
    b = solve_fv_result(col, t, [0.0], cells_per_layer=60, isotherm=iso).budget
    scale = max(np.max(np.abs(b["entered_top"])), np.max(np.abs(b["stored"])))
    return float(np.max(np.abs(b["residual"]))) / scale, "Freundlich n = 0.6 over Langmuir", ()


# ----------------------------------------------------------------------------- the suite
_CRANK = "Crank (1975), The Mathematics of Diffusion, ch. 4"


def scenario_dir() -> Path:
    """Demo scenarios of a source checkout (not installed with the package)."""
    return Path(__file__).resolve().parents[2] / "scenarios"


def cases() -> list:
    """Every case of the suite, in report order (the quick ones flagged ``quick``)."""
    scen_dir = scenario_dir()
    out = [
        Case("crank-noflux", "Split slab (2 layers), C = 1 on top, sealed base, modal",
              _CRANK + ", sheet with one face held (eq. 4.15/4.17, M)", "modal", 1e-7,
              _crank_noflux),
        Case("crank-two-faces", "Split slab, C = 1 top, 0.3 base, initial 0.5, modal",
              _CRANK + ", both faces held (eq. 4.16, M)", "modal", 1e-7, _crank_two_faces),
        Case("danckwerts-decay", "Half-space with first-order decay, modal",
              "Danckwerts (1951), Trans. Faraday Soc. 47:1014", "modal", 1e-7, _danckwerts),
        Case("ogata-banks-decay", "Fixed inlet, advection-dispersion with decay, modal",
              "Ogata & Banks (1961) USGS PP 411-A; van Genuchten & Alves (1982) "
              "USDA TB 1661", "modal", 1e-7, _ogata_banks),
        Case("third-type-inlet", "Flux-type inlet with decay, modal",
              "van Genuchten & Alves (1982), USDA TB 1661, third-type inlet", "modal", 1e-7,
              _third_type),
        Case("time-lag", "Cumulative mass through a held slab (membrane), modal",
              _CRANK + ", time lag (eq. 4.24a, M)", "modal", 1e-7, _time_lag),
        Case("uptake", "Mass taken up by a slab with a sealed base, modal budget",
              _CRANK + ", uptake (eq. 4.18, M)", "modal", 1e-7, _uptake),
    ]
    if laplace_engine() is not None:
        out += [
            Case("laplace-half-space", "Half-space with decay, Laplace engine",
                  "Danckwerts (1951)", "laplace", 1e-7, _laplace_half_space),
            Case("laplace-third-type", "Flux-type inlet with decay, Laplace engine",
                  "van Genuchten & Alves (1982)", "laplace", 1e-7, _laplace_third_type),
            Case("laplace-vs-modal", "Contrast column (theta D 1:40:1), Laplace vs modal",
                  "independent engine", "laplace/modal", 1e-7, _laplace_vs_modal),
        ]
    fv = "independent engine (finite volumes, Patankar 1980)"
    out += [
        Case("fv-contrast", "Fill / clay / sand, theta D contrast 1:40:1, mass transfer",
              fv, "modal/finite-volume", 1e-3, _cross(_contrast_column,
                                                      np.array([1, 5, 20]) * YEAR)),
        Case("fv-thin-layer", "2 mm polymer-like sheet (D = 3e-13 m2/s) between soils",
              fv, "modal/finite-volume", 1e-3, _cross(_thin_layer_column,
                                                      np.array([5, 50, 300]) * YEAR)),
        Case("fv-partition", "Partition jump K = 80 at the first face, sealed base",
              fv, "modal/finite-volume", 1e-3, _cross(_partition_column,
                                                      np.array([0.5, 2, 10]) * YEAR)),
        Case("fv-peclet", "Column Peclet number 50, flux inlet, free outflow",
              fv, "modal/finite-volume", 1e-3, _cross(_peclet_column,
                                                      np.array([1, 3, 10]) * YEAR)),
        Case("fv-schedules", "Source removed at 4 yr, depleting layer source from 1 yr",
              fv, "modal/finite-volume", 1e-3, _cross(_scheduled_column,
                                                      np.array([2, 4, 6, 15]) * YEAR)),
    ]
    for p in sorted(scen_dir.glob("*.toml")):
        if _zone_scenario(p):
            out.append(Case(f"scenario-{p.stem}", f"Demo scenario {p.name}: mass balance "
                               "of its source zone", "conservation of mass (identity); "
                               "Gauss-Legendre quadrature", "laplace", 1e-7,
                               _scenario_case(p)))
            continue
        out.append(Case(f"scenario-{p.stem}", f"Demo scenario {p.name}: modal vs FV",
                           fv, "modal/finite-volume", 2e-3, _scenario_case(p)))
    out += [
        Case("budget-modal", "Mass budget closure, contrast column, modal (relative)",
              "conservation of mass (identity)", "modal", 1e-9, _budget_modal),
        Case("budget-fv", "Mass budget closure, Peclet column, finite volumes",
              "conservation of mass (identity)", "finite-volume", 1e-9, _budget_fv),
        Case("orthogonality", "Weighted orthogonality of the eigenfunctions, K = 80",
              "Sturm-Liouville theory (Pryce 1993, ch. 2)", "spectrum", 1e-9, _orthogonality),
        Case("pruefer-count", "Pruefer count and eigenvalues of a slab cut in 4 (1 mm layer)",
              _CRANK + " (n pi/l)^2 kappa; Pruefer (1926)", "spectrum", 1e-11, _pruefer),
        Case("freundlich-linear-limit", "Freundlich n = 1 (FV) vs linear R (modal)",
              "Freundlich (1906); independent engine", "finite-volume/modal", 5e-4,
              _freundlich_linear),
        Case("langmuir-front", "Langmuir front width (10-90 %) vs travelling wave",
              "van der Zee (1990), WRR 26:2563; Langmuir (1918)", "finite-volume", 3e-3,
              _langmuir_front),
        Case("budget-nonlinear", "Mass budget closure with Freundlich and Langmuir layers",
              "conservation of mass (identity)", "finite-volume", 1e-8, _budget_freundlich),
    ]
    return out
