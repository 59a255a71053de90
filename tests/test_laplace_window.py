"""Windows of output times served by one hyperbolic contour each
(transport.solvers.laplace.contour.invert_window, transport.solvers.laplace.inversion).

Check values: closed-form transform pairs (Abramowitz & Stegun 1964, Handbook of
Mathematical Functions, table 29.3), the mpmath Laplace-domain solution of the layered
column (tests/reference.py, laplace_reference_full: Talbot inversion per Abate & Valko
2004 in 20+ digits) across the regime matrix, and the single-time hyperbola of
Weideman & Trefethen (2007, Math. Comp. 76:1341, section 3).
"""
from __future__ import annotations

import math
import multiprocessing
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
from scipy.special import erfc

from reference import laplace_reference, laplace_reference_full
from test_error_bound import _actual, draw
from test_laplace import _advective_column
from test_regime_matrix import build
from transport.solvers.laplace import contour, inversion, solve_laplace
from transport.solvers.laplace.contour import (WINDOW_RATIOS, derive_hyperbola,
                                               hyperbola_exponents, hyperbola_parameters,
                                               invert_window)
from transport.solvers.laplace.inversion import invert_best, plan_windows

EPS = np.finfo(float).eps


def test_single_time_hyperbola_is_weideman_trefethen():
    """Weideman & Trefethen (2007) section 3, one time (Lambda = 1): alpha = 1.1721,
    h = 1.0818 / N, mu = 4.4921 N / t, error ~ 3.2^{-2N} for N nodes on the half
    contour (numbers from memory; Liemert & Kienle 2015 quote 1.172104229, 1.081792140,
    4.492075287, also from memory)."""
    alpha, a, m, rate = hyperbola_parameters(1.0)
    assert alpha == pytest.approx(1.172104229, abs=2e-6)
    assert a == pytest.approx(1.081792140, abs=2e-6)
    assert m == pytest.approx(4.492075287, abs=2e-5)
    assert math.exp(rate / 2) == pytest.approx(3.2, abs=0.02)


@pytest.mark.parametrize("k", [0, 5, 10, 14])
def test_table_is_the_derivation(k):
    """Each tabulated contour reaches the rate it states (its three error exponents,
    hyperbola_exponents, at least that rate), and that rate is derive_hyperbola's
    optimum (scipy Nelder-Mead, an independent run) to 1e-5; wider windows converge
    more slowly."""
    ratio = WINDOW_RATIOS[k]
    alpha, a, m, rate = hyperbola_parameters(ratio)
    assert min(hyperbola_exponents(ratio, alpha, a, m)) >= rate * (1 - 1e-5)
    assert derive_hyperbola(ratio)[3] == pytest.approx(rate, rel=1e-5)
    if k:
        assert rate < hyperbola_parameters(WINDOW_RATIOS[k - 1])[3]


PAIRS = {  # transform, inverse (Abramowitz & Stegun 1964, table 29.3)
    # 29.3.83: e^{-k sqrt(s)} / s <-> erfc(k / (2 sqrt(t))), k = 1
    "erfc": (lambda s: np.exp(-np.sqrt(s)) / s, lambda t: erfc(1 / (2 * np.sqrt(t)))),
    # 29.3.8: 1 / (s + a) <-> e^{-a t}, a = 0.7 (a pole on the negative axis)
    "exp": (lambda s: 1 / (s + 0.7), lambda t: np.exp(-0.7 * t)),
    # 29.3.4: 1 / s^2 <-> t (the ramp atom of a schedule)
    "ramp": (lambda s: 1 / s ** 2, lambda t: t),
    # 29.3.84: e^{-k sqrt(s)} <-> k / (2 sqrt(pi t^3)) e^{-k^2 / (4 t)}, k = 1 (a pulse)
    "pulse": (lambda s: np.exp(-np.sqrt(s)),
              lambda t: np.exp(-1 / (4 * t)) / (2 * np.sqrt(np.pi * t ** 3))),
}


@pytest.mark.parametrize("name", sorted(PAIRS))
@pytest.mark.parametrize("ratio", [1.3, 10.0, 100.0, 128.0])
def test_window_of_times_is_exact_within_its_estimate(name, ratio):
    """Every time of a window, 0.05 to 0.05 x ratio, within the estimate it reports, and
    the estimate within 1e-11 of the largest value (n = 32, the Talbot default; the
    narrowest windows round off most: 4e-12 at a ratio of 1.3 for e^{-0.7 t}, where
    the actual error is 1.5e-13)."""
    transform, exact = PAIRS[name]
    times = np.geomspace(0.05, 0.05 * ratio, 25)
    [(f, err)] = invert_window(lambda s: transform(s)[:, None], [times], 32)
    want = exact(times)
    scale = np.abs(want).max()
    assert np.all(np.abs(f[:, 0] - want) <= err[:, 0] + 4 * EPS * scale)
    assert np.all(err <= 1e-11 * scale)


def test_windows_cover_wide_spans_in_equal_ratios_and_sparse_times_stay_lone():
    """100 times over 6 decades: 3 windows of ratio 100 (no narrow remainder); 4 times
    over 6 decades cost less on one Talbot contour each."""
    dense = np.geomspace(1.0, 1e6, 100)
    windows, lone = plan_windows(dense, 32)
    assert len(windows) == 3 and lone.size == 0
    assert sorted(np.concatenate(windows)) == list(range(100))
    for w in windows:
        assert dense[w].max() / dense[w].min() == pytest.approx(100.0, rel=0.15)
    windows, lone = plan_windows(np.geomspace(1.0, 1e6, 4), 32)
    assert windows == [] and sorted(lone) == [0, 1, 2, 3]


def test_a_window_whose_estimate_fails_falls_back_to_talbot(monkeypatch):
    """Fault injection: a hyperbola reporting garbage (an infinite estimate) leaves
    every value to a Talbot contour per time, the same numbers as contour.invert."""
    transform, exact = PAIRS["erfc"]
    times = np.geomspace(0.05, 5.0, 30)

    def broken(tr, windows, n):
        return [(np.full((w.size, 1), 7.0), np.full((w.size, 1), np.inf)) for w in windows]
    monkeypatch.setattr(inversion, "invert_window", broken)
    f, err = invert_best(lambda s: transform(s)[:, None], times, 32, 0.0, [[0]])
    ref, ref_err = contour.invert(lambda s: transform(s)[:, None], times, 32)
    np.testing.assert_array_equal(f, ref)
    np.testing.assert_array_equal(err, ref_err)
    assert np.all(np.abs(f[:, 0] - exact(times)) <= err[:, 0] + 4 * EPS)


N_CASES = 24
SEED = 20261203
WORKERS = 2


def _window_cases():
    """Random regime-matrix cells (tests/test_error_bound.py's draw, its own seed) at
    12 log-spaced times over two decades, 3 depths."""
    rng = np.random.default_rng(SEED)
    out = []
    for _ in range(N_CASES):
        cell, _ = draw(rng)
        col, times, depths, init = build(cell)
        times = np.geomspace(0.03, 3.0, 12) * times[1] / 0.5
        depths = depths[[0, len(depths) // 2, -1]] if depths.size > 3 else depths
        out.append((cell, col, times, depths, init))
    return out


def test_windowed_values_are_within_their_estimates_across_the_regime_matrix(monkeypatch):
    """The hyperbola's own values and estimates (no retry on another contour), against
    the mpmath reference: concentration, total flux, cumulative mass and every budget
    term within the reported estimate + 4 eps x the reference's largest value, at
    Peclet numbers 0 to 1000 both ways, every boundary kind, depleting and stepped
    sources, decay, layer sources and measured initial profiles.  Where a value is
    served (finite estimate), most cells are served to 1e-10 of their scale."""
    monkeypatch.setattr(inversion, "_WINDOW_LEVEL", math.inf)
    monkeypatch.setattr(inversion, "_RETRY", math.inf)
    drawn = _window_cases()
    pool = ProcessPoolExecutor(WORKERS, mp_context=multiprocessing.get_context("spawn"))
    served, tight, bad = 0, 0, []
    try:
        futures = [pool.submit(laplace_reference_full, col, depths, times, init, 20)
                   for cell, col, times, depths, init in drawn]
        for (cell, col, times, depths, init), fut in zip(drawn, futures):
            windows, lone = plan_windows(times, contour.default_nodes(col))
            assert lone.size == 0, cell.name  # every time is served by a hyperbola
            sol = solve_laplace(col, times, depths, initial=init)
            ref = fut.result()
            for q in ("concentration", "total_flux", "cumulative_mass", "budget"):
                actual, size = _actual(sol, ref, q)
                est = sol.error[q]
                ok = np.isfinite(est)
                served += int(ok.sum())
                scale = size.max()
                tight += int(np.count_nonzero(est[ok] <= 1e-10 * scale))
                over = ok & (actual > est + 4 * EPS * size)
                if over.any():
                    bad.append((cell.name, q, float((actual / est)[over].max())))
    finally:
        pool.shutdown(cancel_futures=True)
    print(f"\nwindowed values: {served} served of {N_CASES * 12 * 4} (time x quantity), "
          f"{tight} within 1e-10 of their scale; estimate exceeded: {bad}")
    assert not bad, bad
    assert served >= 0.8 * N_CASES * 12 * 4
    assert tight >= 0.8 * served


@pytest.mark.parametrize("pe", [300, 1000])
def test_dense_times_at_high_peclet_share_parabolas_within_their_estimates(pe, monkeypatch):
    """Column Peclet numbers 300 and 1000 (tests/test_laplace.py's two-layer column,
    inlet boundary), 8 times from 0.3 to 1.2 advective travel times: the times the
    Talbot and hyperbolic contours cannot serve share parabolas (windows of up to 4x in
    time), and every C at 5 depths, ahead of and behind the front, lies within its
    estimate of the mpmath reference (tests/reference.py laplace_reference), every
    estimate within 1e-8 of the inlet concentration."""
    col, tau = _advective_column(pe)
    t = np.geomspace(0.3, 1.2, 8) * tau
    z = np.linspace(0.4, 2.0, 5)
    shared = []
    real = contour.plan_parabola

    def spy(s0, times, limit=4.0):
        plan = real(s0, times, limit)
        shared.extend(w.size for w in plan if w.size > 1)
        return plan
    monkeypatch.setattr(contour, "plan_parabola", spy)
    sol = solve_laplace(col, t, z)
    assert shared  # some retried times shared a parabola
    ref = laplace_reference(col, z, t, dps=20)
    actual = np.abs(sol.concentration - ref).max(axis=1)
    assert np.all(actual <= sol.error_estimate)
    assert np.all(sol.error_estimate <= 1e-8)


DENSE = [  # regime-matrix cells (tests/test_regime_matrix.py), indices into CELLS:
    1,   # Pe 0, contrast, step-off, tol 1e-10
    7,   # Pe 0, thin layer, mass transfer, depleting, decay
    14,  # Pe 10 down, one layer, tol 1e-10
    19,  # Pe 10 up, thin layer, measured profile
    28,  # Pe 100 down, contrast, inlet, stepped table
    32,  # Pe 300 down, inlet, measured profile
    37,  # Pe 1000 up, inlet, depleting
]


@pytest.mark.parametrize("index", DENSE)
def test_auto_runs_at_many_output_times_are_right_or_refused(index):
    """solve_column(engine="auto") with 14 output times from 0.02 to 5 characteristic
    times (windows of times share contours), against the mpmath reference: every
    concentration, flux, cumulative mass and budget term within the cell's tolerance
    times its scale, or refused (the rule of tests/test_regime_matrix.py)."""
    from test_regime_matrix import CELLS, REF_DPS, RESULTS, record_and_check
    from transport.solvers.engines import solve_column
    cell = CELLS[index]
    col, times, depths, init = build(cell)
    times = np.geomspace(0.02, 5.0, 14) * times[1] / 0.5  # build()'s middle is 0.5 t_char
    assert plan_windows(times, contour.default_nodes(col))[0]  # windows in use
    record_and_check(
        cell.name + "-dense",
        lambda: solve_column(col, times, depths, initial=init, tolerance=cell.tol),
        lambda: laplace_reference_full(col, depths, times, init, dps=REF_DPS),
        cell.tol)
    name, outcome, ratios, secs, why = RESULTS[-1]
    print(f"\n{outcome} {name}: error / (tol x scale) {ratios} {why}")


def test_unsettled_times_follow_the_rule_group_by_group():
    """inversion._unsettled (which times are inverted again) against the rule written
    out group by group: a time is unsettled when some estimate of a group exceeds
    max(level x the group's scale, its floor), the scale being the group's largest
    value whose estimate is below 1e-3 of it, 0 if there is none.  Random values with
    NaN and infinite entries, zero columns, overlapping groups and a column in no
    group (ignored)."""
    def rule(f, err, groups, floors, level):
        bad = np.zeros(f.shape[0], bool)
        with np.errstate(invalid="ignore"):
            for cols, floor in zip(groups, floors):
                fv, ev = np.abs(f[:, cols]), err[:, cols]
                ok = np.isfinite(fv) & (ev <= 1e-3 * fv)
                scale = fv[ok].max() if ok.any() else 0.0
                bad |= ~(ev <= max(level * scale, floor)).all(axis=1)
        return bad

    rng = np.random.default_rng(11)
    for trial in range(300):
        nt, m = int(rng.integers(1, 9)), int(rng.integers(2, 9))
        f = rng.normal(size=(nt, m)) * 10.0 ** rng.integers(-20, 3, size=(nt, m))
        err = np.abs(f) * 10.0 ** rng.uniform(-16, 0, size=(nt, m))
        for arr in (f, err):
            hit = rng.random((nt, m))
            arr[hit < 0.05] = np.nan
            arr[(hit > 0.05) & (hit < 0.08)] = np.inf
        if trial % 5 == 0:
            f[:, 0] = 0.0
        cut = sorted(rng.choice(np.arange(1, m), size=min(2, m - 1), replace=False))
        groups = [np.arange(0, cut[0])] + [np.arange(a, b) for a, b in
                                            zip(cut, cut[1:] + [m])]
        if trial % 3 == 0:
            groups = groups[:-1] if len(groups) > 1 else groups  # a column in no group
        if trial % 4 == 0:
            groups.append(np.array([0, m - 1]))  # overlapping
        floors = list(rng.choice([0.0, 1e-12, 1e-3], size=len(groups)))
        level = float(rng.choice([1e-12, 1e-10]))
        np.testing.assert_array_equal(inversion._unsettled(f, err, groups, floors, level),
                                      rule(f, err, groups, floors, level))
