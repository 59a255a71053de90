"""The compiled Laplace transfer (transport/solvers/laplace/kernel.py) against the array
code of transfer.py and against the independent mpmath solution of tests/reference.py.

Check values: the array code (itself verified in tests/test_laplace.py and
tests/test_regime_matrix.py against tests/reference.py: Talbot 1979, Abate & Valko
2004, Crank 1975, Ogata & Banks 1961) and the mpmath Laplace-domain reference.  The two
paths do the same arithmetic in a different order (LLVM's elementary functions, the LU
written out), so they agree to rounding in the transform; the inversion amplifies that
rounding where its own error estimate is large, so the rule is: within 1e-12 of the
scale plus the larger of the two stated error estimates (each value lies within the
other's stated error; measured: the difference is at most 1e-11 of the scale and 0.74
of the estimate, beyond 1e-12 of the scale only where the estimate itself is above it).
The compiled lone-time inversion (a Monte Carlo column's checks: one depth, times on
their own Talbot contours) is held to the same rule against the general inversion.
Several lone times in one call, and transforms without the stored mass, are held to
the one-time call and the full transform bit for bit (identities: no check value).
"""
from __future__ import annotations

import numpy as np
import pytest

from reference import laplace_reference
from test_laplace import _regime_columns
from test_regime_matrix import CELLS, build
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.solvers.laplace import kernel
from transport.solvers.laplace.engine import laplace_concentration, solve_laplace
from transport.solvers.laplace.transfer import LaplaceTransfer

YEAR = 365.25 * 86400.0

pytestmark = pytest.mark.skipif(not kernel.available(), reason="numba not importable")


def _extra_columns():
    """Columns beyond the regime matrix (invented data): a Peclet-8000 column whose far
    contour systems are singular in floating point, a semi-infinite bottom under a
    uniform initial state, 40 layers of alternating diffusivity (contrast 1e4) with
    5 mm layers among them, and the regime columns of tests/test_laplace.py (a source
    zone of finite inventory, a stepped source, a measured profile, upward flow)."""
    q, theta = 0.25 / YEAR, 0.4
    out = {"pe8000": (Column(layers=tuple(Layer(1.0, theta, q / (theta * 2000), 10.0)
                                          for _ in range(4)), darcy_flux=q,
                             top=Boundary("concentration", 1.0),
                             bottom=Boundary("concentration", 0.0)), None, False)}
    reg = _regime_columns()
    out["semi"] = (reg["pe0"][0], InitialState.uniform([0.25, 0.1]), True)
    lay = tuple(Layer(0.005 if i % 7 == 3 else 0.05, 0.35, 1e-9 if i % 2 else 1e-13,
                      2.0 + i % 3) for i in range(40))
    out["many"] = (Column(layers=lay, top=Boundary("concentration", 1.0),
                          bottom=Boundary("free-outflow"), darcy_flux=2e-10), None, False)
    for name, (col, init) in reg.items():
        out[name] = (col, init, False)
    return out


def _cases():
    cases = {}
    for cell in CELLS:
        col, t, z, init = build(cell)
        t = np.concatenate([[0.0], t, np.geomspace(t[0] / 100, t[-1] * 10, 7)])
        cases[cell.name] = (col, init, False, t, z)
    for name, (col, init, semi) in _extra_columns().items():
        t = np.array([0.0, 0.01, 0.05, 0.4, 2.0, 7.0, 30.0, 300.0]) * YEAR
        z = np.linspace(0.0, col.length * (1.5 if semi else 1.0), 9)
        cases[name] = (col, init, semi, t, z)
    return cases


CASES = _cases()


def _agree(x, y, ex, ey, what, scale=None):
    x, y = np.asarray(x, float), np.asarray(y, float)
    assert np.array_equal(np.isfinite(x), np.isfinite(y)), what
    if scale is None:
        scale = np.abs(x[np.isfinite(x)]).max(initial=0.0)
    diff = np.where(np.isfinite(x), np.abs(x - y), 0.0)
    allowed = 1e-12 * scale + np.maximum(ex, ey).reshape(-1, *([1] * (x.ndim - 1)))
    assert np.all(diff <= allowed), (what, float((diff / np.maximum(allowed, 1e-300)).max()))


@pytest.mark.parametrize("name", list(CASES))
def test_compiled_transfer_agrees_with_the_array_code(name):
    """Every output and error estimate of solve_laplace with the compiled transfer
    against the array code: the same times refused (NaN, infinite estimate), values
    within 1e-12 of the scale plus the stated estimate, estimates above rounding level
    (1e-10 of the scale) within 2x."""
    col, init, semi, t, z = CASES[name]
    assert LaplaceTransfer(col, init or InitialState.clean(), semi, compiled=True).compiled
    with np.errstate(all="ignore"):
        a = solve_laplace(col, t, z, initial=init, semi_infinite_bottom=semi)
        b = solve_laplace(col, t, z, initial=init, semi_infinite_bottom=semi, compiled=True)
    for q in ("concentration", "total_flux", "cumulative_mass"):
        _agree(getattr(a, q), getattr(b, q), a.error[q], b.error[q], (name, q))
    terms = [np.asarray(v, float) for k, v in a.budget.items() if k != "residual"]
    scale = max(np.abs(v[np.isfinite(v)]).max(initial=0.0) for v in terms)
    for key in a.budget:  # on the scale of the largest term, as the budget's estimate
        if key != "residual":  # the residual is rounding itself; its terms are compared
            _agree(a.budget[key], b.budget[key], a.error["budget"], b.error["budget"],
                   (name, key), scale)
    for q, ea in a.error.items():
        eb = b.error[q]
        assert np.array_equal(np.isfinite(ea), np.isfinite(eb)), (name, q)
        # an estimate above 1e-10 of the scale measures the inversion, not rounding:
        # there the two agree within 2x
        x = np.asarray(getattr(a, q) if q != "budget" else terms[0], float)
        big = np.isfinite(ea) & (ea > 1e-10 * (scale if q == "budget" else
                                               np.abs(x[np.isfinite(x)]).max(initial=0.0)))
        assert np.all(eb[big] <= 2 * ea[big]) and np.all(ea[big] <= 2 * eb[big]), (name, q)


@pytest.mark.parametrize("name", list(_regime_columns()))
def test_compiled_transfer_against_the_mpmath_reference(name):
    """laplace_concentration with the compiled transfer (a site's receptor curves)
    within its own error estimate of the mpmath solution of tests/reference.py (Talbot
    1979 rule, Abate & Valko 2004), plus 1e-12 of the scale."""
    col, init = _regime_columns()[name]
    z = np.array([0.3, 0.8, 1.7])
    t = np.array([0.05, 0.4, 2.0, 7.0, 30.0]) * YEAR
    conc, err = laplace_concentration(col, t, z, initial=init, compiled=True)
    ref = laplace_reference(col, z, t, initial=init, dps=20)
    assert np.all(np.abs(conc - ref) <= err[:, None] + 1e-12)


def test_capped_and_singular_s_values_are_the_same(monkeypatch):
    """On the contours of the Peclet-8000 column some systems are singular in floating
    point or their exponents are cut: at every s value the array code met there, both
    paths flag the same ones and agree elsewhere."""
    from transport.solvers.laplace import transfer
    col, init, semi, t, z = CASES["pe8000"]
    met = []
    real = transfer.LaplaceTransfer.evaluate

    def recorded(self, s, signals, depths):
        met.append((np.asarray(s), signals, depths))
        return real(self, s, signals, depths)
    monkeypatch.setattr(transfer.LaplaceTransfer, "evaluate", recorded)
    with np.errstate(all="ignore"):
        solve_laplace(col, t, z, initial=init)
        flagged = 0
        for s, signals, depths in met:
            a = real(LaplaceTransfer(col, InitialState.clean()), s, signals, depths)
            b = real(LaplaceTransfer(col, InitialState.clean(), compiled=True), s, signals,
                     depths)
            np.testing.assert_array_equal(a[3], b[3])
            flagged += int(a[3].sum())
            ok = ~a[3]
            # C^, F^ (ns, nz) and the stored mass (nseg, ns) at the unflagged s
            for x, y in ((a[0][ok], b[0][ok]), (a[1][ok], b[1][ok]),
                         (a[2][:, ok], b[2][:, ok])):
                assert np.all(np.abs(x - y) <= 1e-12 * np.abs(x).max(initial=0.0))
    assert flagged > 0  # the case has flagged s values


def test_switched_off_by_the_environment(monkeypatch):
    """STRATIFLUX_JIT=0 leaves every transform to the array code."""
    monkeypatch.setattr(kernel, "_STATE", {})
    monkeypatch.setenv("STRATIFLUX_JIT", "0")
    col = _regime_columns()["pe100"][0]
    assert not kernel.available()
    assert not LaplaceTransfer(col, InitialState.clean(), compiled=True).compiled


def _lone_cases():
    """(column, initial) of the regime matrix and the extra columns at one depth each,
    those whose signals are steps switched on at 0 (the others take the general path)."""
    for name, (col, _, semi, t, z) in CASES.items():
        if not semi:
            yield name, col, CASES[name][1]


@pytest.mark.parametrize("name", [n for n, *_ in _lone_cases()])
def test_lone_times_equal_the_general_inversion(name):
    """laplace_concentration at one depth and one time (a Monte Carlo column's check,
    the polish of a Laplace-served curve) in the compiled lone-time kernel: within
    1e-12 of the scale plus the stated estimate of the general path's value (Talbot
    contours of the same n and n2 nodes: contour.invert), estimates above rounding
    within 2x; where the general path would try the parabolic contour, or the signals
    are not steps at 0, the general path serves (the two then agree exactly)."""
    from transport.solvers.laplace import engine
    col, init, _, t, z = CASES[name]
    init = init or InitialState.clean()
    depth = float(z[len(z) // 2])
    served = 0
    for time in t[t > 0]:
        with np.errstate(all="ignore"):
            model, tt, dd, out, est = engine._inverted(col, [time], [depth], init, False,
                                                       None, None, True,
                                                       concentration_only=True)
            want, e_want = engine._concentration(col, model, init, tt, dd, out, est)
            got, e_got = laplace_concentration(col, [time], [depth], initial=init,
                                               compiled=True)
        lone = engine._lone_times(col, [time], [depth], init, None)
        if lone is None:
            np.testing.assert_array_equal(got, want)
            continue
        served += 1
        scale = max(abs(float(want[0, 0])), 1e-300)
        assert abs(got[0, 0] - want[0, 0]) <= 1e-12 * scale + max(e_got[0], e_want[0])
        if e_want[0] > 1e-10 * scale:
            assert e_want[0] / 2 <= e_got[0] <= 2 * e_want[0]
    _LONE_SERVED[name] = served


_LONE_SERVED = {}


def test_lone_times_served_compiled_in_most_columns():
    """The comparison above exercised the compiled path: at least 20 of its columns
    (those whose signals are steps at 0) had times served by it."""
    if len(_LONE_SERVED) < len(list(_lone_cases())):
        pytest.skip("run with the comparison above")
    assert sum(1 for v in _LONE_SERVED.values() if v) >= 15


def test_lone_times_against_the_mpmath_reference():
    """Three regime columns (no flow, upward flow, a measured profile) at one depth,
    time by time in the compiled lone-time kernel: within its own error estimate of the
    mpmath solution (tests/reference.py, Talbot 1979, Abate & Valko 2004) plus 1e-12."""
    from transport.solvers.laplace import engine
    for name, (col, init) in _regime_columns().items():
        init = init or InitialState.clean()
        t = np.array([0.05, 2.0, 30.0]) * YEAR
        ref = laplace_reference(col, [0.8], t, initial=init, dps=20)[:, 0]
        for time, r in zip(t, ref):
            found = engine._lone_times(col, [time], [0.8], init, None)
            if found is None:
                continue
            c, e = found
            assert abs(c[0, 0] - r) <= e[0] + 1e-12, name


@pytest.mark.parametrize("name", [n for n, *_ in _lone_cases()])
def test_several_lone_times_in_one_call_equal_one_call_each(name):
    """laplace_lone_times (a Monte Carlo realization's check of its breakthrough and
    peak, each time on its own contours) gives, bit for bit, the numbers of
    laplace_concentration called for each time alone: in one compiled call where the
    kernel serves every time, else time by time (the general path). Times 1 % apart are
    included, which the general path would put in one window."""
    from transport.solvers.laplace.engine import laplace_lone_times
    col, init, _, t, z = CASES[name]
    init = init or InitialState.clean()
    depth = float(z[len(z) // 2])
    t = t[t > 0]
    times = np.unique(np.concatenate([t, 1.01 * t[:1]]))
    with np.errstate(all="ignore"):
        got, err = laplace_lone_times(col, times, depth, initial=init)
        each = [laplace_concentration(col, [time], [depth], initial=init, compiled=True)
                for time in times]
    np.testing.assert_array_equal(got, [c[0, 0] for c, _ in each])
    np.testing.assert_array_equal(err, [e[0] for _, e in each])


@pytest.mark.parametrize("compiled", [True, False])
def test_transforms_without_the_stored_mass_are_the_same(compiled):
    """LaplaceTransfer.evaluate without the stored mass (the concentration alone, as
    laplace_concentration asks for it) gives C^, F^ and the capped flags of the full
    evaluation bit for bit, in the compiled and the array code, on every regime column."""
    for name, (col, init, semi, t, z) in CASES.items():
        init = init or InitialState.clean()
        model = LaplaceTransfer(col, init, semi, compiled)
        s = np.array([0.3 + 2.0j, 4.0 - 1.0j, 50.0 + 0.0j]) / float(np.max(t))
        signals = (np.ones(3, complex) / s, np.zeros(3, complex),
                   np.zeros((model.n, 3), complex), 1.0)
        with np.errstate(all="ignore"):
            full = model.evaluate(s, signals, z)
            alone = model.evaluate(s, signals, z, stored=False)
        for a, b in ((full[0], alone[0]), (full[1], alone[1]), (full[3], alone[3])):
            np.testing.assert_array_equal(a, b, err_msg=name)
