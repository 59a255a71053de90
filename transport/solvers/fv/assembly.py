"""Conservative semi-discretisation of the layered column on a finite-volume mesh.

Face fluxes F = G (wL K C_L - wR C_R) with harmonic face conductances (Patankar 1980,
ch. 4-5) and exponentially fitted weights (Scharfetter & Gummel 1969); boundary
closures; the reconstruction of face values; per-cell storage with isotherms.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from transport.model.column import Column, InitialState, InputError
from transport.model.sorption import Storage, isotherm_list
from transport.solvers.fv.mesh import Mesh

__all__ = ["System", "assemble", "bernoulli", "face_weights", "cell_props", "initial_cells",
           "initial_at", "face_values", "build_storage"]


def bernoulli(x):
    """B(x) = x / (e^x - 1), B(0) = 1, stable for all real x."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-8
    safe = np.where(small, 1.0, x)
    with np.errstate(over="ignore"):
        out = safe / np.expm1(safe)
    return np.where(small, 1.0 - 0.5 * x, out)


def face_weights(peclet, scheme: str):
    """Weights (wL, wR) of the face flux F = G (wL K C_L - wR C_R), with P = q sum h/k.

    ``exponential``: wL = B(-P), wR = B(P) (Scharfetter & Gummel 1969; exact for the
    steady flux through the two half-cells, Patankar 1980 sec. 5.2).
    ``upwind``: wL = 1 + max(P, 0), wR = 1 + max(-P, 0) (Patankar 1980 sec. 5.2).
    Both satisfy wL - wR = P, so G (wL - wR) = q: pure advection is carried exactly.
    """
    if scheme == "exponential":
        return bernoulli(-peclet), bernoulli(peclet)
    if scheme == "upwind":
        return 1 + np.maximum(peclet, 0), 1 + np.maximum(-peclet, 0)
    raise InputError(f"advection scheme {scheme!r} is unknown; use 'exponential' or 'upwind'")


@dataclass(frozen=True)
class System:
    """Semi-discrete system dC/dt = A C + b and the face-flux map F = Fmat C + f0."""

    mesh: Mesh
    A: sp.csr_matrix
    b: np.ndarray
    Fmat: sp.csr_matrix
    f0: np.ndarray
    capacity: np.ndarray  # theta R per cell
    k: np.ndarray  # theta D per cell


def cell_props(column: Column, mesh: Mesh, name: str) -> np.ndarray:
    return np.array([getattr(lay, name) for lay in column.layers])[mesh.layer]


def assemble(column: Column, mesh: Mesh, scheme: str = "exponential") -> System:
    """Assemble the conservative semi-discretisation.

    Cell j (volume V_j per unit area): theta R V dC_j/dt = F_{j-1/2} - F_{j+1/2}
    - theta R mu V C_j + sigma V.  At a face between cells L and R with half-distances
    h_L, h_R, conductances g = theta D / h and partition K (1 inside a layer):

        F = G (wL K C_L - wR C_R),   G = 1 / (K / g_L + 1 / g_R),   P = q (h_L/k_L + h_R/k_R),

    which for K = 1, q = 0 is the harmonic-mean face conductance of Patankar (1980,
    eq. 4.9) and for K != 1 enforces C_R-side = K C_L-side with a continuous diffusive
    flux.  Boundary faces use the same closure with the boundary value as the outer
    node (concentration), or the given flux (flux, inlet, sealed), F = q C (free
    outflow, dC/dz = 0), or the mass-transfer law eliminated for the face value.
    """
    q = column.darcy_flux
    n = mesh.centres.size
    k = cell_props(column, mesh, "water_content") * cell_props(column, mesh, "diffusivity")
    cap = cell_props(column, mesh, "water_content") * cell_props(column, mesh, "retardation")
    mu = cell_props(column, mesh, "decay_rate")
    sigma = cell_props(column, mesh, "source_rate")
    vol = np.diff(mesh.faces)
    # internal faces 1..n-1
    hl = mesh.faces[1:-1] - mesh.centres[:-1]
    hr = mesh.centres[1:] - mesh.faces[1:-1]
    kpart = np.ones(n - 1)
    for i, lay in enumerate(column.layers[:-1]):
        kpart[mesh.first[i + 1] - 1] = lay.partition_to_next
    gl, gr = k[:-1] / hl, k[1:] / hr
    G = 1.0 / (kpart / gl + 1.0 / gr)
    wl, wr = face_weights(q * (hl / k[:-1] + hr / k[1:]), scheme)
    rows, cols, vals = [], [], []
    f0 = np.zeros(n + 1)
    idx = np.arange(1, n)
    rows += [idx, idx]
    cols += [idx - 1, idx]
    vals += [G * wl * kpart, -G * wr]
    # boundary faces
    for end, face, cell in (("top", 0, 0), ("bottom", n, n - 1)):
        bc = getattr(column, end)
        h = abs(mesh.faces[face] - mesh.centres[cell])
        g = k[cell] / h
        wL, wR = face_weights(np.array(q * h / k[cell]), scheme)
        w_in, w_out = (wL, wR) if end == "top" else (wR, wL)  # outer node is "L" at top
        sgn = 1.0 if end == "top" else -1.0
        coef, const = 0.0, 0.0
        if bc.kind == "concentration":
            # top: F = g (wL c_b - wR C0);  bottom: F = g (wL C_N - wR c_b)
            coef, const = -sgn * g * w_out, sgn * g * w_in * bc.value
        elif bc.kind == "flux":
            const = bc.value
        elif bc.kind == "inlet":
            const = q * bc.value
        elif bc.kind == "free-outflow":
            coef = q
        elif bc.kind == "mass-transfer":
            hm = bc.transfer_coefficient
            den = hm + g * w_in
            coef, const = -sgn * hm * g * w_out / den, sgn * hm * g * w_in * bc.value / den
        rows.append(np.array([face]))
        cols.append(np.array([cell]))
        vals.append(np.array([float(coef)]))
        f0[face] = float(const)
    Fmat = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                         shape=(n + 1, n))
    div = sp.diags(1.0 / (cap * vol)) @ (Fmat[:-1] - Fmat[1:])
    A = (div - sp.diags(mu)).tocsr()
    b = (f0[:-1] - f0[1:]) / (cap * vol) + sigma / cap
    return System(mesh, A, b, Fmat.tocsr(), f0, cap, k)


def initial_cells(column: Column, mesh: Mesh, initial: InitialState) -> np.ndarray:
    if initial.kind == "clean":
        return np.zeros(mesh.centres.size)
    if initial.kind == "uniform":
        if len(initial.values) != len(column.layers):
            raise InputError(f"uniform initial state has {len(initial.values)} values for "
                             f"{len(column.layers)} layers; give one value per layer")
        return np.asarray(initial.values)[mesh.layer]
    return initial.profile_at(mesh.centres)  # a step (repeated depth) stays a step


def initial_at(column: Column, depths, initial: InitialState) -> np.ndarray:
    if initial.kind == "clean":
        return np.zeros(depths.size)
    if initial.kind == "uniform":
        lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1,
                      0, len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    return initial.profile_at(depths)  # right-continuous at a step


def face_values(column: Column, system: System, C: np.ndarray, scheme: str, times=None,
                 signals=None):
    """Pore-water C at each layer face, (nt, layers + 1) above and below each face.

    Interfaces: continuity of theta D dC/dz (which holds with or without advection):
    C_above = (g_L C_L + g_R C_R) / (g_L + K g_R), C_below = K C_above.  Boundaries:
    invert the boundary closure of :func:`assemble` for the face value.  With
    ``signals`` (:class:`transport.solvers.fv.signals.Signals`) the boundary terms are those at
    ``times``.
    """
    mesh, k = system.mesh, system.k
    n_layers = len(column.layers)
    above = np.empty((C.shape[0], n_layers + 1))
    below = np.empty_like(above)
    for i in range(1, n_layers):
        f = mesh.first[i]
        gl = k[f - 1] / (mesh.faces[f] - mesh.centres[f - 1])
        gr = k[f] / (mesh.centres[f] - mesh.faces[f])
        kp = column.layers[i - 1].partition_to_next
        above[:, i] = (gl * C[:, f - 1] + gr * C[:, f]) / (gl + kp * gr)
        below[:, i] = kp * above[:, i]
    q = column.darcy_flux
    f_ends = (system.f0[[0, -1]] if signals is None
              else signals.f0(times, left=True)[:, [0, -1]])
    F = C @ system.Fmat[[0, -1]].toarray().T + f_ends
    for end, face, cell, col in (("top", 0, 0, 0), ("bottom", -1, -1, n_layers)):
        bc = getattr(column, end)
        h = abs(mesh.faces[face] - mesh.centres[cell])
        g = k[cell] / h
        wL, wR = face_weights(np.array(q * h / k[cell]), scheme)
        flux = F[:, 0 if end == "top" else 1]
        if bc.kind == "concentration":
            val = (np.full(C.shape[0], bc.value) if signals is None
                   else signals.boundary_value(end, times))
        elif bc.kind == "free-outflow":
            val = C[:, cell]
        elif end == "top":  # F = g (wL C_f - wR C_0)
            val = (flux / g + wR * C[:, cell]) / wL
        else:  # F = g (wL C_N - wR C_f)
            val = (wL * C[:, cell] - flux / g) / wR
        above[:, col] = below[:, col] = val
    return above, below


def build_storage(column: Column, mesh: Mesh, isotherm=None) -> Storage:
    """Per-cell :class:`Storage` for the layers and their isotherms."""
    isos = isotherm_list(column, isotherm)
    n = mesh.centres.size
    a = cell_props(column, mesh, "water_content") * cell_props(column, mesh, "retardation")
    arr = {k: np.zeros(n) for k in ("rho", "kf", "nf", "smax", "kl")}
    fr, la = np.zeros(n, bool), np.zeros(n, bool)
    for i, iso in enumerate(isos):
        cells = mesh.layer == i
        if iso is None:
            continue
        arr["rho"][cells] = iso["bulk_density"]
        if iso["kind"] == "freundlich":
            fr |= cells
            arr["kf"][cells], arr["nf"][cells] = iso["coefficient"], iso["exponent"]
        else:
            la |= cells
            arr["smax"][cells], arr["kl"][cells] = iso["capacity"], iso["affinity"]
    return Storage(a, arr["rho"], fr, arr["kf"], arr["nf"], la, arr["smax"], arr["kl"])
