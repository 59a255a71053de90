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
