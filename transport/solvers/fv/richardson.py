"""Error estimates of the finite-volume engine from three meshes of the same map.

Richardson, L. F. (1911). Phil. Trans. R. Soc. A 210:307; Roache, P. J. (1998).
*Verification and Validation in Computational Science and Engineering*, ch. 5.
"""
from __future__ import annotations

import numpy as np

__all__ = ["SAFETY", "NOMINAL_ORDER", "TIME_SAFETY", "richardson", "estimate"]

#: Safety factor on the Richardson estimate: 3, the factor of safety of Roache's grid
#: convergence index (Roache 1998, sec. 5.9); at the nominal order the estimate is then
#: the whole last difference |q2 - q1|.  (2 left the estimate 5 % short in the tail
#: of an erfc boundary layer one day after a step, where convergence is irregular.)
SAFETY = 3.0
#: Nominal order of the scheme in space (and of the tightened time tolerance).
NOMINAL_ORDER = 2.0
#: Multiple of rtol x scale added for the time integration error.
TIME_SAFETY = 10.0
_BUDGET_TERMS = ("stored", "entered_top", "left_bottom", "decayed")


def richardson(q0, q1, q2, floor):
    """Error estimate of q2 from three meshes (cells x1, x2, x4), per output time.

    d1 = max|q1 - q0|, d2 = max|q2 - q1| (over depths); with the observed contraction
    r = d2 / d1 (never taken below 2^-p for the nominal order p = 2) the remaining
    error of q2 is the geometric tail d2 r / (1 - r) (= d2 / (2^p - 1) in the asymptotic
    range, Richardson 1911; Roache 1998, *Verification and Validation in Computational
    Science and Engineering*, ch. 5), times SAFETY, plus the time-integration floor.
    r > 1/2 (observed order below 1) marks the time unresolved; r >= 0.9 caps the
    factor at 9.  Differences below the floor are rounding of the time integration:
    nominal order there.
    """
    ax = tuple(range(1, np.ndim(q0)))
    d1 = np.max(np.abs(q1 - q0), axis=ax) if ax else np.abs(q1 - q0)
    d2 = np.max(np.abs(q2 - q1), axis=ax) if ax else np.abs(q2 - q1)
    nominal = 2.0 ** -NOMINAL_ORDER
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(d1 > 0, d2 / d1, np.where(d2 > 0, 1.0, nominal))
    noise = d2 <= floor
    r = np.where(noise, nominal, np.maximum(r, nominal))
    factor = np.where(r < 0.9, r / (1 - np.minimum(r, 0.9)), 9.0)
    est = SAFETY * factor * d2 + floor
    return est, r <= 0.5, -np.log2(r)


def estimate(levels, rtol):
    """Error dict, resolved mask and observed order of the finest of three levels."""
    a, b, c = levels
    cf = c["concentration"]
    scale_c = np.maximum(c["scale"], np.max(c["scale"]) * 1e-12)
    floor_c = TIME_SAFETY * rtol * scale_c
    err_c, ok, order = richardson(a["concentration"], b["concentration"], cf, floor_c)
    err = {"concentration": err_c}
    for key in ("total_flux", "cumulative_mass"):
        floor = TIME_SAFETY * rtol * np.max(np.abs(c[key]))
        err[key] = richardson(a[key], b[key], c[key], floor)[0]
    bscale = max(float(np.max(np.abs(c["budget"][k]))) for k in _BUDGET_TERMS)
    err["budget"] = np.max([richardson(a["budget"][k], b["budget"][k], c["budget"][k],
                                        TIME_SAFETY * rtol * bscale)[0]
                            for k in _BUDGET_TERMS], axis=0)
    zero = c["times"] == 0
    err["concentration"][zero] = 0.0  # the initial state itself
    err["cumulative_mass"][zero] = 0.0
    err["budget"][zero] = 0.0
    ok[zero] = True
    return err, ok, order
