"""The vectorised modal core gives the numbers of the previous implementation.

The previous eigen-solver, eigenfunctions and their evaluation are kept verbatim in
tests/reference_core.py; here both run on seeded random layered columns (thin layers,
diffusivity contrasts up to 1e5, partition jumps, 1 to 1000 layers, with and without
flow, every boundary kind at both ends) and must agree to 1e-12 of the scale of each
quantity: the largest eigenvalue of the set, the largest |psi_n| (or |k psi_n'|) of
each mode, the largest value of each output.  Where the previous eigenvalues are off
by more than that (a few modes of very long stacks), a 40-digit mpmath shooting
(the transfer matrices of the layers multiplied in mpmath, Crank 1975 ch. 4 for the
layer solutions) decides, and the new value must be the closer one.
"""
import math

import mpmath
import numpy as np
import pytest

import reference_core as ref
from transport.model.column import Boundary, Column, InitialState, Layer
from transport.solvers import modal as sp
from transport.solvers.modal.series import build_series

KINDS = ("concentration", "flux", "inlet", "free-outflow", "mass-transfer", "sealed")
TOL = 1e-12


def _column(n_layers, seed, top, bottom, peclet):
    """A random stack: thickness 1e-3..0.2 m (log-uniform), D 1e-13..1e-8 m2/s,
    R 1..50, some decay, partition jumps when there is no flow; column Peclet number
    ``peclet`` (0: no flow)."""
    rng = np.random.default_rng(seed)
    flow = peclet != 0
    layers = []
    for _ in range(n_layers):
        layers.append(Layer(
            thickness=float(10 ** rng.uniform(-3, math.log10(0.2))),
            water_content=float(rng.uniform(0.05, 0.6)),
            diffusivity=float(10 ** rng.uniform(-13, -8)),
            retardation=float(rng.uniform(1.0, 50.0)),
            decay_rate=float(rng.choice([0.0, 0.0, 1e-10, 3e-9])),
            partition_to_next=1.0 if flow else float(rng.choice([1.0, 1.0, 0.1, 20.0]))))
    q = 0.0
    if flow:
        # q with sum q l / (theta D kappa) = peclet (kappa = 1 without partition jumps)
        q = peclet / sum(lay.thickness / (lay.water_content * lay.diffusivity)
                         for lay in layers)

    def bc(kind):
        return Boundary(kind, 1.0 if kind != "mass-transfer" else 0.5,
                        1e-8 if kind == "mass-transfer" else 0.0)
    return Column(layers=tuple(layers), top=bc(top), bottom=bc(bottom), darcy_flux=q)


# (layers, modes, seed, top, bottom, peclet): every kind at both ends, 1 to 1000 layers
CASES = [
    (1, 40, 1, "concentration", "free-outflow", 0),
    (2, 60, 2, "flux", "concentration", 0),
    (3, 80, 3, "inlet", "free-outflow", 20),
    (5, 60, 4, "mass-transfer", "sealed", 0),
    (7, 120, 5, "sealed", "mass-transfer", 0),
    (12, 100, 6, "concentration", "inlet", 5),
    (40, 150, 7, "free-outflow", "flux", 0),
    (40, 150, 8, "concentration", "concentration", 50),
    (200, 120, 9, "mass-transfer", "free-outflow", 10),
    (1000, 60, 10, "concentration", "sealed", 0),
]


def _ids(case):
    n, m, seed, top, bottom, pe = case
    return f"{n}L-{m}m-{top}-{bottom}-Pe{pe}"


@pytest.fixture(scope="module", params=CASES, ids=_ids)
def pair(request):
    """Operator and the two eigen-solutions (previous, new) of one random column."""
    n, m, seed, top, bottom, pe = request.param
    col = _column(n, seed, top, bottom, pe)
    op = sp.build_operator(col)
    lam_old = ref.eigenvalues(op, m)
    return col, op, m, lam_old, sp.eigenvalues(op, m)


def _mp_eigen_mismatch(op, lam):
    """Wronskian of the top and bottom solutions at z = L, in 40-digit arithmetic."""
    mpmath.mp.dps = 40
    c_v, c_p, _ = op.v_condition("top")
    d_v, d_p, _ = op.v_condition("bottom")
    v, p = mpmath.mpf(float(c_p)), mpmath.mpf(-float(c_v))
    lam = mpmath.mpf(lam)
    for k, a, s, l in zip(op.k, op.a, op.s, op.thickness):
        k, a, s, l = (mpmath.mpf(float(x)) for x in (k, a, s, l))
        w2 = (lam * a - s) / k
        w = mpmath.sqrt(abs(w2))
        x = w * l
        if w2 > 0:
            c, sn = mpmath.cos(x), mpmath.sin(x) / w
            v, p = c * v + sn / k * p, -k * w * w * sn * v + c * p
        else:
            c, sn = mpmath.cosh(x), (mpmath.sinh(x) / w if w != 0 else l)
            v, p = c * v + sn / k * p, k * w * w * sn * v + c * p
        nrm = abs(v) + abs(p) / k * l
        v, p = v / nrm, p / nrm
    # the bottom row in v-space: d_v v + d_p p = 0
    return d_v * v + d_p * p


def _mp_brackets(op, lam, rel):
    """The mpmath Wronskian changes sign between lam (1 - rel) and lam (1 + rel)."""
    lo = _mp_eigen_mismatch(op, mpmath.mpf(lam) * (1 - mpmath.mpf(rel)))
    hi = _mp_eigen_mismatch(op, mpmath.mpf(lam) * (1 + mpmath.mpf(rel)))
    return lo * hi < 0


def test_eigenvalues_equal_previous(pair):
    """Each eigenvalue equals the previous one to 1e-12 of itself, or else the 40-digit
    mpmath shooting decides: the exact eigenvalue lies within 5e-13 of the new value,
    so the previous one was off (by more than 1e-12: the previous end-angle root could
    stop 1e-10 away where the angle changes slowly, and its precision was relative to
    the diffusive scale of the column rather than to the eigenvalue)."""
    col, op, m, old, new = pair
    assert np.all(np.diff(new) > 0)
    own = np.abs(new - old) / np.abs(old)
    for j in np.flatnonzero(own > TOL):
        assert _mp_brackets(op, new[j], 5e-13), j


def test_counts_equal_previous(pair):
    """Pruefer counts at the midpoints between eigenvalues equal the previous ones; at
    1e-9 above each eigenvalue they equal the number of eigenvalues below (the
    identity of Pryce 1993, ch. 2), which the previous end-angle count missed where
    the end angle grows by less than its 1e-12 guard over that distance."""
    col, op, m, old, new = pair
    mids = 0.5 * (old[1:] + old[:-1])
    np.testing.assert_array_equal(sp.count_below(op, mids), ref.count_below(op, mids))
    above = old * (1 + 1e-9) + 1e-300
    np.testing.assert_array_equal(sp.count_below(op, above), np.arange(1, m + 1))


def _per_mode(new, old, rows=slice(None)):
    """Largest difference of each mode (in ``rows``), relative to that mode's largest
    |value|."""
    return np.max(np.abs(new - old)[rows], axis=0) / np.max(np.abs(old), axis=0)


def test_eigenfunctions_equal_previous(pair):
    """psi_n and k psi_n' at the faces and at random depths (with the factors
    e^{-A}, 1, e^{A} of the projections and the fields), from the same eigenvalues:
    the new ones, which the mpmath check vouches for (from eigenvalues off by a few
    1e-13, as some previous ones are, k psi' of the two-sided shooting depends on the
    joining face at the 1e-12 level).  The state stored for the bottom face is left
    out: the new one is always the bottom shot's, which meets the bottom condition
    exactly; the previous one was sometimes the top shot's (off by the shots'
    mismatch there, up to a few 1e-12 in ill-conditioned stacks).  Its value enters
    the comparison through ``evaluate`` at z = L."""
    col, op, m, _, lam = pair
    md_new, md_old = sp.modes(op, lam), ref.modes(op, lam)
    for arr in ("v", "p"):
        a_new = getattr(md_new, arr) * np.exp(md_new.logs)
        a_old = getattr(md_old, arr) * np.exp(md_old.logs)
        assert _per_mode(a_new, a_old, slice(0, -1)).max() <= TOL
    rng = np.random.default_rng(m)
    z = np.sort(np.concatenate([rng.uniform(0.0, op.z[-1], 300), op.z]))
    for sign in (-1, 0, 1):
        f_new, p_new = md_new.evaluate(z, exp_sign=sign)
        f_old, p_old = ref.evaluate(md_old, z, exp_sign=sign)
        assert _per_mode(f_new, f_old).max() <= TOL
        assert _per_mode(p_new, p_old).max() <= TOL


@pytest.mark.parametrize("case", [c for c in CASES if c[0] <= 200], ids=_ids)
def test_series_outputs_equal_previous(case):
    """Concentration, total flux, cumulative mass and the budget of a run from a
    non-uniform initial state, by the new and the previous eigenfunctions and
    projections from the same eigenvalues (those are compared above), with the same
    lifting and time kernels.  Scale of each output: its largest value, plus the sum
    of the magnitudes of its modal terms times 1e-13 (at early times and high Peclet
    numbers the terms cancel by orders of magnitude, and their rounding, already
    reported by ``ModalSeries.roundoff_bound``, is the floor of both paths)."""
    n, m, seed, top, bottom, pe = case
    col = _column(n, seed, top, bottom, pe)
    init = InitialState.uniform(list(np.linspace(0.2, 1.0, n)))
    s_new = build_series(col, init, n_modes=m)
    s_old = ref.build_series(col, init, lam=s_new.eigenvalues)
    z = np.linspace(0.0, col.length, 37)
    t = np.geomspace(1e-3, 1.0, 9) * col.length ** 2 * 50 / min(
        lay.diffusivity for lay in col.layers)
    c_modes, f_modes, _, _ = s_old.fields(z)
    terms = {"concentration": (np.abs(c_modes) @ np.abs(s_old.coefficients(t))).T,
             "total_flux": (np.abs(f_modes) @ np.abs(s_old.coefficients(t))).T,
             "cumulative_mass": (np.abs(f_modes) @ np.abs(
                 s_old.integrated_coefficients(t))).T}
    for name in ("concentration", "total_flux", "cumulative_mass"):
        a_new = getattr(s_new, name)(z, t)
        a_old = getattr(s_old, name)(z, t)
        allowed = TOL * np.max(np.abs(a_old)) + 1e-13 * terms[name]
        assert np.all(np.abs(a_new - a_old) <= allowed), name
    b_new, b_old = s_new.budget(t), s_old.budget(t)
    scale = max(np.max(np.abs(b_old[k])) for k in ("stored", "entered_top", "left_bottom"))
    for key in b_old:
        assert np.max(np.abs(b_new[key] - b_old[key])) <= TOL * scale, key


def test_eigenvalues_of_a_hard_stack_match_mpmath():
    """External check of the new eigen-solver alone: a 300-layer stack with 1e5
    diffusivity contrast and partition jumps, its 5 lowest eigenvalues and mode 150,
    each bracketed to 2e-13 of itself by the 40-digit mpmath shooting."""
    col = _column(300, 11, "concentration", "free-outflow", 0)
    op = sp.build_operator(col)
    lam = sp.eigenvalues(op, 151)
    for j in (0, 1, 2, 3, 4, 150):
        assert _mp_brackets(op, lam[j], 2e-13), j


def test_decay_skips_only_what_underflows():
    """e^{-lambda t} of the series with the underflowing entries not evaluated equals
    numpy's own exponential of every entry, to the bit: around the underflow threshold
    (e^-745.13 is the last nonzero double, IEEE 754 subnormals), at t = 0, for a
    negative eigenvalue (growth), and with NaN and infinite entries."""
    from transport.solvers.modal.series import _decay
    rng = np.random.default_rng(5)
    lam = np.sort(np.concatenate([rng.uniform(0, 1e-4, 300), [-1e-9, 0.0, 1e-12]]))
    t = np.concatenate([[0.0], np.linspace(744.0, 747.0, 40) / 1e-4, rng.uniform(0, 1e9, 100)])
    for lam_, t_ in ((lam, t), (np.append(lam, [np.nan, np.inf]), t),
                     (lam[:5], t[:9])):  # the last: small, evaluated whole
        with np.errstate(invalid="ignore", over="ignore"):
            want = np.exp(-lam_[:, None] * t_[None, :])
            got = _decay(lam_, t_)
        assert got.shape == want.shape
        assert np.array_equal(got, want, equal_nan=True)
        real = ~np.isnan(want)  # (the sign of a NaN carries nothing)
        assert np.array_equal(np.signbit(got[real]), np.signbit(want[real]))


def test_long_series_concentration_equals_its_plain_sum(monkeypatch):
    """C of a 600-mode series at 300 times (summed in place, the underflowing decay
    factors not evaluated) equals the plain form c_modes @ a(t) + c_lift @ b(t) +
    tail @ drive(t) with every decay factor from numpy's exponential, to the bit, for a
    source that ramps up, holds and is removed (a nonzero drive: the tail term)."""
    from transport.model.schedules import Schedule
    from transport.solvers.modal import series as series_module
    yr = 3.15576e7
    ramp = Schedule.table([0.0, 2 * yr, 5 * yr, 5.5 * yr], [0.0, 1.0, 1.0, 0.0])
    base = _column(20, 11, "concentration", "free-outflow", 30)
    col = Column(layers=base.layers, top=Boundary("concentration", 1.0, schedule=ramp),
                 bottom=base.bottom, darcy_flux=base.darcy_flux)
    s = build_series(col, n_modes=600)
    z = np.linspace(0.0, col.length, 50)
    t = np.linspace(0.01, 60.0, 300) * yr
    got = s.concentration(z, t)
    forcing = s.drive(t)
    assert np.any(forcing)
    monkeypatch.setattr(series_module, "_decay",
                        lambda lam, tt: np.exp(-lam[:, None] * tt[None, :]))
    c_modes, _, c_lift, _ = s.fields(z)
    want = (c_modes @ s.coefficients(t) + c_lift @ s.signal_values(t)
            + s.tail_corrections(z)["C"][:, 1:] @ forcing)
    assert np.array_equal(got, want.T)


@pytest.mark.parametrize("which", ["clean", "measured", "stepped"])
def test_roundoff_bound_is_its_formula(which):
    """ModalSeries.roundoff_bound (the terms of a clean column's initial part not
    evaluated, underflowing decay factors skipped) equals its formula written out with
    numpy's exponential everywhere, to the bit: 16 sqrt(n) eps |C_modes| @ (|P_n|
    e^{-lambda t} + sum_k |c_kn| sum|amplitudes| e^{-lambda (t - last change)})."""
    from transport.model.schedules import Schedule
    yr = 3.15576e7
    base = _column(4, 21, "concentration", "free-outflow", 60)
    sched = Schedule.steps([0.0, 3 * yr], [1.0, 0.2]) if which == "stepped" else None
    col = Column(layers=base.layers, top=Boundary("concentration", 1.0, schedule=sched),
                 bottom=base.bottom, darcy_flux=base.darcy_flux)
    init = InitialState.uniform([0.4, 0.1, 0.0, 0.2]) if which == "measured" else None
    s = build_series(col, init, n_modes=300)
    z = np.linspace(0.0, col.length, 11)
    t = np.concatenate([[0.0], np.geomspace(1e-3, 80.0, 200) * yr])
    lam = s.modes.lam[:, None]
    size = np.abs(s.proj0)[:, None] * np.exp(-lam * t[None, :])
    for k, sig in enumerate(s.signals):
        if not sig.atoms:
            continue
        amp = sum(abs(a) for _, _, a, _ in sig.atoms)
        changes = np.sort(np.asarray(sig.change_times, dtype=float))
        i = np.searchsorted(changes, t, side="right")
        last = np.where(i > 0, changes[np.maximum(i - 1, 0)] if changes.size else 0.0, 0.0)
        size = size + np.abs(s.lift_coef[k])[:, None] * amp * np.exp(
            -lam * np.maximum(t - last, 0.0)[None, :])
    want = 16 * math.sqrt(lam.size) * np.finfo(float).eps * (np.abs(s.fields(z)[0]) @ size).T
    np.testing.assert_array_equal(s.roundoff_bound(z, t), want)


def test_earliest_time_after_change_by_hand():
    """The smallest positive gap between an output time and a change time (0 and the
    schedule's switch times), and never later than the earliest positive output time;
    None without a positive gap.  Values worked by hand."""
    from transport.model.schedules import Schedule
    from transport.solvers.modal.sizing import earliest_time_after_change
    base = _column(2, 3, "concentration", "free-outflow", 0)
    col = Column(layers=base.layers, bottom=base.bottom, top=Boundary(
        "concentration", 1.0, schedule=Schedule.steps([0.0, 3.9], [1.0, 0.0])))
    assert earliest_time_after_change(col, np.array([4.0, 8.0])) == pytest.approx(0.1, rel=1e-12)
    assert earliest_time_after_change(col, np.array([0.0, 1.0, 5.0])) == 1.0
    assert earliest_time_after_change(col, np.array([0.0])) is None
