"""The compiled mismatch kernel (transport/solvers/modal/kernel.py, a site run's shared
eigen-solve): the eigenvalues it finds equal the array code's single-column solve to
1e-12 on random columns of 1 to 1000 layers with every end kind, partition jumps and
flow, or else 40-digit mpmath shooting decides; its eigenvalue counts are those of
Pryce (1993, Numerical Solution of Sturm-Liouville Problems, ch. 2: N(lambda) = number
of eigenvalues below lambda); it switches off and falls back cleanly.  The compiled eigenfunctions (the same
equations as the array code's shooting, one mode at a time) equal the array code's to
1e-12 of each mode's size.  The stacked eigen-solves of a boring's columns are checked
with it in test_spectrum_stacked.py."""
import os
import subprocess
import sys

import numpy as np
import pytest

from transport.solvers import modal as sp
from transport.solvers.modal import kernel, spectrum
from transport.solvers.modal.brackets import raw_counts

from test_core_paths import CASES, TOL, _column, _ids, _mp_brackets


@pytest.fixture(scope="module", params=CASES, ids=_ids)
def solved(request):
    """One random column of test_core_paths: operator, modes asked, the array code's
    eigenvalues and the compiled kernel's."""
    n, m, seed, top, bottom, pe = request.param
    op = sp.build_operator(_column(n, seed, top, bottom, pe))
    assert kernel.available(), "the compiled mismatch kernel did not load"
    # the array code explicitly (sp.eigenvalues runs the kernel from 50 layers on)
    return (op, m, sp.eigenvalues_many([op], [m], compiled=False)[0],
            sp.eigenvalues_many([op], [m], compiled=True)[0])


def test_eigenvalues_equal_the_array_code(solved):
    """Each eigenvalue equals the array code's to 1e-12 of itself (or of the column's
    diffusive rate near zero), or else the 40-digit mpmath Wronskian changes sign
    within 5e-13 of the compiled value (so the compiled one is the exact one)."""
    op, m, arr, comp = solved
    assert comp.shape == (m,) and np.all(np.diff(comp) > 0)
    rate = np.max(op.k / op.a) / np.sum(op.thickness) ** 2
    off = np.abs(comp - arr) / np.maximum(np.abs(arr), rate)
    for j in np.flatnonzero(off > TOL):
        assert _mp_brackets(op, comp[j], 5e-13), (j, off[j])


def test_counts_are_pryce_counts(solved):
    """The compiled kernel's Pruefer counts ceil(G / pi): at the midpoints between the
    eigenvalues j + 1, at 1e-9 above each j + 1, and the same as the array code's
    (Pryce 1993, ch. 2)."""
    op, m, arr, _ = solved
    mids = 0.5 * (arr[1:] + arr[:-1])
    above = arr * (1 + 1e-9) + 1e-300
    for lam, want in ((mids, np.arange(1, m)), (above, np.arange(1, m + 1))):
        with np.errstate(all="ignore"):
            G = spectrum._mismatch(op, lam, slopes=False, compiled=True)[0]
        np.testing.assert_array_equal(raw_counts(G), want)
        np.testing.assert_array_equal(sp.count_below(op, lam), want)


def test_slopes_agree_with_the_array_code(solved):
    """Mismatch and its lambda derivative at the eigenvalues' midpoints, matched at the
    same faces: equal to the array code's to 1e-9 (rad, and relative; the derivative is
    a sum of closed-form layer integrals: Pryce 1993, ch. 2)."""
    op, m, arr, _ = solved
    lam = 0.5 * (arr[1:] + arr[:-1])
    with np.errstate(all="ignore"):
        G0, d0, f0 = spectrum._mismatch(op, lam)
        G1, d1, _ = spectrum._mismatch(op, lam, face=f0, compiled=True)
    ok = np.isfinite(d0)
    assert ok.mean() > 0.9
    np.testing.assert_allclose(G1, G0, rtol=0, atol=1e-9 * (1 + np.abs(G0).max()))
    np.testing.assert_allclose(d1[ok], d0[ok], rtol=1e-9)


def test_switched_off_and_fallback(monkeypatch):
    """STRATIFLUX_JIT=0 switches the kernel off (a fresh process: numba never imported);
    a kernel that failed to load leaves compiled=True to the array code, same numbers."""
    env = dict(os.environ, STRATIFLUX_JIT="0")
    code = ("import sys; from transport.solvers.modal import kernel; "
            "print(kernel.available(), 'numba' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                         text=True, check=True).stdout.split()
    assert out == ["False", "False"]
    op = sp.build_operator(_column(3, 3, "inlet", "free-outflow", 20))
    want = sp.eigenvalues(op, 30)
    monkeypatch.setitem(kernel._STATE, "kernel", None)
    assert not kernel.available()
    np.testing.assert_array_equal(sp.eigenvalues_many([op], [30], compiled=True)[0], want)


def test_compiled_eigenfunctions_equal_the_array_code(solved):
    """The compiled eigenfunction kernel (a site's Monte Carlo columns): psi and k psi'
    at 57 depths equal the array code's (eigenfunctions._shot_modes) to 1e-12 of each
    mode's largest value, on the random columns of 1 to 1000 layers above (the same
    equations one mode at a time; measured: 2.2e-13 at 1000 layers)."""
    from transport.solvers.modal.eigenfunctions import modes_many
    op, m, _, comp = solved
    assert kernel.modes_available(), "the compiled eigenfunction kernel did not load"
    arr, cmp_ = modes_many([op], [comp])[0], modes_many([op], [comp], compiled=True)[0]
    z = np.linspace(0.0, op.z[-1], 57)
    for a, b in zip(arr.evaluate(z, 0), cmp_.evaluate(z, 0)):
        scale = np.abs(a).max(axis=0)
        assert np.all(np.abs(b - a) <= 1e-12 * scale)


def test_compiled_eigenfunctions_fall_back(monkeypatch):
    """A kernel that failed to load leaves compiled=True to the array code: the same
    numbers to the bit."""
    from transport.solvers.modal.eigenfunctions import modes_many
    op = sp.build_operator(_column(3, 3, "inlet", "free-outflow", 20))
    lam = sp.eigenvalues(op, 30)
    want = modes_many([op], [lam])[0]
    monkeypatch.setitem(kernel._MODES_STATE, "kernel", None)
    assert not kernel.modes_available()
    got = modes_many([op], [lam], compiled=True)[0]
    for name in ("v", "p", "logs"):
        np.testing.assert_array_equal(getattr(got, name), getattr(want, name))
