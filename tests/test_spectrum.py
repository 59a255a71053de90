"""Layered eigen-solver: eigenvalues, counting, orthogonality, against independent sources."""
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from transport.solvers import modal as sp
from transport.model.column import Boundary, Column, Layer

from reference import brenner_eigenvalues, carslaw_jaeger_two_layer_eigenvalues


def _column(layers, top="concentration", bottom="concentration", q=0.0, h=1e-7):
    def bc(kind):
        return Boundary(kind, 1.0 if kind != "mass-transfer" else 0.0,
                        h if kind == "mass-transfer" else 0.0)
    return Column(layers=tuple(layers), top=bc(top), bottom=bc(bottom), darcy_flux=q)


def test_single_layer_dirichlet_matches_crank():
    """lambda_n = (n pi / L)^2 D / R: Crank (1975), The Mathematics of Diffusion, eq. 4.17."""
    col = _column([Layer(2.0, 0.4, 1e-9, 2.0)])
    lam = sp.eigenvalues(sp.build_operator(col), 40)
    exact = (np.arange(1, 41) * np.pi / 2.0) ** 2 * 1e-9 / 2.0
    np.testing.assert_allclose(lam, exact, rtol=1e-13)


def test_split_layer_changes_nothing():
    """A uniform slab split into layers has the same spectrum (Carr & Turner 2016, invariance
    test); Dirichlet/no-flux: lambda = ((n + 1/2) pi / L)^2 D/R (Crank 1975, eq. 4.18)."""
    layers = [Layer(t, 0.4, 1e-9, 2.0) for t in (0.5, 1.0, 1e-3, 0.499)]
    col = _column(layers, bottom="sealed")
    lam = sp.eigenvalues(sp.build_operator(col), 60)
    exact = ((np.arange(60) + 0.5) * np.pi / 2.0) ** 2 * 1e-9 / 2.0
    np.testing.assert_allclose(lam, exact, rtol=1e-12)


def test_many_layers_run_in_the_compiled_kernel_and_match_crank(monkeypatch):
    """A uniform slab split into 60 layers (from spectrum.COMPILED_LAYERS on the default
    eigen-solve runs its passes in the compiled kernel; checked by counting its calls):
    Dirichlet/no-flux lambda = ((n + 1/2) pi / L)^2 D/R (Crank 1975, eq. 4.18), to
    1e-12, as the array code gives it (Carr & Turner 2016, invariance test)."""
    from transport.solvers.modal import kernel, spectrum

    assert kernel.available(), "the compiled mismatch kernel did not load"
    assert spectrum.COMPILED_LAYERS <= 60
    thick = np.linspace(0.5, 1.5, 60)
    thick *= 2.0 / thick.sum()
    col = _column([Layer(float(t), 0.4, 1e-9, 2.0) for t in thick], bottom="sealed")
    op = sp.build_operator(col)
    calls = []
    real = kernel.mismatch
    monkeypatch.setattr(kernel, "mismatch", lambda *a, **k: calls.append(1) or real(*a, **k))
    lam = sp.eigenvalues(op, 200)
    assert calls
    exact = ((np.arange(200) + 0.5) * np.pi / 2.0) ** 2 * 1e-9 / 2.0
    np.testing.assert_allclose(lam, exact, rtol=1e-12)
    array = sp.eigenvalues_many([op], [200], compiled=False)[0]
    np.testing.assert_allclose(array, exact, rtol=1e-12)


def test_decay_shifts_every_eigenvalue():
    """First-order decay adds mu to every eigenvalue (Danckwerts 1951 transform)."""
    mu = 3e-9
    col = _column([Layer(1.0, 0.3, 1e-9, 1.5, decay_rate=mu), Layer(0.7, 0.4, 2e-10, 4.0, decay_rate=mu)])
    col0 = _column([Layer(1.0, 0.3, 1e-9, 1.5), Layer(0.7, 0.4, 2e-10, 4.0)])
    lam = sp.eigenvalues(sp.build_operator(col), 30)
    lam0 = sp.eigenvalues(sp.build_operator(col0), 30)
    np.testing.assert_allclose(lam, lam0 + mu, rtol=1e-12)


@pytest.mark.parametrize("bottom", ["concentration", "sealed"])
def test_two_layer_composite_matches_carslaw_jaeger(bottom):
    """First 20 eigenvalues vs the composite-slab eigenvalue equation of Carslaw & Jaeger
    (1959, Conduction of Heat in Solids, 2nd ed., composite solids chapter), solved with
    mpmath to 30 digits; required agreement 1e-10 relative."""
    layers = [Layer(0.6, 0.35, 8e-10, 1.8), Layer(1.4, 0.45, 3e-11, 6.0)]
    col = _column(layers, bottom=bottom)
    ref = np.array([float(x) for x in carslaw_jaeger_two_layer_eigenvalues(col, 20)])
    lam = sp.eigenvalues(sp.build_operator(col), 20)
    np.testing.assert_allclose(lam, ref, rtol=1e-10)


def test_advection_single_layer_matches_brenner():
    """Flux inlet / free outflow with advection: eigenvalues from Brenner (1962, Chem. Eng. Sci.
    17:229): beta cot beta - beta^2/P + P/4 = 0, lambda = (D/R)(beta^2 + P^2/4)/L^2,
    roots found here with mpmath."""
    L, th, D, R, q = 1.5, 0.3, 1e-9, 2.0, 2e-9
    col = Column(layers=(Layer(L, th, D, R),), top=Boundary("inlet", 1.0),
                 bottom=Boundary("free-outflow"), darcy_flux=q)
    ref = brenner_eigenvalues(q * L / (th * D), L, th, D, R, 12)
    lam = sp.eigenvalues(sp.build_operator(col), 12)
    np.testing.assert_allclose(lam, ref, rtol=1e-10)


HARD = [
    # 5 layers, 1e4 contrast and a 1 mm layer in a 5 m column
    [Layer(1.0, 0.3, 1e-9, 1.0), Layer(1e-3, 0.4, 1e-13, 3.0), Layer(1.5, 0.5, 1e-10, 5.0),
     Layer(0.5, 0.3, 1e-9, 1.0), Layer(1.999, 0.35, 1e-11, 2.0)],
    # polymer sheet with partition 80 on both faces
    [Layer(0.3, 0.4, 5e-10, 1.0, partition_to_next=80.0), Layer(2e-3, 1.0, 3e-13, 1.0,
     partition_to_next=1 / 80), Layer(0.9, 0.35, 3e-10, 1.5)],
]


@pytest.mark.parametrize("layers", HARD)
@pytest.mark.parametrize("ends", [("concentration", "concentration"), ("concentration", "sealed"),
                                  ("mass-transfer", "free-outflow")])
def test_count_matches_computed_eigenvalues(layers, ends):
    """Identity: the Pruefer count below any lambda equals the number of computed eigenvalues
    below it (Pryce 1993, ch. 2): nothing missed, nothing doubled."""
    col = _column(layers, *ends)
    op = sp.build_operator(col)
    lam = sp.eigenvalues(op, 300)
    assert np.all(np.diff(lam) > 0)
    probe = np.sort(np.concatenate([lam * (1 + 1e-9), 0.5 * (lam[1:] + lam[:-1])]))
    expected = np.searchsorted(lam, probe)
    np.testing.assert_array_equal(sp.count_below(op, probe), expected)


def _gram(col, n, nodes=64):
    op = sp.build_operator(col)
    md = sp.modes(op, sp.eigenvalues(op, n))
    xg, wg = np.polynomial.legendre.leggauss(nodes)
    G = np.zeros((n, n))
    for i in range(op.n_layers):
        # panels short enough for the highest mode
        npan = 40
        edges = np.linspace(op.z[i], op.z[i + 1], npan + 1)
        for a, b in zip(edges[:-1], edges[1:]):
            z = 0.5 * (a + b) + 0.5 * (b - a) * xg
            f, _ = md.evaluate(z)
            G += (f * (0.5 * (b - a) * wg * op.a[i])[:, None]).T @ f
    return G


@pytest.mark.parametrize("layers", HARD)
def test_modes_are_weighted_orthonormal(layers):
    """int a psi_m psi_n dz = delta_mn (Sturm-Liouville theory, e.g. Pryce 1993, ch. 1),
    integrated independently by Gauss-Legendre; off-diagonal < 1e-10."""
    G = _gram(_column(layers, "concentration", "mass-transfer"), 40)
    assert np.abs(G - np.eye(40)).max() < 1e-10


def test_modes_orthonormal_with_advection():
    """Same identity with advection (column Peclet number 20)."""
    layers = [Layer(1.0, 0.3, 1e-9, 1.0), Layer(0.5, 0.4, 2e-10, 3.0), Layer(1.0, 0.3, 1e-9, 1.0)]
    col = _column(layers, "inlet", "free-outflow", q=3e-9)
    G = _gram(col, 40)
    assert np.abs(G - np.eye(40)).max() < 1e-10


layer_st = st.builds(
    Layer,
    thickness=st.floats(1e-3, 2.0),
    water_content=st.floats(0.05, 1.0),
    diffusivity=st.floats(1e-13, 1e-8),
    retardation=st.floats(1.0, 100.0),
    decay_rate=st.sampled_from([0.0, 1e-10, 1e-8]),
)


@settings(max_examples=40, deadline=None)
@given(layers=st.lists(layer_st, min_size=1, max_size=8),
       top=st.sampled_from(["concentration", "sealed", "mass-transfer", "flux"]),
       bottom=st.sampled_from(["concentration", "sealed", "mass-transfer", "free-outflow"]))
def test_random_stacks_eigenvalues_increase_and_none_missing(layers, top, bottom):
    """Property: eigenvalues strictly increase and the Pruefer count agrees at every midpoint."""
    op = sp.build_operator(_column(layers, top, bottom))
    lam = sp.eigenvalues(op, 60)
    assert np.all(np.diff(lam) > 0)
    mids = 0.5 * (lam[1:] + lam[:-1])
    np.testing.assert_array_equal(sp.count_below(op, mids), np.arange(1, 60))
