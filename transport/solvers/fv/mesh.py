"""Finite-volume meshes: cell-centred, graded toward layer faces, planned from the scales
of the problem (decay and dispersion lengths, the boundary layer of the first output
time), so that refinement halves every cell of the same map (Richardson's setting).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from transport.model.column import Column, InitialState, InputError

__all__ = ["Mesh", "MeshPlan", "fixed_plan", "build_mesh", "plan_mesh", "CELLS_PER_SCALE",
           "MIN_CELLS", "FLOOR_CELLS", "GROWTH"]


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
