"""Decay chains (parent -> daughters) by the Laplace engine
(:func:`transport.solvers.laplace.chain.solve_chain_laplace`).

Checked against
* the sequential-decay transformation of Sun, Petersen & Clement (1999, J. Contam.
  Hydrol. 35:429; volume and page from memory) for species sharing D and R: the
  combinations a_i = c_i + sum_j (prod_l y_{l+1} k_l / (k_l - k_i)) c_j each obey a
  one-species equation with decay k_i, solved by the first-type inlet solution of
  van Genuchten & Alves (1982) (tests/reference.py, ogata_banks);
* an independent mpmath solution of the layered chain by matrix exponentials and Talbot
  inversion (tests/reference_chain.py);
* each species' own mass budget.
Yields are molar-mass ratios from IUPAC conventional atomic weights (C 12.011, H 1.008,
Cl 35.45; IUPAC 2021 standard atomic weights).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from reference import ogata_banks
from reference_chain import chain_reference
from transport.model.chain import Chain, molar_yield
from transport.model.column import Boundary, Column, InputError, Layer
from transport.solvers.laplace.chain import solve_chain_laplace
from transport.units import YEAR

C, H, CL = 12.011, 1.008, 35.45
PCE, TCE, DCE = 2 * C + 4 * CL, 2 * C + H + 3 * CL, 2 * C + 2 * H + 2 * CL


def _homogeneous(rates, tops, L=60.0, theta=0.3, D=2e-9, R=2.5, q=0.4 / YEAR):
    return tuple(Column((Layer(L, theta, D, R, k),), Boundary("concentration", c0),
                        Boundary("free-outflow"), q) for k, c0 in zip(rates, tops))


def _sun_coefficients(rates, yields):
    """b[i][j] (j < i): a_i = c_i + sum_j b[i][j] c_j (Sun et al. 1999)."""
    n = len(rates)
    b = [[0.0] * n for _ in range(n)]
    for i in range(1, n):
        for j in range(i):
            prod = 1.0
            for l in range(j, i):
                prod *= yields[l + 1] * rates[l] / (rates[l] - rates[i])
            b[i][j] = prod
    return b


def test_three_species_match_the_sequential_decay_transformation():
    rates = [math.log(2) / (h * YEAR) for h in (4.0, 1.5, 6.0)]
    yields = (0.0, molar_yield(PCE, TCE), molar_yield(TCE, DCE))
    tops = (1.0, 0.2, 0.05)
    chain = Chain(_homogeneous(rates, tops), ("PCE", "TCE", "cis-DCE"), yields)
    t = np.array([0.5, 2.0, 8.0]) * YEAR
    z = np.array([0.0, 0.5, 1.5, 4.0])
    sols = solve_chain_laplace(chain, t, z)
    theta, D, R, q = 0.3, 2e-9, 2.5, 0.4 / YEAR
    v, Dr = q / (theta * R), D / R
    b = _sun_coefficients(rates, yields)
    c = []
    for i in range(3):
        a0 = tops[i] + sum(b[i][j] * tops[j] for j in range(i))
        a = ogata_banks(z, t, v, Dr, a0, rates[i])
        c.append(a - sum(b[i][j] * c[j] for j in range(i)))
        assert np.abs(sols[i].concentration - c[i]).max() <= 1e-8, i
        assert sols[i].error["concentration"].max() <= 1e-8
    assert sols[2].concentration.max() > 0.05  # the daughters are really produced


def _layered(q=0.3 / YEAR):
    def col(Ds, Rs, hl, top):
        th, L = (0.3, 0.45, 0.25), (0.6, 0.1, 0.8)
        return Column(tuple(Layer(L[i], th[i], Ds[i], Rs[i], math.log(2) / (hl[i] * YEAR))
                            for i in range(3)),
                      Boundary("concentration", top), Boundary("free-outflow"), q)
    parent = col((2e-9, 3e-10, 4e-9), (3.0, 9.0, 2.0), (3.0, 3.0, 3.0), 1.0)
    daughter = col((2.2e-9, 3.5e-10, 4.4e-9), (2.0, 5.0, 1.5), (1.5, 1.0, 2.0), 0.1)
    return Chain((parent, daughter), ("parent", "daughter"), (0.0, 0.79))


def test_layered_chain_matches_the_matrix_exponential_reference():
    chain = _layered()
    t = np.array([1.0, 6.0]) * YEAR
    z = np.array([0.3, 0.65, 1.2])
    sols = solve_chain_laplace(chain, t, z)
    ref = chain_reference(chain, z, t, dps=30)
    for i in range(2):
        assert np.abs(sols[i].concentration - ref[:, i, :]).max() <= 1e-9, i


@pytest.mark.parametrize("q_per_year", [0.3, -0.2, 0.0])
def test_every_species_budget_closes(q_per_year):
    chain = _layered(q_per_year / YEAR)
    t = np.array([0.2, 2.0, 20.0]) * YEAR
    sols = solve_chain_laplace(chain, t, [0.0, 1.5])
    for sol in sols:
        b = sol.budget
        scale = max(np.abs(b[k]).max() for k in ("stored", "entered_top", "left_bottom",
                                                   "decayed", "produced"))
        assert np.abs(b["residual"]).max() <= 1e-9 * scale
    assert sols[1].budget["produced"][-1] > 0.1 * sols[1].budget["stored"][-1]


def test_identical_parent_and_daughter_are_refused_with_the_fix():
    cols = _homogeneous([1e-9, 1e-9], [1.0, 0.0], L=2.0)
    with pytest.raises(InputError, match="distinct decay rates"):
        solve_chain_laplace(Chain(cols, ("a", "b"), (0.0, 1.0)), [YEAR], [1.0])


def test_chain_input_errors():
    cols = _homogeneous([1e-9, 2e-9], [1.0, 0.0], L=2.0)
    other = Column((Layer(1.0, 0.3, 1e-9),), Boundary("concentration", 0.0),
                   Boundary("free-outflow"))
    with pytest.raises(InputError, match="layers and the Darcy flux"):
        Chain((cols[0], other), ("a", "b"), (0.0, 1.0))
    with pytest.raises(InputError, match="yield"):
        Chain(cols, ("a", "b"), (0.0, -1.0))
    with pytest.raises(InputError, match="names must differ"):
        Chain(cols, ("a", "a"), (0.0, 1.0))
    assert math.isclose(molar_yield(PCE, TCE), 131.38 / 165.822, rel_tol=1e-4)


def test_a_chain_metric_read_on_the_laplace_curve_is_vouched_by_its_own_bound(
        inflate_own_errors):
    """The layered chain above, output times from 10 yr: the daughter's crossing of half
    its 10 yr value at 0.65 m comes earlier, where the run reads the Laplace engine's
    curve. That engine's own bound there is within the tolerance times the species'
    scale of C, and C there equals the matrix-exponential reference
    (tests/reference_chain.py: the Laplace-domain system by mpmath's matrix exponential,
    inverted by Talbot's rule, Talbot 1979; Abate & Valko 2004) within 2 x that limit. With the bounds made 1e9 x larger
    after the solve, the metric is refused, naming it."""
    from transport.analysis.metrics import receptor_metrics
    from transport.solvers import chain as chain_solver
    from transport.solvers import engines
    from transport.solvers.checks import UnreliableResultError

    chain = _layered()
    late, depth = np.array([10.0, 40.0]) * YEAR, 0.65
    daughter = chain_solver.solve_chain(chain, late, [depth])[1]
    level = 0.5 * float(daughter.concentration[0, 0])
    m = receptor_metrics(daughter, depth, level)
    t_cross = m.first_exceedance
    assert t_cross < late[0]
    limit = daughter.tolerance * daughter.scale["concentration"]
    bound = daughter.evaluator.laplace_bound(depth, [t_cross])[0]
    assert 0 < bound <= limit
    ref = chain_reference(chain, [depth], [t_cross], dps=30)[0, 1, 0]
    assert abs(ref - level) <= 2 * limit

    inflate_own_errors(engines, 1e9)  # the bound is read through engines.own_bound_at
    with pytest.raises(UnreliableResultError, match="first exceedance at 0.65 m"):
        receptor_metrics(daughter, depth, level)
