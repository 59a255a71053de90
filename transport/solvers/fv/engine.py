"""Finite-volume reference engine (method of lines) for the layered column.

The third, independent path of the project (beside the modal and the Laplace
engines): cell-centred finite volumes on a mesh planned from the scales of the problem
(decay and dispersion lengths, the boundary layer of the first output time), face
fluxes in conservative form, stiff time stepping.  Every result carries an error
estimate from three meshes of the same map (Richardson), and the mesh is doubled until
the estimate meets the tolerance, or a warning says it did not.  It is the converged
yardstick of the multilayer tests and the place for nonlinear sorption.

Equation on each layer (SI, z positive down):

    theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma,

total flux F = q C - theta D dC/dz (positive downward), continuous at faces; C
continuous or C_below = K C_above (partition, q = 0 only).

References
----------
Patankar, S. V. (1980). *Numerical Heat Transfer and Fluid Flow*. Hemisphere, ch. 4-5
    (harmonic face conductances, exponential and power-law schemes).
Scharfetter, D. L. & Gummel, H. K. (1969). IEEE Trans. Electron Devices 16:64
    (exponentially fitted flux, Bernoulli function form).
Freundlich, H. (1906). Z. Phys. Chem. 57:385 (power-law isotherm S = K_F C^n).
Langmuir, I. (1918). J. Am. Chem. Soc. 40:1361 (S = S_max K_L C / (1 + K_L C)).
Shampine, L. F. & Reichelt, M. W. (1997). SIAM J. Sci. Comput. 18:1 (the NDF/BDF
    integrator behind ``scipy.integrate.solve_ivp(method="BDF")``).
Deuflhard, P. (1985). SIAM Rev. 27:505 (extrapolation of the implicit Euler method).
Richardson, L. F. (1911). Phil. Trans. R. Soc. A 210:307; Roache, P. J. (1998).
    *Verification and Validation in Computational Science and Engineering*, ch. 5
    (error estimates from systematic mesh refinement).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.integrate import solve_ivp

from transport.solvers.fv.signals import MarchFailure, Signals, march_linear
from transport.solvers.laplace import EngineSolution
from transport.model.column import Column, InitialState, InputError
from transport.model.sorption import Storage, _isotherm_list

__all__ = ["Mesh", "MeshPlan", "Storage", "System", "build_mesh", "plan_mesh", "fixed_plan",
           "build_storage", "assemble", "solve_fv", "solve_fv_result", "FVSolution",
           "FVAccuracyWarning", "FVIntegrationError"]

#: Default relative tolerance of the time integration of the reported (finest) mesh;
#: the spatial error targets are 1e-3 and below, so 1e-8 keeps the time error far under.
DEFAULT_RTOL = 1e-8


@dataclass(frozen=True)
class Mesh:
    """Cell-centred mesh: ``faces`` (n+1,), ``centres`` (n,), ``layer`` index per cell,
    and ``first``, the index of the first cell of each layer (len = layers + 1)."""

    faces: np.ndarray
    centres: np.ndarray
    layer: np.ndarray
    first: np.ndarray


@dataclass(frozen=True)
class MeshPlan:
    """Cells per layer and, per layer, the smooth map xi in [0, 1] -> fraction of the
    layer's thickness that places the faces (tabulated as ``maps[i] = (xi, frac)``, or
    None for the blend of :func:`build_mesh`).  :meth:`mesh` evaluates it at ``factor``
    times the cells, so refinement halves every cell of the same mapping (the setting of
    Richardson extrapolation)."""

    counts: tuple
    maps: tuple
    grading: float = 0.5

    def mesh(self, column: Column, factor: float = 1.0) -> Mesh:
        tops = column.interfaces
        faces, layer = [np.array([0.0])], []
        counts = [max(2, int(round(c * factor))) for c in self.counts]
        for i, (lay, n, table) in enumerate(zip(column.layers, counts, self.maps)):
            xi = np.arange(1, n + 1) / n
            if table is None:
                g = self.grading
                x = g * xi + (1 - g) * (1 - np.cos(np.pi * xi)) / 2
            else:
                x = np.interp(xi, *table)
            pts = tops[i] + lay.thickness * x
            pts[-1] = tops[i + 1]
            faces.append(pts)
            layer.append(np.full(n, i))
        faces = np.concatenate(faces)
        first = np.concatenate([[0], np.cumsum(counts)])
        return Mesh(faces, 0.5 * (faces[:-1] + faces[1:]), np.concatenate(layer), first)

    def total(self, factor: float = 1.0) -> int:
        return int(sum(max(2, int(round(c * factor))) for c in self.counts))


def fixed_plan(column: Column, cells_per_layer, grading: float = 0.5) -> MeshPlan:
    """The plan of :func:`build_mesh`: given cells per layer, uniform/cosine blend."""
    n_layers = len(column.layers)
    counts = np.broadcast_to(np.asarray(cells_per_layer, dtype=int), (n_layers,))
    if np.any(counts < 2):
        raise InputError(f"cells_per_layer must be >= 2, got {cells_per_layer!r}")
    if not 0 < grading <= 1:
        raise InputError(f"mesh grading must be in (0, 1], got {grading!r}")
    return MeshPlan(tuple(int(c) for c in counts), (None,) * n_layers, float(grading))


def build_mesh(column: Column, cells_per_layer=40, grading: float = 0.5) -> Mesh:
    """Mesh graded toward both faces of every layer.

    Within a layer of thickness l the nodes are
    x_j = l [g xi_j + (1 - g)(1 - cos(pi xi_j)) / 2],  xi_j = j / n,
    a blend of uniform (g = 1) and Chebyshev-Gauss-Lobatto spacing (g = 0): the spacing
    varies smoothly (second-order accuracy is kept) and the cells next to a face are
    about g times the mean size.  ``cells_per_layer`` is an int or one int per layer.
    """
    return fixed_plan(column, cells_per_layer, grading).mesh(column)


#: Cells per physical length scale on the base mesh of :func:`plan_mesh` (the reported
#: solution is on the mesh twice as fine).  Calibrated so that the default run of the
#: test columns (decaying layer, Peclet 0-100, early times) is within ~1e-3 of the scale.
CELLS_PER_SCALE = 5.0
#: Cells per layer on the base mesh where the layer's own transients matter.
MIN_CELLS = 16
#: Cells per layer on the base mesh of a quasi-static layer (diffusion time through it
#: far below the earliest output time): it only passes mass through.
FLOOR_CELLS = 4
#: Growth of the cell size away from a graded face (h = h_face + GROWTH * distance).
GROWTH = 0.12


def _first_gap(column: Column, times) -> float:
    """Smallest positive time from a change (start, schedule steps) to an output time."""
    changes = [0.0]
    for sched in (column.top.schedule, column.bottom.schedule,
                  *(lay.source_schedule for lay in column.layers)):
        if sched is not None:
            changes.extend(sched.change_times)
    t = np.asarray(times, dtype=float)
    gaps = [ti - c for ti in t[t > 0] for c in changes if ti - c > 0]
    return min(gaps) if gaps else 0.0


def _jumps(column: Column, initial: InitialState) -> np.ndarray:
    """Layer faces where the initial state is discontinuous (bool per interface)."""
    n = len(column.layers)
    jump = np.zeros(n + 1, bool)
    if initial is None or initial.kind == "clean":
        return jump
    if initial.kind == "uniform":
        v = np.asarray(initial.values, dtype=float)
        if v.size == n:
            jump[1:-1] = v[:-1] != v[1:]
    kpart = np.array([lay.partition_to_next for lay in column.layers[:-1]])
    jump[1:-1] |= kpart != 1.0
    return jump


def plan_mesh(column: Column, times, initial: InitialState | None = None,
              cells_per_scale: float = CELLS_PER_SCALE) -> MeshPlan:
    """A mesh plan that resolves the scales of the problem.

    In each layer (v = q / theta, kappa = D / R) the cell size h(x) is the smallest of

    * the layer's share, l / MIN_CELLS, relaxed to sqrt(kappa t1) / cells_per_scale (but
      at least FLOOR_CELLS cells) in a layer that its diffusion crosses before the
      earliest output time t1 (measured from the last change of a schedule);
    * at every face, h_f + GROWTH d (d distance to the face), with h_f = l_f /
      cells_per_scale and l_f the shortest steady length D / (|v|/2 + sqrt(v^2/4 + D R mu))
      (the decay length sqrt(D / (R mu)) without flow, the dispersion length D / |v|
      without decay: the roots of D C'' - v C' - R mu C = 0);
    * at both ends of the column, and at faces where the initial state jumps, also
      sqrt(kappa t1) / cells_per_scale: the boundary layer of the first output time;
    * with flow, the width of a front that has travelled a distance s from the inlet,
      sqrt(2 D s / |v| + 2 kappa t1) / cells_per_scale.

    Cell counts follow from int dx / h(x); the faces are placed by the inverse of that
    integral, a smooth map, so halving the cells halves every cell.
    """
    q = column.darcy_flux
    t1 = _first_gap(column, times)
    jump = _jumps(column, initial)
    jump[0] = jump[-1] = True
    tops = column.interfaces
    L = column.length
    k = float(cells_per_scale)
    counts, maps = [], []
    for i, lay in enumerate(column.layers):
        l, D, R, mu, th = lay.thickness, lay.diffusivity, lay.retardation, lay.decay_rate, lay.water_content
        v = q / th
        kappa = D / R
        l_fast = D / (abs(v) / 2 + np.sqrt(v * v / 4 + D * R * mu)) if (v or mu) else np.inf
        diff_len = np.sqrt(kappa * t1) if t1 > 0 else 0.0
        h_far = l / MIN_CELLS
        if diff_len / k > h_far:
            h_far = min(diff_len / k, l / FLOOR_CELLS)
        h_face = []
        for face in (i, i + 1):
            hf = min(h_far * 0.5, l_fast / k)
            if jump[face] and diff_len > 0:
                hf = min(hf, diff_len / k)
            h_face.append(max(hf, 1e-9 * L))
        h_min = min(h_face)
        x = np.unique(np.concatenate([
            np.geomspace(h_min / 8, l, 400), l - np.geomspace(h_min / 8, l, 400),
            np.linspace(0.0, l, 801)]))
        x = x[(x >= 0) & (x <= l)]
        h = np.minimum.reduce([np.full(x.size, h_far), h_face[0] + GROWTH * x,
                               h_face[1] + GROWTH * (l - x)])
        if v != 0:
            s = (tops[i] + x) if v > 0 else (L - tops[i] - x)
            h = np.minimum(h, np.maximum(np.sqrt(2 * D * s / abs(v) + 2 * kappa * t1) / k,
                                         h_min))
        inv = 1.0 / h
        cum = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(x))])
        n = max(FLOOR_CELLS, int(np.ceil(cum[-1])))
        n += n % 2  # even, so that the half-size level of the estimate is the same map
        counts.append(n)
        maps.append((cum / cum[-1], x / l))
    return MeshPlan(tuple(counts), tuple(maps))


def _bernoulli(x):
    """B(x) = x / (e^x - 1), B(0) = 1, stable for all real x."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-8
    safe = np.where(small, 1.0, x)
    with np.errstate(over="ignore"):
        out = safe / np.expm1(safe)
    return np.where(small, 1.0 - 0.5 * x, out)


def _weights(peclet, scheme: str):
    """Weights (wL, wR) of the face flux F = G (wL K C_L - wR C_R), with P = q sum h/k.

    ``exponential``: wL = B(-P), wR = B(P) (Scharfetter & Gummel 1969; exact for the
    steady flux through the two half-cells, Patankar 1980 sec. 5.2).
    ``upwind``: wL = 1 + max(P, 0), wR = 1 + max(-P, 0) (Patankar 1980 sec. 5.2).
    Both satisfy wL - wR = P, so G (wL - wR) = q: pure advection is carried exactly.
    """
    if scheme == "exponential":
        return _bernoulli(-peclet), _bernoulli(peclet)
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


def _cell_props(column: Column, mesh: Mesh, name: str) -> np.ndarray:
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
    k = _cell_props(column, mesh, "water_content") * _cell_props(column, mesh, "diffusivity")
    cap = _cell_props(column, mesh, "water_content") * _cell_props(column, mesh, "retardation")
    mu = _cell_props(column, mesh, "decay_rate")
    sigma = _cell_props(column, mesh, "source_rate")
    vol = np.diff(mesh.faces)
    # internal faces 1..n-1
    hl = mesh.faces[1:-1] - mesh.centres[:-1]
    hr = mesh.centres[1:] - mesh.faces[1:-1]
    kpart = np.ones(n - 1)
    for i, lay in enumerate(column.layers[:-1]):
        kpart[mesh.first[i + 1] - 1] = lay.partition_to_next
    gl, gr = k[:-1] / hl, k[1:] / hr
    G = 1.0 / (kpart / gl + 1.0 / gr)
    wl, wr = _weights(q * (hl / k[:-1] + hr / k[1:]), scheme)
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
        wL, wR = _weights(np.array(q * h / k[cell]), scheme)
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


def _initial_cells(column: Column, mesh: Mesh, initial: InitialState) -> np.ndarray:
    if initial.kind == "clean":
        return np.zeros(mesh.centres.size)
    if initial.kind == "uniform":
        if len(initial.values) != len(column.layers):
            raise InputError(f"uniform initial state has {len(initial.values)} values for "
                             f"{len(column.layers)} layers; give one value per layer")
        return np.asarray(initial.values)[mesh.layer]
    return initial.profile_at(mesh.centres)  # a step (repeated depth) stays a step


def _initial_at(column: Column, depths, initial: InitialState) -> np.ndarray:
    if initial.kind == "clean":
        return np.zeros(depths.size)
    if initial.kind == "uniform":
        lay = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1,
                      0, len(column.layers) - 1)
        return np.asarray(initial.values)[lay]
    return initial.profile_at(depths)  # right-continuous at a step


def _face_values(column: Column, system: System, C: np.ndarray, scheme: str, times=None,
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
        wL, wR = _weights(np.array(q * h / k[cell]), scheme)
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
    isos = _isotherm_list(column, isotherm)
    n = mesh.centres.size
    a = _cell_props(column, mesh, "water_content") * _cell_props(column, mesh, "retardation")
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


# ------------------------------------------------------------------------- integration
def _stiffest_layer(column: Column, mesh: Mesh, t_end: float) -> str:
    """Message naming the layer whose cells relax fastest, and what to do about it."""
    vol = np.diff(mesh.faces)
    rates = [max(lay.diffusivity / lay.retardation / float(np.min(vol[mesh.layer == i])) ** 2,
                 lay.decay_rate) for i, lay in enumerate(column.layers)]
    i = int(np.argmax(rates))
    lay = column.layers[i]
    name = lay.name or f"#{i + 1}"
    return (f"layer {name!r} (thickness {lay.thickness:.3g} m, D = {lay.diffusivity:.3g} m2/s) "
            f"relaxes in {1 / rates[i]:.3g} s, {rates[i] * max(t_end, 1e-300):.3g} times "
            "faster than the run; merge a thin, highly diffusive layer into its neighbour "
            "(it only passes mass through), or use the modal or Laplace engine (linear sorption)")


class FVIntegrationError(InputError):
    """The time integration of the finite-volume system failed; the message names the
    stiffest layer and what to change."""


def _integrate(column, times, initial, mesh, rtol, atol, scheme, isotherm, augment: bool):
    """March the total-mass form in time on ``mesh``.

    State: m_j = theta R C_j + rho_b S(C_j) per cell (kg m-3 bulk), and with ``augment``
    the cumulative flux through every face Q_f = int F_f dt (kg m-2) and the decayed mass
    per area.  V_j dm_j/dt = F_{j-1/2} - F_{j+1/2} - mu_j m_j V_j + sigma_j V_j,
    F = Fmat C(m) + f0.  Linear storage: extrapolated implicit Euler
    (:func:`transport.solvers.fv.signals.march_linear`, one sparse LU solve per substep, no
    Newton iteration).  Nonlinear isotherms: scipy's BDF (Shampine & Reichelt 1997); the
    Jacobian d(dm/dt)/dm = Div diag(dC/dm) - diag(mu) stays finite at C = 0 even where
    dS/dC is infinite (Freundlich n < 1): dC/dm = 1/capacity -> 0.  Both keep the linear
    invariants (the mass budget) up to rounding / the Newton tolerance.  A failure
    raises :class:`FVIntegrationError` naming the stiffest layer.
    """
    initial = InitialState.clean() if initial is None else initial
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if times.size == 0 or not np.all(np.isfinite(times)) or np.any(times < 0):
        raise InputError("finite-volume engine: give finite output times >= 0 s")
    signals = Signals(column, mesh, scheme, assemble)
    system = signals.system
    store = build_storage(column, mesh, isotherm)
    n = mesh.centres.size
    vol = np.diff(mesh.faces)
    mu = _cell_props(column, mesh, "decay_rate")
    Fm, f0 = system.Fmat, system.f0
    div = (sp.diags(1.0 / vol) @ (Fm[:-1] - Fm[1:])).tocsr()
    d0 = (f0[:-1] - f0[1:]) / vol + signals.sigma_static

    def drive(t):
        """Cell drive d(t) and face constants f0(t) (constant without schedules)."""
        if not signals.varying:
            return d0, f0
        f, sig = signals.f0(t)[0], signals.sigma(t)[0]
        return (f[:-1] - f[1:]) / vol + sig, f
    c0 = _initial_cells(column, mesh, initial)
    m0 = store.mass(c0)
    order = np.argsort(times)
    t_sorted = times[order]
    t_end = float(t_sorted[-1])
    n_aux = n + 2 if augment else 0
    vmu = vol * mu
    out = np.empty((times.size, n + n_aux))
    out[:] = np.concatenate([m0, np.zeros(n_aux)])
    if t_end > 0:
        probe = signals.probe_times(t_end)
        sig_max = np.max(np.abs(signals.sigma(probe)), axis=0)
        c_scale = max([np.max(np.abs(c0), initial=0.0), signals.scale(t_end),
                       np.max(sig_max / store.a) * t_end, 1e-300])
        m_scale = store.mass(np.full(n, c_scale))
        atol_m = (rtol if atol is None else atol / c_scale) * m_scale
        q_scale = (float(vol @ m_scale) + np.max(np.abs(signals.f0(probe))) * t_end
                   + float(vol @ np.abs(m0)))
        atol_q = np.full(n_aux, rtol * q_scale)
        step = _linear_steps if store.linear else _bdf_steps
        y, out_sorted = np.concatenate([m0, np.zeros(n_aux)]), np.empty((t_sorted.size, n + n_aux))
        # restart at every change of a boundary or source schedule (smooth pieces)
        for a, b in signals.intervals(t_end):
            sel = (t_sorted > a) & (t_sorted <= b)
            t_eval = np.union1d(t_sorted[sel], [b])
            left = np.nextafter(b, a)
            try:
                ys = step(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m,
                          atol_q, augment)
            except (MarchFailure, _BDFFailure, ValueError, np.linalg.LinAlgError,
                    RuntimeError) as exc:
                raise FVIntegrationError(
                    f"finite-volume engine: time integration failed between {a:.6g} s and "
                    f"{b:.6g} s ({exc}); {_stiffest_layer(column, mesh, t_end)}") from None
            out_sorted[sel] = ys[np.searchsorted(t_eval, t_sorted[sel])]
            y = ys[-1]
        out[order] = out_sorted
    out[times == 0] = np.concatenate([m0, np.zeros(n_aux)])
    cells = np.vstack([store.concentration(row) for row in out[:, :n]])
    return dict(times=times, mesh=mesh, system=system, store=store, cells=cells,
                mass=out[:, :n], aux=out[:, n:], vol=vol, signals=signals, initial=initial)


def _linear_steps(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m,
                  atol_q, augment):
    """Linear storage: C = m / (theta R); extrapolated implicit Euler."""
    n = store.a.size
    inv_a = sp.diags(1.0 / store.a)
    jac = (div @ inv_a - sp.diags(mu)).tocsc()
    if augment:
        pmat = sp.vstack([Fm @ inv_a, sp.csr_matrix(vmu[None, :])]).tocsr()
    else:
        pmat = sp.csr_matrix((0, n))

    def drv(t):
        d, f = drive(min(t, left))
        return d, (np.concatenate([f, [0.0]]) if augment else np.empty(0))
    ys, qs = march_linear(jac, pmat, drv, a, b, y[:n], y[n:], t_eval, rtol, atol_m, atol_q)
    return np.hstack([ys, qs])


class _BDFFailure(RuntimeError):
    pass


#: Right-hand-side evaluations allowed per BDF interval (nonlinear isotherms) before the
#: run is declared failed, instead of creeping on with ever smaller steps.
MAX_RHS_EVALUATIONS = 400000


def _bdf_steps(div, Fm, mu, vmu, store, drive, left, a, b, y, t_eval, rtol, atol_m, atol_q,
               augment):
    """Nonlinear storage: scipy's BDF with the analytic sparse Jacobian."""
    n = store.a.size
    n_aux = y.size - n
    calls = [0]

    def rhs(t, yy):
        calls[0] += 1
        if calls[0] > MAX_RHS_EVALUATIONS:
            raise _BDFFailure(f"more than {MAX_RHS_EVALUATIONS} right-hand-side evaluations")
        d, f = drive(min(t, left))
        m = yy[:n]
        c = store.concentration(m)
        dm = div @ c + d - mu * m
        if not augment:
            return dm
        return np.concatenate([dm, Fm @ c + f, [vmu @ m]])

    def jac(t, yy):
        dcdm = 1.0 / store.capacity(store.concentration(yy[:n]))
        jm = div @ sp.diags(dcdm) - sp.diags(mu)
        if not augment:
            return jm.tocsc()
        top = sp.hstack([jm, sp.csr_matrix((n, n_aux))])
        low = sp.hstack([sp.vstack([Fm @ sp.diags(dcdm), sp.csr_matrix(vmu[None, :])]),
                         sp.csr_matrix((n_aux, n_aux))])
        return sp.vstack([top, low]).tocsc()
    sol = solve_ivp(rhs, (a, b), y, method="BDF", t_eval=t_eval, jac=jac, rtol=rtol,
                    atol=np.concatenate([atol_m, atol_q]))
    if not sol.success:
        raise _BDFFailure(sol.message)
    return sol.y.T


def _profile(column, res, depths, scheme):
    """C at output depths: piecewise linear through cell centres and face values."""
    times, mesh, cells = res["times"], res["mesh"], res["cells"]
    depths = np.atleast_1d(np.asarray(depths, dtype=float))
    L = column.length
    if depths.size == 0 or np.any(depths < 0) or np.any(depths > L * (1 + 1e-12)):
        raise InputError(f"finite-volume engine: depths must lie in [0, {L}] m")
    above, below = _face_values(column, res["system"], cells, scheme, times, res["signals"])
    out = np.empty((times.size, depths.size))
    lay_of = np.clip(np.searchsorted(column.interfaces, depths, side="right") - 1,
                     0, len(column.layers) - 1)
    for i in range(len(column.layers)):
        sel = lay_of == i
        if not np.any(sel):
            continue
        f0, f1 = mesh.first[i], mesh.first[i + 1]
        x = np.concatenate([[column.interfaces[i]], mesh.centres[f0:f1],
                            [column.interfaces[i + 1]]])
        for it in range(times.size):
            y = np.concatenate([[below[it, i]], cells[it, f0:f1], [above[it, i + 1]]])
            out[it, sel] = np.interp(depths[sel], x, y)
    at_zero = times == 0
    if np.any(at_zero):
        out[at_zero] = _initial_at(column, depths, res["initial"])
    return out, depths


def _fields(column, res, depths, scheme):
    """C, F, cumulative mass (nt, nz) and the budget terms of one run."""
    conc, depths = _profile(column, res, depths, scheme)
    times, mesh, vol = res["times"], res["mesh"], res["vol"]
    n = mesh.centres.size
    faces = (res["system"].Fmat @ res["cells"].T
             + res["signals"].f0(times, left=True).T)  # (n+1, nt), state before a change
    cum = res["aux"][:, :n + 1]
    flux = np.vstack([np.interp(depths, mesh.faces, f) for f in faces.T])
    cmass = np.vstack([np.interp(depths, mesh.faces, c) for c in cum])
    stored = res["mass"] @ vol
    initial_stored = float(res["store"].mass(_initial_cells(column, mesh, res["initial"])) @ vol)
    produced = res["signals"].produced(times, vol)
    decayed = res["aux"][:, n + 1]
    budget = {"stored": stored, "initial_stored": np.full(times.size, initial_stored),
              "entered_top": cum[:, 0], "left_bottom": cum[:, n], "decayed": decayed,
              "produced": produced,
              "residual": stored - initial_stored - cum[:, 0] + cum[:, n] + decayed - produced}
    scale = np.maximum(np.max(np.abs(conc), axis=1), np.max(np.abs(res["cells"]), axis=1))
    return dict(concentration=conc, total_flux=flux, cumulative_mass=cmass, budget=budget,
                depths=depths, times=times, scale=scale)


def solve_fv(column: Column, times, depths, initial: InitialState | None = None,
             cells_per_layer=None, rtol: float = DEFAULT_RTOL, atol: float | None = None,
             scheme: str = "exponential", grading: float = 0.5, isotherm=None) -> np.ndarray:
    """Concentration C(z, t) by finite volumes on ONE mesh (no error estimate).

    The raw discretisation, for convergence studies; :func:`solve_fv_result` reports
    the same engine with an error estimate, refined to a tolerance.

    Parameters
    ----------
    column : Column; boundary values and layer sources may follow schedules (the
        integration restarts at each change time; at a change time the state just
        before the change is reported)
    times : array_like (nt,), s, >= 0
    depths : array_like (nz,), m in [0, L]; at a layer face the value just below it
    initial : InitialState, default clean
    cells_per_layer : None (default: the mesh of :func:`plan_mesh`, at the refinement
        :func:`solve_fv_result` reports first), or an int or one int per layer (the
        fixed mesh of :func:`build_mesh`)
    rtol, atol : tolerances of the time integration; atol (kg m-3) defaults to rtol times
        the concentration scale of the problem (boundary and initial values, source
        build-up)
    scheme : "exponential" (Scharfetter-Gummel fitting, default) or "upwind"
    grading : mesh grading toward faces of a fixed mesh, 1 = uniform (see
        :func:`build_mesh`)
    isotherm : None (linear sorption through each layer's retardation factor), one dict
        for every layer, or a sequence with one entry (dict or None) per layer:
        ``{"kind": "freundlich", "coefficient": K_F, "exponent": n, "bulk_density": rho_b}``
        with S = K_F C^n, K_F in (kg/kg)/(kg/m3)^n (Freundlich 1906), or
        ``{"kind": "langmuir", "capacity": S_max, "affinity": K_L, "bulk_density": rho_b}``
        with S = S_max K_L C / (1 + K_L C), S_max kg/kg, K_L m3/kg (Langmuir 1918);
        rho_b in kg m-3.  The isotherm ADDS to the layer's linear storage: the mass per
        bulk volume is theta R C + rho_b S(C), so give R = 1 for a purely nonlinear layer.
        Decay acts on dissolved and sorbed mass alike: -mu (theta R C + rho_b S(C)).

    Returns
    -------
    ndarray (nt, nz) of C, kg m-3.

    Notes
    -----
    Space: second order for smooth solutions on the graded mesh (centred limit of the
    fitted flux at small cell Peclet number); first order with ``upwind`` when
    advection dominates.  Output values are piecewise-linear in each layer through the
    cell centres and the reconstructed face values.  Time: see :func:`_integrate`.
    """
    if cells_per_layer is None:
        mesh = plan_mesh(column, times, initial).mesh(column, 2.0)
    else:
        mesh = fixed_plan(column, cells_per_layer, grading).mesh(column)
    res = _integrate(column, times, initial, mesh, rtol, atol, scheme, isotherm, augment=False)
    return _profile(column, res, depths, scheme)[0]


class FVAccuracyWarning(UserWarning):
    """The finite-volume error estimate did not reach the tolerance within the cell
    cap, or the mesh sequence is not yet in its asymptotic range (the estimate may then
    not bound the error).  The message gives the reached estimate."""


@dataclass(frozen=True)
class FVSolution(EngineSolution):
    """A finite-volume :class:`transport.solvers.laplace.EngineSolution` with the error estimates
    of every reported quantity: ``error`` maps "concentration", "total_flux",
    "cumulative_mass", "budget" to (nt,) absolute estimates (max over depths; over the
    budget terms stored, entered_top, left_bottom, decayed), ``error_estimate`` is
    ``error["concentration"]``; ``observed_order`` (nt,) of C from the last three meshes;
    ``cells`` on the reported mesh; ``resolved`` (nt,) False where the mesh sequence is
    not in its asymptotic range."""

    error: dict = field(default=None, repr=False, compare=False)
    observed_order: np.ndarray = field(default=None, repr=False, compare=False)
    cells: int = 0
    resolved: np.ndarray = field(default=None, repr=False, compare=False)


#: Safety factor on the Richardson estimate: 3, the factor of safety of Roache's grid
#: convergence index (Roache 1998, sec. 5.9); at the nominal order the estimate is then
#: the whole last difference |q2 - q1|.  (2 left the estimate 5 % short in the tail
#: of an erfc boundary layer one day after a step, where convergence is irregular.)
SAFETY = 3.0
#: Nominal order of the scheme in space (and of the tightened time tolerance).
NOMINAL_ORDER = 2.0
#: Multiple of rtol x scale added for the time integration error.
TIME_SAFETY = 10.0
#: Default relative tolerance of C (of the largest |C| in the column at each time).
DEFAULT_TOLERANCE = 1e-3
#: Default cap on the cells of the finest mesh of the refinement.
MAX_CELLS = 20000
_BUDGET_TERMS = ("stored", "entered_top", "left_bottom", "decayed")


def _richardson(q0, q1, q2, floor):
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


def _estimate(levels, rtol):
    """Error dict, resolved mask and observed order of the finest of three levels."""
    a, b, c = levels
    cf = c["concentration"]
    scale_c = np.maximum(c["scale"], np.max(c["scale"]) * 1e-12)
    floor_c = TIME_SAFETY * rtol * scale_c
    err_c, ok, order = _richardson(a["concentration"], b["concentration"], cf, floor_c)
    err = {"concentration": err_c}
    for key in ("total_flux", "cumulative_mass"):
        floor = TIME_SAFETY * rtol * np.max(np.abs(c[key]))
        err[key] = _richardson(a[key], b[key], c[key], floor)[0]
    bscale = max(float(np.max(np.abs(c["budget"][k]))) for k in _BUDGET_TERMS)
    err["budget"] = np.max([_richardson(a["budget"][k], b["budget"][k], c["budget"][k],
                                        TIME_SAFETY * rtol * bscale)[0]
                            for k in _BUDGET_TERMS], axis=0)
    zero = c["times"] == 0
    err["concentration"][zero] = 0.0  # the initial state itself
    err["cumulative_mass"][zero] = 0.0
    err["budget"][zero] = 0.0
    ok[zero] = True
    return err, ok, order


def solve_fv_result(column: Column, times, depths, initial: InitialState | None = None,
                    cells_per_layer=None, rtol: float = DEFAULT_RTOL, atol: float | None = None,
                    scheme: str = "exponential", grading: float = 0.5, isotherm=None,
                    tolerance: float | None = DEFAULT_TOLERANCE, max_cells: int = MAX_CELLS):
    """Finite-volume solution with fluxes, cumulative mass, budget and error estimates.

    Same parameters as :func:`solve_fv`, and

    tolerance : relative accuracy of C wanted at each output time (of the largest |C| in
        the column then); the mesh is doubled until the estimate meets it, or the finest
        mesh would exceed ``max_cells`` (then :class:`FVAccuracyWarning` with the reached
        estimate).  None: one refinement, no loop (warns only where unresolved).
    max_cells : cap on the cells of the finest mesh

    The run solves on three meshes of the same map (cells x1/2, x1, x2 of the plan of
    :func:`plan_mesh` or of the fixed mesh of ``cells_per_layer``; time tolerance
    16 rtol, 4 rtol, rtol), reports the finest, and estimates its error from
    the differences (:func:`_richardson`).  Returns an :class:`FVSolution` with
    ``engine="finite-volume"``, ``series=None``, no eigenvalues,

    * ``total_flux`` F (kg m-2 s-1): the discrete face fluxes F = Fmat C + f0,
      interpolated linearly in depth between faces;
    * ``cumulative_mass`` (kg m-2): the time integral of the face fluxes, carried as extra
      ODE states, same depth interpolation;
    * ``budget``: stored (dissolved + sorbed, sum V m), initial_stored, entered_top,
      left_bottom, decayed (an extra ODE state), produced, residual = stored - initial -
      entered + left + decayed - produced (closes to rounding for every mesh);
    * ``error_estimate`` (nt,) kg m-3 and ``error`` (see :class:`FVSolution`);
    * ``concentration_at(depth, times)``: a run at those times on the reported mesh.
    """
    import warnings

    if tolerance is not None and not (np.isfinite(tolerance) and tolerance > 0):
        raise InputError(f"finite-volume tolerance must be > 0, got {tolerance!r}")
    if cells_per_layer is None:
        plan, factors = plan_mesh(column, times, initial), [0.5, 1.0, 2.0]
    else:
        plan, factors = fixed_plan(column, cells_per_layer, grading), [0.5, 1.0, 2.0]
        if min(plan.counts) < 4:
            factors = [1.0, 2.0, 4.0]

    def run(factor, tol):
        res = _integrate(column, times, initial, plan.mesh(column, factor), tol, atol, scheme,
                         isotherm, augment=True)
        return _fields(column, res, depths, scheme)
    rtols = [16 * rtol, 4 * rtol, rtol]
    levels = [run(f, r) for f, r in zip(factors, rtols)]
    while True:
        err, ok, order = _estimate(levels, rtols[-1])
        fine = levels[-1]
        if tolerance is None:
            bad = ~ok
            break
        bad = (err["concentration"] > tolerance * fine["scale"]) | ~ok
        if not bad.any() or plan.total(2 * factors[-1]) > max_cells:
            break
        factors.append(2 * factors[-1])
        rtols.append(max(rtols[-1] / 4, 1e-13))
        levels = levels[1:] + [run(factors[-1], rtols[-1])]
    if bad.any():
        rel = err["concentration"] / np.maximum(fine["scale"], 1e-300)
        i = int(np.argmax(np.where(bad, rel, -np.inf)))
        what = ("the mesh sequence is not yet in its asymptotic range (observed order "
                f"{order[i]:.2g}); the estimate may not bound the error" if not ok[i] else
                f"the tolerance {tolerance:g} was not met within {max_cells} cells")
        warnings.warn(f"finite-volume engine at t = {fine['times'][i]:.6g} s: estimated error "
                      f"of C {err['concentration'][i]:.3g} kg/m3 ({rel[i]:.3g} of the "
                      f"concentration scale) on {plan.total(factors[-1])} cells; {what}",
                      FVAccuracyWarning, stacklevel=2)
    mesh = plan.mesh(column, factors[-1])
    rtol_fine = rtols[-1]

    def evaluator(depth, t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        uniq, inv = np.unique(t, return_inverse=True)
        res = _integrate(column, uniq, initial, mesh, rtol_fine, atol, scheme, isotherm,
                         augment=False)
        return _profile(column, res, [depth], scheme)[0][:, 0][inv]
    t_arr = fine["times"]
    return FVSolution(column=column, times=t_arr, depths=fine["depths"],
                      concentration=fine["concentration"], total_flux=fine["total_flux"],
                      cumulative_mass=fine["cumulative_mass"], budget=fine["budget"],
                      eigenvalues=np.empty(0), n_modes=0, engine="finite-volume",
                      series=None,
                      engine_by_time=np.where(t_arr > 0, "finite-volume", "initial").astype(object),
                      error_estimate=err["concentration"], evaluator=evaluator, error=err,
                      observed_order=order, cells=mesh.centres.size, resolved=ok)
