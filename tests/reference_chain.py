"""Independent reference for a straight decay chain in a layered column (test helper).

Nothing here imports the engines.  In the Laplace domain the chain on one layer is the
linear system Y' = M(s) Y for Y = (C_1, C_1', C_2, C_2', ...), with
k_i C_i'' = q C_i' + c_i (s + mu_i) C_i - y_i mu_{i-1} c_{i-1} C_{i-1} (k = theta D,
c = theta R), so Y(z) = expm(M z) Y(0) on each layer (a matrix exponential, not the
engines' exponential-by-exponential construction); at a face C and k C' carry over.  The
2n unknowns of Y(0) follow from a concentration top (C_i = value_i / s) and a
free-outflow bottom (C_i' = 0); the transform is inverted by mpmath's Talbot rule.
Clean initial state, constant top values.
"""
from __future__ import annotations

import mpmath as mp
import numpy as np


def _system(chain, s):
    cols = chain.columns
    n = len(cols)
    q = mp.mpf(cols[0].darcy_flux)
    mats = []
    for li in range(len(cols[0].layers)):
        M = mp.zeros(2 * n, 2 * n)
        for i, col in enumerate(cols):
            lay = col.layers[li]
            k = mp.mpf(lay.water_content) * mp.mpf(lay.diffusivity)
            c = mp.mpf(lay.water_content) * mp.mpf(lay.retardation)
            M[2 * i, 2 * i + 1] = 1
            M[2 * i + 1, 2 * i] = c * (s + mp.mpf(lay.decay_rate)) / k
            M[2 * i + 1, 2 * i + 1] = q / k
            if i:
                p = cols[i - 1].layers[li]
                gain = (mp.mpf(chain.yields[i]) * mp.mpf(p.decay_rate) * mp.mpf(p.water_content)
                        * mp.mpf(p.retardation))
                M[2 * i + 1, 2 * (i - 1)] = -gain / k
        mats.append(M)
    return mats


def _face(chain, li):
    """Carry Y across the face below layer li: C stays, C' scales by k_above / k_below."""
    n = len(chain.columns)
    J = mp.eye(2 * n)
    for i, col in enumerate(chain.columns):
        a, b = col.layers[li], col.layers[li + 1]
        J[2 * i + 1, 2 * i + 1] = (mp.mpf(a.water_content) * mp.mpf(a.diffusivity)
                                   / (mp.mpf(b.water_content) * mp.mpf(b.diffusivity)))
    return J


def _transform(chain, s, depths):
    cols = chain.columns
    n = len(cols)
    mats = _system(chain, s)
    faces = [0.0] + list(np.cumsum([l.thickness for l in cols[0].layers]))
    T = mp.eye(2 * n)
    for li, M in enumerate(mats):
        T = mp.expm(M * mp.mpf(cols[0].layers[li].thickness)) * T
        if li + 1 < len(mats):
            T = _face(chain, li) * T
    # unknowns: Y(0); rows: C_i(0) = v_i / s ; (T Y0)_{C_i'} = 0
    A = mp.zeros(2 * n, 2 * n)
    rhs = mp.zeros(2 * n, 1)
    for i, col in enumerate(cols):
        A[i, 2 * i] = 1
        rhs[i] = mp.mpf(col.top.value) / s
        for j in range(2 * n):
            A[n + i, j] = T[2 * i + 1, j]
    y0 = mp.lu_solve(A, rhs)
    out = []
    for z in depths:
        li = min(int(np.searchsorted(faces, z, side="right")) - 1, len(mats) - 1)
        Y = y0
        for m in range(li):
            Y = _face(chain, m) * (mp.expm(mats[m] * mp.mpf(cols[0].layers[m].thickness)) * Y)
        Y = mp.expm(mats[li] * (mp.mpf(float(z)) - mp.mpf(faces[li]))) * Y
        out.append([Y[2 * i] for i in range(n)])
    return out


def chain_reference(chain, depths, times, dps: int = 30) -> np.ndarray:
    """C (nt, n_species, nz) of a clean layered chain with constant concentration tops
    and free-outflow bottoms, by mpmath (matrix exponentials + Talbot inversion).

    ``dps`` carries no guard digits for advection: the transform holds factors up to
    exp(int |q| / (2 theta D) dz) that cancel in the inversion sum, so at a column
    Peclet number beyond about 10 raise it by
    :func:`reference.advection_guard_digits` of the species' columns (a sweep of the
    same method at Pe 100 gave values of 1e19 at early times without them)."""
    n = len(chain.columns)
    res = np.zeros((len(times), n, len(depths)))
    memo = {}

    def at(s):  # every depth and species at once, reused across the inversions
        key = (str(s.real), str(s.imag))
        if key not in memo:
            memo[key] = _transform(chain, s, depths)
        return memo[key]

    with mp.workdps(dps):
        for it, t in enumerate(times):
            for iz in range(len(depths)):
                for i in range(n):
                    f = lambda s, iz=iz, i=i: at(mp.mpc(s))[iz][i]  # noqa: E731
                    res[it, i, iz] = float(mp.re(mp.invertlaplace(f, mp.mpf(float(t)),
                                                                  method="talbot")))
    return res
