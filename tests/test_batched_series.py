"""A boring's Monte Carlo series built side by side equal each column's own build.

:func:`transport.solvers.modal.many.clean_series_many` builds the modal series of
columns that share their layer faces (one boring's log, drawn properties) together:
the steady responses in one block-diagonal banded solve
(:func:`transport.solvers.modal.lifting.steady_responses_many`), the modes and the
responses at the two ends and at the receptor in one pass
(:func:`transport.solvers.modal.eigenfunctions.evaluate_many`,
:func:`transport.solvers.modal.lifting.evaluate_many`).

Reference (outside the code under test): each column's own build,
:func:`transport.solvers.modal.series.build_series` (the single-column path), on the
same column with the same shared modes. The claim is identity, to the bit: the same
arithmetic element by element, and LAPACK's banded LU of a block-diagonal band
(zero couplings) is each block's own LU (Anderson et al. 1999, *LAPACK Users' Guide*,
3rd ed., xGBTRF/xGBTF2: partial pivoting never takes a zero candidate over a nonzero
one, and zero multipliers leave the other blocks unchanged). The columns are invented
test inputs from a fixed seed, across every boundary kind the modal engine takes,
downward, upward and no flow, with and without decay.
"""
from __future__ import annotations

import zlib

import numpy as np
import pytest

from transport.model.column import Boundary, Column, InputError, Layer
from transport.site.chunks import shared_modes
from transport.solvers.modal import many as many_module
from transport.solvers.modal.eigenfunctions import evaluate_many
from transport.solvers.modal.lifting import steady_responses, steady_responses_many
from transport.solvers.modal.operator import build_operator
from transport.solvers.modal.many import clean_series_many
from transport.solvers.modal.series import build_series
from transport.solvers.modal.sizing import earliest_time_after_change
from transport.units import YEAR

KINDS = ("concentration", "flux", "sealed", "free-outflow", "mass-transfer", "inlet")
TIMES = np.array([0.0, 1.0, 5.0, 20.0]) * YEAR
TOL = 1e-8


def _boundary(kind):
    if kind == "mass-transfer":
        return Boundary(kind, 1.0, transfer_coefficient=3e-8)
    return Boundary(kind, 0.0 if kind in ("sealed", "free-outflow") else 1.0)


def _columns(rng, top, bottom, n=6):
    """n columns on one log (2 to 5 layers), their properties drawn: the Darcy flux
    down, up or zero (an inlet end takes water in), decay on or off."""
    nl = int(rng.integers(2, 6))
    thick = rng.uniform(0.2, 1.5, nl)
    sign = 1.0 if top == "inlet" else -1.0 if bottom == "inlet" else rng.choice([-1.0, 0.0, 1.0])
    out = []
    for _ in range(n):
        q = sign * 10 ** rng.uniform(-10.5, -8.3)
        decay = 10 ** rng.uniform(-9.5, -7.5) if rng.random() < 0.7 else 0.0
        layers = tuple(Layer(float(h), float(rng.uniform(0.15, 0.5)),
                             float(10 ** rng.uniform(-10, -8.7)), float(rng.uniform(1, 8)),
                             decay_rate=decay) for h in thick)
        out.append(Column(layers, _boundary(top), _boundary(bottom), float(q)))
    return out


def _same_series(a, b):
    for name in ("lift_coef", "proj0"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    for name in ("r_minus", "r_plus", "exp_form", "c1", "c2", "m_eff"):
        np.testing.assert_array_equal(getattr(a.lifting, name), getattr(b.lifting, name),
                                      err_msg=name)
    assert a.eps == b.eps and a.modes is b.modes


PAIRS = [(top, bottom) for top in KINDS for bottom in KINDS[:5]
         if not (top == "inlet" and bottom == "mass-transfer")]


@pytest.mark.parametrize("top,bottom", PAIRS)
def test_series_built_side_by_side_equal_each_columns_own(top, bottom):
    """Every boundary-kind pair (the inlet top with four bottoms): the series, their
    fields at the receptor and their concentration curve there equal each column's own
    build to the bit."""
    rng = np.random.default_rng(zlib.crc32(f"{top}/{bottom}".encode()))
    try:
        cols = _columns(rng, top, bottom)
    except InputError:
        pytest.skip("a pair the column model refuses")
    known = shared_modes(cols, TIMES, TOL)
    t_mins = [earliest_time_after_change(c, TIMES) for c in cols]
    depth = float(0.6 * cols[0].length)
    many = clean_series_many(cols, t_mins, TOL, 4000, known, [depth])
    served = [s for s in many if s is not None]
    assert len(served) >= 2  # the case is the side-by-side one
    t = np.geomspace(0.5, 30.0, 40) * YEAR
    for col, md, t_min, got in zip(cols, known, t_mins, many):
        if got is None:
            continue
        own = build_series(col, None, t_min, TOL, 4000, masses=False, known_modes=md)
        _same_series(got, own)
        kept = got._cache["fields"][1]  # built with the others, not evaluated again
        for a, b in zip(kept, own.fields(np.array([depth]))):
            np.testing.assert_array_equal(a, b)
        np.testing.assert_array_equal(got.concentration(np.array([depth]), t),
                                      own.concentration(np.array([depth]), t))


def test_block_diagonal_solve_equals_each_solve():
    """The steady responses of 40 columns of mixed kinds and flows (same number of
    layers, different faces) in one block-diagonal solve equal each one's own."""
    rng = np.random.default_rng(11)
    ops = []
    while len(ops) < 40:
        top, bottom = rng.choice(KINDS[:5], 2)
        try:
            ops.append(build_operator(_columns(rng, str(top), str(bottom), 1)[0]))
        except InputError:
            continue
    by_size = {}
    for op in ops:
        by_size.setdefault(op.n_layers, []).append(op)
    singular = 0
    for group in by_size.values():
        eps = [float(rng.choice([0.0, 1e-9])) for _ in group]
        own, solvable = [], []
        for op, e in zip(group, eps):
            try:
                own.append(steady_responses(op, e))
                solvable.append((op, e))
            except np.linalg.LinAlgError:  # no steady state at eps = 0
                singular += 1
                with pytest.raises(np.linalg.LinAlgError):  # its batch fails as it does
                    steady_responses_many(group, eps)
        got = steady_responses_many([op for op, _ in solvable], [e for _, e in solvable])
        for a, b in zip(got, own):
            for name in ("c1", "c2", "r_minus", "r_plus"):
                np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert singular  # the seed includes a column without steady state at eps = 0


def test_columns_with_other_faces_are_evaluated_alone():
    """evaluate_many on modes of columns with different faces: each equals its own
    Modes.evaluate (those columns take their own call)."""
    rng = np.random.default_rng(3)
    cols = _columns(rng, "concentration", "free-outflow", 3) + _columns(
        rng, "concentration", "free-outflow", 2)
    known = shared_modes(cols, TIMES, TOL)
    z = np.linspace(0.0, min(c.length for c in cols), 5)
    for md, (f, d) in zip(known, evaluate_many(known, z, +1)):
        f0, d0 = md.evaluate(z, +1)
        np.testing.assert_array_equal(f, f0)
        np.testing.assert_array_equal(d, d0)


def test_columns_not_served_are_left_to_their_own_build(monkeypatch):
    """None where a column must build its own series: a layer source, no known modes;
    every entry when the shared steps fail (fault injection)."""
    rng = np.random.default_rng(5)
    cols = _columns(rng, "concentration", "free-outflow", 4)
    src = Column(tuple(Layer(l.thickness, l.water_content, l.diffusivity, l.retardation,
                             source_rate=1e-12) for l in cols[0].layers),
                 cols[0].top, cols[0].bottom, cols[0].darcy_flux)
    cols = cols + [src]
    known = shared_modes(cols, TIMES, TOL)
    known[1] = None
    t_mins = [earliest_time_after_change(c, TIMES) for c in cols]
    many = clean_series_many(cols, t_mins, TOL, 4000, known)
    assert [s is None for s in many] == [False, True, False, False, True]

    def fail(ops, eps):
        raise ArithmeticError("injected")
    monkeypatch.setattr(many_module, "steady_responses_many", fail)
    assert clean_series_many(cols, t_mins, TOL, 4000, known) == [None] * 5
