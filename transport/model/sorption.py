"""Nonlinear sorption for the finite-volume engine: isotherm input and cell storage.

The mass per bulk volume of a cell is m(C) = theta R C + rho_b S(C): the linear part
through the layer's retardation factor, plus an optional Freundlich or Langmuir isotherm
S(C).  :func:`isotherm_list` validates the per-layer isotherm input of
:func:`transport.solvers.fv.engine.solve_fv`; :class:`Storage` evaluates m(C), dm/dC and the
inverse C(m) cell by cell.

References
----------
Freundlich, H. (1906). Z. Phys. Chem. 57:385 (power-law isotherm S = K_F C^n).
Langmuir, I. (1918). J. Am. Chem. Soc. 40:1361 (S = S_max K_L C / (1 + K_L C)).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.model.column import Column, InputError

__all__ = ["Storage", "isotherm_list"]

_ISOTHERM_KEYS = {"freundlich": ("coefficient", "exponent", "bulk_density"),
                  "langmuir": ("capacity", "affinity", "bulk_density")}
#: Newton iterations of the Freundlich inversion stop at this relative step.
_NEWTON_RTOL = 4 * np.finfo(float).eps
_NEWTON_MAX = 100
_TINY = 1e-290  # kg m-3: below any meaningful concentration, above the subnormal range


def isotherm_list(column: Column, isotherm) -> tuple:
    """Per-layer isotherm dicts, validated.

    Parameters
    ----------
    column : Column
    isotherm : None, dict or sequence of (dict or None)
        One isotherm for every layer, or one entry per layer (see
        :func:`transport.solvers.fv.engine.solve_fv`).

    Returns
    -------
    tuple
        One dict (or None: linear sorption only) per layer.
    """
    n = len(column.layers)
    if isotherm is None:
        return (None,) * n
    if isinstance(isotherm, dict):
        isotherm = (isotherm,) * n
    if isinstance(isotherm, str):
        raise InputError(f"isotherm: expected a dict such as {{'kind': {isotherm!r}, ...}} "
                         "or one entry per layer, got the string {isotherm!r}")
    isotherm = tuple(isotherm)
    if len(isotherm) != n:
        raise InputError(f"isotherm: give one entry per layer ({n}), got {len(isotherm)}; "
                         "use None for a layer with linear sorption only")
    out = []
    for lay, iso in zip(column.layers, isotherm):
        where = f"isotherm of layer {lay.name!r}"
        if iso is None:
            out.append(None)
            continue
        if not isinstance(iso, dict):
            raise InputError(f"{where}: expected a dict such as {{'kind': 'freundlich', "
                             f"'coefficient': ..., 'exponent': ..., 'bulk_density': ...}} or "
                             f"None, got {iso!r}")
        kind = iso.get("kind")
        if kind not in _ISOTHERM_KEYS:
            raise InputError(f"{where}: kind {kind!r} is unknown; use 'freundlich' or "
                             "'langmuir'")
        extra = set(iso) - {"kind", *_ISOTHERM_KEYS[kind]}
        if extra:
            raise InputError(f"{where}: unknown key(s) {sorted(extra)}; a {kind} isotherm "
                             f"takes {', '.join(_ISOTHERM_KEYS[kind])}")
        vals = {}
        for key in _ISOTHERM_KEYS[kind]:
            if key not in iso:
                raise InputError(f"{where}: missing {key!r}; a {kind} isotherm takes "
                                 f"{', '.join(_ISOTHERM_KEYS[kind])} (SI units)")
            v = iso[key]
            if not (isinstance(v, (int, float, np.floating)) and np.isfinite(v) and v > 0):
                raise InputError(f"{where}: {key} must be a finite number > 0 (SI), got {v!r}")
            vals[key] = float(v)
        out.append(dict(kind=kind, **vals))
    return tuple(out)


@dataclass(frozen=True)
class Storage:
    """Mass per bulk volume m(C) = theta R C + rho_b S(C) of every cell, and its inverse.

    ``a`` = theta R (linear part, includes the layer's retardation factor), ``rho`` bulk
    density of the nonlinear part (0 in linear cells); Freundlich cells S = K |C|^n sign C
    (Freundlich 1906); Langmuir cells S = S_max K_L C / (1 + K_L |C|) (Langmuir 1918).
    The odd extension to C < 0 only serves the integrator's tiny undershoots.
    """

    a: np.ndarray
    rho: np.ndarray
    fr: np.ndarray  # mask of Freundlich cells
    kf: np.ndarray
    nf: np.ndarray
    la: np.ndarray  # mask of Langmuir cells
    smax: np.ndarray
    kl: np.ndarray

    @property
    def linear(self) -> bool:
        return not (self.fr.any() or self.la.any())

    def sorbed(self, c):
        """Nonlinear sorbed concentration S(C) (kg/kg) per cell (0 in linear cells)."""
        x = np.abs(c)
        s = np.zeros_like(c)
        s[self.fr] = self.kf[self.fr] * x[self.fr] ** self.nf[self.fr]
        s[self.la] = self.smax[self.la] * self.kl[self.la] * x[self.la] / (1 + self.kl[self.la]
                                                                           * x[self.la])
        return np.sign(c) * s

    def mass(self, c):
        return self.a * c + self.rho * self.sorbed(c)

    def capacity(self, c):
        """dm/dC = theta R + rho_b dS/dC (inf at C = 0 for Freundlich n < 1)."""
        x = np.abs(c)
        d = np.zeros_like(c)
        with np.errstate(divide="ignore"):
            d[self.fr] = self.kf[self.fr] * self.nf[self.fr] * x[self.fr] ** (self.nf[self.fr] - 1)
        d[self.la] = self.smax[self.la] * self.kl[self.la] / (1 + self.kl[self.la] * x[self.la]) ** 2
        return self.a + self.rho * d

    def concentration(self, m):
        """Inverse of :meth:`mass`: C from the total mass per bulk volume."""
        c = m / self.a
        x = np.abs(m)
        if self.la.any():  # a K C^2 + (a + B - K M) C - M = 0, B = rho S_max K (closed form)
            i = self.la
            a, k, M = self.a[i], self.kl[i], x[i]
            b = a + self.rho[i] * self.smax[i] * k - k * M
            disc = np.sqrt(b * b + 4 * a * k * M)
            pos = b > 0
            root = np.where(pos, 2 * M / np.where(pos, b + disc, 1.0),
                            (disc - b) / (2 * a * k))
            c[i] = np.sign(m[i]) * root
        if self.fr.any():
            c[self.fr] = np.sign(m[self.fr]) * self._freundlich_root(x[self.fr])
        return c

    def _freundlich_root(self, M):
        """x >= 0 with a x + b x^n = M by Newton from a bound on the side where the
        iteration is monotone (below for concave n < 1, above for convex n > 1)."""
        i = self.fr
        a, b, n = self.a[i], self.rho[i] * self.kf[i], self.nf[i]
        lin = M / a
        pw = (M / b) ** (1 / n)
        x = np.where(n < 1, np.minimum(lin / 2, (M / (2 * b)) ** (1 / n)), np.minimum(lin, pw))
        x = np.where(n == 1, M / (a + b), x)
        for _ in range(_NEWTON_MAX):
            with np.errstate(divide="ignore", invalid="ignore"):
                f = a * x + b * x ** n - M
                step = np.where(x > 0, f / (a + b * n * x ** (n - 1)), 0.0)
            x = np.maximum(x - step, 0.0)
            if np.all(np.abs(step) <= _NEWTON_RTOL * x + _TINY):
                break
        else:  # pragma: no cover - monotone Newton always converges
            raise RuntimeError("Freundlich inversion did not converge")
        return x
