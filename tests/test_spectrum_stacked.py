"""Eigenvalues and eigenfunctions of several columns in shared passes
(``eigenvalues_many``, ``modes_many``, used for a boring's Monte Carlo columns): against
independent references, and equal to the one-column solve to 1e-12 across regimes, with
the array code and with the compiled mismatch kernel (``compiled=True``, a site run's
path)."""
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from transport.model.column import Boundary, Column, InputError, Layer
from transport.solvers import modal as sp
from transport.solvers.modal import kernel, spectrum

from reference import brenner_eigenvalues, carslaw_jaeger_two_layer_eigenvalues
from test_spectrum import HARD, layer_st  # the hard stacks and random layers used there

KINDS_TOP = ["concentration", "sealed", "mass-transfer", "flux", "inlet"]
KINDS_BOTTOM = ["concentration", "sealed", "mass-transfer", "free-outflow"]


@pytest.fixture(params=[False, True], ids=["array", "compiled"])
def compiled(request):
    """Both forms of the shared passes; the compiled one must load (numba is a
    dependency), else it would silently test the array code twice."""
    if request.param:
        assert kernel.available(), "the compiled mismatch kernel did not load"
    return request.param


def _bc(kind):
    return Boundary(kind, 0.0 if kind in ("mass-transfer", "sealed") else 1.0,
                    2e-7 if kind == "mass-transfer" else 0.0)


def _same(many, single, ops):
    """Equal to 1e-12 of each eigenvalue, or of the column's diffusive rate
    max(D/R) / L^2 for an eigenvalue near zero (sealed ends without decay: lambda_0 = 0,
    which each solve holds to rounding of that scale; in exp(-lambda t) the difference
    is then 1e-12 at the diffusion time L^2 / D)."""
    for a, b, op in zip(many, single, ops):
        assert a.shape == b.shape
        rate = np.max(op.k / op.a) / np.sum(op.thickness) ** 2
        scale = np.maximum(np.abs(b), rate)
        assert np.all(np.abs(a - b) <= 1e-12 * scale), np.max(np.abs(a - b) / scale)


def test_two_layer_stack_matches_carslaw_jaeger(compiled):
    """Six two-layer slabs of different contrast and both bottom kinds, solved in one
    stack: first 15 eigenvalues of each vs the composite-slab eigenvalue equation of
    Carslaw & Jaeger (1959, Conduction of Heat in Solids, composite solids), roots with
    mpmath to 30 digits; agreement 1e-10 relative."""
    cols = []
    for i, (d2, r2, bottom) in enumerate([(3e-11, 6.0, "concentration"), (3e-11, 6.0, "sealed"),
                                          (1e-12, 20.0, "concentration"), (5e-9, 1.0, "sealed"),
                                          (8e-10, 1.8, "concentration"), (2e-13, 50.0, "sealed")]):
        layers = (Layer(0.6 + 0.1 * i, 0.35, 8e-10, 1.8), Layer(1.4, 0.45, d2, r2))
        cols.append(Column(layers=layers, top=_bc("concentration"), bottom=_bc(bottom)))
    lams = sp.eigenvalues_many([sp.build_operator(c) for c in cols], [15] * len(cols),
                               compiled)
    for col, lam in zip(cols, lams):
        ref = np.array([float(x) for x in carslaw_jaeger_two_layer_eigenvalues(col, 15)])
        np.testing.assert_allclose(lam, ref, rtol=1e-10)


def test_advective_stack_matches_brenner(compiled):
    """Single layers from column Peclet number 0.1 to 300 in one stack, flux inlet and free
    outflow: eigenvalues from Brenner (1962, Chem. Eng. Sci. 17:229),
    beta cot beta - beta^2/P + P/4 = 0, lambda = (D/R)(beta^2 + P^2/4)/L^2, roots with
    mpmath; agreement 1e-10 relative."""
    L, th, D, R = 1.5, 0.3, 1e-9, 2.0
    peclets = [0.1, 3.0, 40.0, 300.0]
    cols = [Column(layers=(Layer(L, th, D, R),), top=Boundary("inlet", 1.0),
                   bottom=Boundary("free-outflow"), darcy_flux=P * th * D / L) for P in peclets]
    lams = sp.eigenvalues_many([sp.build_operator(c) for c in cols], [10, 12, 8, 10],
                               compiled)
    for P, lam in zip(peclets, lams):
        ref = brenner_eigenvalues(P, L, th, D, R, lam.size)
        np.testing.assert_allclose(lam, ref, rtol=1e-10)


@pytest.mark.parametrize("layers", HARD)
def test_hard_stacks_equal_single_solves(layers, compiled):
    """Thin, high-contrast and partitioned layers, every end kind and downward and upward
    flow up to a column Peclet number of about 1000, all in one stack: each operator's
    eigenvalues equal its own solve to 1e-12 (the optimised path against the single-column
    path, issue 12)."""
    length = sum(lay.thickness for lay in layers)
    cols = []
    for top in KINDS_TOP:
        for bottom in KINDS_BOTTOM:
            for pe in (0.0, 30.0, -200.0, 1000.0):
                k_min = min(lay.water_content * lay.diffusivity for lay in layers)
                q = pe * k_min / length
                try:  # no flow through partition jumps (refused, tested elsewhere)
                    cols.append(Column(layers=tuple(layers), top=_bc(top),
                                       bottom=_bc(bottom), darcy_flux=q))
                except InputError:
                    continue
    ops = [sp.build_operator(c) for c in cols]
    ns = [40 + 7 * (i % 5) for i in range(len(ops))]
    assert len(ops) >= 20
    single = [sp.eigenvalues(op, n) for op, n in zip(ops, ns)]
    _same(sp.eigenvalues_many(ops, ns, compiled), single, ops)


@pytest.mark.parametrize("use_kernel", [False, True], ids=["array", "compiled"])
@settings(max_examples=25, deadline=None)
@given(layers=st.lists(layer_st, min_size=1, max_size=6),
       members=st.lists(st.tuples(st.sampled_from(KINDS_TOP), st.sampled_from(KINDS_BOTTOM),
                                  st.floats(-300.0, 300.0), st.floats(0.3, 3.0),
                                  st.integers(1, 90)), min_size=2, max_size=8))
def test_random_stacks_equal_single_solves(use_kernel, layers, members):
    """Property: operators with the same layer count but different coefficients (each
    member scales every diffusivity), ends, flows (Peclet -300 to 300) and mode counts,
    solved together, give each operator's own eigenvalues to 1e-12 (the single solve
    with the array code; the shared one with either)."""
    assert not use_kernel or kernel.available()
    length = sum(lay.thickness for lay in layers)
    ops, ns = [], []
    for top, bottom, pe, scale, n in members:
        lays = tuple(Layer(lay.thickness, lay.water_content, lay.diffusivity * scale,
                           lay.retardation, decay_rate=lay.decay_rate) for lay in layers)
        k_min = min(lay.water_content * lay.diffusivity for lay in lays)
        ops.append(sp.build_operator(Column(layers=lays, top=_bc(top), bottom=_bc(bottom),
                                            darcy_flux=pe * k_min / length)))
        ns.append(n)
    _same(sp.eigenvalues_many(ops, ns, use_kernel),
          [sp.eigenvalues(op, n) for op, n in zip(ops, ns)], ops)


def test_mixed_layer_counts_and_empty_requests():
    """Operators of different layer counts are grouped; a request for no eigenvalue
    gives an empty array in its place."""
    a = sp.build_operator(Column(layers=(Layer(1.0, 0.3, 1e-9, 2.0),),
                                 top=_bc("concentration"), bottom=_bc("sealed")))
    b = sp.build_operator(Column(layers=tuple(HARD[0]), top=_bc("concentration"),
                                 bottom=_bc("free-outflow")))
    out = sp.eigenvalues_many([a, b, a, b], [20, 30, 0, 25])
    assert [x.size for x in out] == [20, 30, 0, 25]
    _same([out[0], out[1], out[3]],
          [sp.eigenvalues(a, 20), sp.eigenvalues(b, 30), sp.eigenvalues(b, 25)], [a, b, b])
    # Crank (1975), The Mathematics of Diffusion, eq. 4.18: Dirichlet / no flux
    exact = ((np.arange(20) + 0.5) * np.pi / 1.0) ** 2 * 1e-9 / 2.0
    np.testing.assert_allclose(out[0], exact, rtol=1e-12)


def test_failed_guess_is_redone_alone(monkeypatch):
    """Fault injection: where the first guess of an operator's spectrum bounds is wrong
    (upper bound too low), that operator's grid is redone alone on searched bounds and
    its eigenvalues still equal the single solve (which searches the same way)."""
    ops = [sp.build_operator(Column(layers=tuple(HARD[0]), top=_bc("concentration"),
                                    bottom=_bc(b))) for b in KINDS_BOTTOM]
    single = [sp.eigenvalues(op, 50) for op in ops]
    real = spectrum._lambda_guess
    calls = []

    def bad_guess(op, n):
        lo, hi, span = real(op, n)
        calls.append(op)
        return (lo, lo + 1e-3 * (hi - lo), span) if op is ops[1] else (lo, hi, span)
    monkeypatch.setattr(spectrum, "_lambda_guess", bad_guess)
    _same(sp.eigenvalues_many(ops, [50] * 4), single, ops)
    assert sum(c is ops[1] for c in calls) >= 2  # guessed, then searched


# ------------------------------------------------------------------ eigenfunctions
def _face_values(md):
    """psi and k psi' at the faces: (N+1, n) each."""
    scale = np.exp(md.logs)
    return md.v * scale, md.p * scale


def _same_modes(many, single, depths):
    """Each mode of the shared shooting equals its own solve to 1e-12 of the mode's
    largest value, at the faces and at ``depths`` (with the factors e^{-A}, 1, e^{A}
    of the projections and the fields)."""
    for a, b in zip(many, single):
        assert a.lam is not None and np.array_equal(a.lam, b.lam)
        pairs = list(zip(_face_values(a), _face_values(b)))
        for sign in (-1, 0, 1):
            pairs += list(zip(a.evaluate(depths, exp_sign=sign),
                              b.evaluate(depths, exp_sign=sign)))
        for x, y in pairs:
            big = np.max(np.abs(y), axis=0)
            assert np.all(np.abs(x - y) <= 1e-12 * big), np.max(np.abs(x - y) / big)


def test_stacked_modes_are_orthonormal():
    """The two-layer slabs of the Carslaw & Jaeger check, shot in one stack: their modes
    are orthonormal in the weight theta R, int a psi_m psi_n dz = delta_mn (a regular
    Sturm-Liouville problem, e.g. Pryce 1993, Numerical Solution of Sturm-Liouville
    Problems, ch. 2), by 64-point Gauss-Legendre quadrature on each layer (numpy), to
    1e-9."""
    cols = [Column(layers=(Layer(0.6 + 0.1 * i, 0.35, 8e-10, 1.8), Layer(1.4, 0.45, d2, r2)),
                   top=_bc("concentration"), bottom=_bc(bottom))
            for i, (d2, r2, bottom) in enumerate([(3e-11, 6.0, "concentration"),
                                                  (1e-12, 20.0, "sealed"),
                                                  (5e-9, 1.0, "sealed")])]
    ops = [sp.build_operator(c) for c in cols]
    lams = sp.eigenvalues_many(ops, [12, 15, 9])
    x, w = np.polynomial.legendre.leggauss(64)
    for op, md in zip(ops, sp.modes_many(ops, lams)):
        gram = 0.0
        for i in range(op.n_layers):
            z0, z1 = op.z[i], op.z[i + 1]
            z = 0.5 * (z1 - z0) * x + 0.5 * (z1 + z0)
            psi, _ = md.evaluate(z, exp_sign=0)
            gram = gram + op.a[i] * (psi.T * (0.5 * (z1 - z0) * w)) @ psi
        np.testing.assert_allclose(gram, np.eye(md.n_modes), atol=1e-9)


@pytest.mark.parametrize("layers", HARD)
def test_hard_stack_modes_equal_single_solves(layers):
    """The hard stacks with every end kind and Peclet numbers 0, 30, -200 and 1000, all
    shot in one pass: every eigenfunction equals its own solve to 1e-12 (the optimised
    path against the single-column path, issue 12)."""
    length = sum(lay.thickness for lay in layers)
    cols = []
    for top in KINDS_TOP:
        for bottom in ("concentration", "free-outflow"):
            for pe in (0.0, 30.0, -200.0, 1000.0):
                k_min = min(lay.water_content * lay.diffusivity for lay in layers)
                try:
                    cols.append(Column(layers=tuple(layers), top=_bc(top),
                                       bottom=_bc(bottom), darcy_flux=pe * k_min / length))
                except InputError:
                    continue
    ops = [sp.build_operator(c) for c in cols]
    lams = sp.eigenvalues_many(ops, [30 + 5 * (i % 4) for i in range(len(ops))])
    depths = np.linspace(0.0, length, 41)
    _same_modes(sp.modes_many(ops, lams), [sp.modes(op, lam) for op, lam in zip(ops, lams)],
                depths)


def test_modes_of_mixed_layer_counts():
    """Operators of different layer counts are shot in separate groups and keep their
    order; each mode equals its own solve."""
    a = sp.build_operator(Column(layers=(Layer(1.0, 0.3, 1e-9, 2.0),),
                                 top=_bc("concentration"), bottom=_bc("sealed")))
    b = sp.build_operator(Column(layers=tuple(HARD[0]), top=_bc("concentration"),
                                 bottom=_bc("free-outflow")))
    ops = [a, b, a]
    lams = sp.eigenvalues_many(ops, [20, 25, 7])
    many = sp.modes_many(ops, lams)
    assert [m.op for m in many] == ops and [m.n_modes for m in many] == [20, 25, 7]
    _same_modes(many, [sp.modes(op, lam) for op, lam in zip(ops, lams)],
                np.linspace(0.0, min(a.z[-1], b.z[-1]), 17))


def test_grid_brackets_of_a_stack_equal_each_members_own():
    """The grid brackets of a stack's members, found in one call, equal each member's
    own (the optimised path against the single path, issue 12), also when one
    member's grid holds a non-finite mismatch (an overflowing state): then each member
    is bracketed on its own, so the NaN cannot reach the others."""
    from transport.solvers.modal import brackets as br
    ops = [sp.build_operator(Column(layers=tuple(HARD[0]), top=_bc(top), bottom=_bc(bottom)))
           for top, bottom in (("concentration", "free-outflow"), ("sealed", "concentration"),
                               ("flux", "sealed"))]
    ns = [30, 25, 40]
    members = []
    for op, n in zip(ops, ns):
        lo, hi, _ = spectrum._lambda_guess(op, n)
        grid = spectrum._grid(lo, hi, n)
        with np.errstate(**spectrum._QUIET):
            members.append(((grid,) + spectrum._mismatch(op, grid)[:3], lo))
    for poison in (False, True):
        parts = [list(g) for g, _ in members]
        if poison:
            parts[0][1] = parts[0][1].copy()
            parts[0][1][3] = np.nan
        arrays = [np.concatenate(v) for v in zip(*parts)]
        many = br.brackets_many(*arrays, ns, [lo for _, lo in members],
                                [p[0].size for p in parts])
        for r, (p, (_, lo)) in enumerate(zip(parts, members)):
            alone = br.brackets(*p, ns[r], lo)
            for x, y in zip(many[r], alone):
                np.testing.assert_array_equal(x, y)
