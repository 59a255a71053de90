"""The symmetric layered operator: per-layer coefficients and boundary rows.

See :mod:`transport.solvers.modal.spectrum` for the changes of variable that make the
layered transport equation a self-adjoint Sturm-Liouville problem, and for its
eigenvalues; :mod:`transport.solvers.modal.eigenfunctions` for its eigenfunctions.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.model.column import Column, InputError

__all__ = ["Operator", "SpectrumError", "ZONE_NOT_MODAL", "boundary_row", "build_operator", "sinc", "tanhc",
           "ENDPOINT_FORM_MIN"]

# Hyperbolic layers with w*l above this use the two-endpoint exponential form.
ENDPOINT_FORM_MIN = 1.0


class SpectrumError(RuntimeError):
    """The eigen-solve could not meet its own accuracy checks."""


@dataclass(frozen=True)
class Operator:
    """Per-layer coefficients of the symmetric problem, SI units."""

    thickness: np.ndarray  # l_i (m)
    a: np.ndarray  # theta R kappa
    k: np.ndarray  # theta D kappa
    s: np.ndarray  # theta R mu kappa + q^2/(4k)
    m: np.ndarray  # theta R mu kappa
    alpha: np.ndarray  # q / (2k)
    kappa: np.ndarray  # partition scaling
    decay: np.ndarray  # mu_i (1/s)
    source: np.ndarray  # sigma_i (kg m-3 s-1)
    z: np.ndarray  # face depths, (N+1,)
    A: np.ndarray  # A at the faces, (N+1,)
    q: float
    # boundary rows  alpha_u u + beta_u (k u') = gamma g  (u-space), top and bottom
    top_u: tuple
    bottom_u: tuple

    @property
    def n_layers(self) -> int:
        return self.thickness.size

    def v_condition(self, end: str):
        """(c_v, c_p, G) of the boundary row in v-space: c_v v + c_p p = G b, where
        b = gamma g is the boundary signal (see :func:`boundary_row`)."""
        al, be, _ = self.top_u if end == "top" else self.bottom_u
        A_end = self.A[0] if end == "top" else self.A[-1]
        return al + be * self.q / 2.0, be, np.exp(-A_end)


#: Why the modal engine refuses a source zone, and what to use instead.
ZONE_NOT_MODAL = ("a source-zone boundary (finite inventory) is not solved by the modal engine: "
                  "its condition depends on the decay rate of each mode; use engine auto or "
                  "laplace, which solve it exactly")


def boundary_row(bc, kappa: float, q: float, end: str):
    """Boundary condition as (alpha_u, beta_u, gamma): alpha_u u + beta_u k u' = gamma g."""
    h = bc.transfer_coefficient
    kind = bc.kind
    if kind == "concentration":
        return (kappa, 0.0, 1.0)
    if kind in ("flux", "sealed", "inlet"):
        gamma = {"flux": 1.0, "sealed": 0.0, "inlet": q}[kind]
        return (q * kappa, -1.0, gamma)
    if kind == "free-outflow":
        return (0.0, 1.0, 0.0)
    if kind == "mass-transfer":
        if end == "top":
            return (kappa * (q + h), -1.0, h)
        return (kappa * (q - h), -1.0, -h)
    if kind == "source-zone":
        raise InputError(ZONE_NOT_MODAL)
    raise InputError(f"unknown boundary kind {kind!r}")


def build_operator(column: Column) -> Operator:
    """Coefficients of the symmetric layered operator for ``column``."""
    lays = column.layers
    q = float(column.darcy_flux)
    kappa = np.ones(len(lays))
    for i in range(1, len(lays)):
        kappa[i] = kappa[i - 1] * lays[i - 1].partition_to_next
    theta = np.array([lay.water_content for lay in lays])
    R = np.array([lay.retardation for lay in lays])
    D = np.array([lay.diffusivity for lay in lays])
    mu = np.array([lay.decay_rate for lay in lays])
    l = np.array([lay.thickness for lay in lays])
    a = theta * R * kappa
    k = theta * D * kappa
    m = a * mu
    alpha = q / (2.0 * k)
    s = m + q * q / (4.0 * k)
    A = np.concatenate([[0.0], np.cumsum(alpha * l)])
    if A.max() > 600 or A.min() < -600:
        raise InputError(
            f"the column Peclet number (about {2 * abs(A[-1]):.0f}) is beyond what this "
            "engine represents in double precision (limit about 1200); split the problem "
            "or reduce the column length")
    return Operator(
        thickness=l, a=a, k=k, s=s, m=m, alpha=alpha, kappa=kappa, decay=mu,
        source=np.array([lay.source_rate for lay in lays]),
        z=column.interfaces, A=A, q=q,
        top_u=boundary_row(column.top, kappa[0], q, "top"),
        bottom_u=boundary_row(column.bottom, kappa[-1], q, "bottom"),
    )


# ----------------------------------------------------------------------------------
# Pruefer angle
# ----------------------------------------------------------------------------------

def sinc(x):
    """sin(x)/x with the limit 1 at 0 (x itself, not pi x as in numpy.sinc)."""
    x = np.asarray(x, dtype=float)
    zero = x == 0.0
    xs = np.where(zero, 1.0, x)
    return np.where(zero, 1.0, np.sin(xs) / xs)


def tanhc(x):
    """tanh(x)/x with the limit 1 at 0 (x >= 0)."""
    small = x < 1e-4
    xs = np.where(small, 1.0, x)
    return np.where(small, 1.0 - x * x / 3.0, np.tanh(xs) / xs)
