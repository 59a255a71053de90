"""Boundary values and layer sources that change in time, for the finite-volume engine.

The semi-discrete face fluxes are F = Fmat C + f0, and f0 is linear in each boundary
value (every closure of :func:`transport.finite_volume.assemble` is), so a scheduled end
contributes ``unit_end * value(t)`` with ``unit_end`` the f0 of a unit value at that end
alone.  A scheduled layer source adds ``sigma_i * value_i(t)`` on the layer's cells.
The integrator restarts at every change time of the schedules (steps and ramp kinks),
so each interval sees a smooth right-hand side; inside the interval (a, b] the signals
are evaluated on the left of b, so a jump at b belongs to the next interval.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

__all__ = ["Signals"]

_VALUE_KINDS = ("concentration", "flux", "inlet", "mass-transfer")


class Signals:
    """Time-dependent parts of f0 (face fluxes) and sigma (cell sources)."""

    def __init__(self, column, mesh, scheme, assemble):
        self.column = column
        static = column
        self.ends = []  # (end, face vector per unit value, schedule)
        for end in ("top", "bottom"):
            bc = getattr(column, end)
            if bc.schedule is not None and bc.kind in _VALUE_KINDS:
                static = replace(static, **{end: replace(bc, value=0.0, schedule=None)})
        self.static = static
        self.system = assemble(static, mesh, scheme)
        for end in ("top", "bottom"):
            bc = getattr(column, end)
            if bc.schedule is not None and bc.kind in _VALUE_KINDS:
                unit = replace(static, **{end: replace(bc, value=1.0, schedule=None)})
                vec = assemble(unit, mesh, scheme).f0 - self.system.f0
                self.ends.append((end, vec, bc.schedule))
        rates = np.array([lay.source_rate for lay in column.layers])[mesh.layer]
        self.sigma_static = rates.copy()
        self.sources = []  # (cell rates, schedule)
        for i, lay in enumerate(column.layers):
            if lay.source_schedule is not None and lay.source_rate != 0.0:
                cells = np.where(mesh.layer == i, rates, 0.0)
                self.sigma_static[mesh.layer == i] = 0.0
                self.sources.append((cells, lay.source_schedule))
        changes = set()
        for *_, sched in self.ends + self.sources:
            changes.update(sched.change_times)
        self.change_times = sorted(changes)

    @property
    def varying(self) -> bool:
        return bool(self.ends or self.sources)

    def f0(self, t) -> np.ndarray:
        """Face-flux constants at times t: (t.size, faces)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.tile(self.system.f0, (t.size, 1))
        for _, vec, sched in self.ends:
            out += sched.value(t)[:, None] * vec[None, :]
        return out

    def sigma(self, t) -> np.ndarray:
        """Cell sources at times t: (t.size, cells), kg m-3 s-1."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.tile(self.sigma_static, (t.size, 1))
        for cells, sched in self.sources:
            out += sched.value(t)[:, None] * cells[None, :]
        return out

    def produced(self, t, vol) -> np.ndarray:
        """Mass per area produced by the sources during (0, t), kg m-2."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = t * float(self.sigma_static @ vol)
        for cells, sched in self.sources:
            out = out + sched.integral(t) * float(cells @ vol)
        return out

    def boundary_value(self, end: str, t) -> np.ndarray:
        """The boundary value of ``end`` at times t (its schedule, else the constant); at
        a change time the value just before it, as the other engines report."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        bc = getattr(self.column, end)
        if bc.schedule is not None:
            return bc.schedule.value(t, left=True)
        return np.full(t.size, bc.value)

    def scale(self, t_end: float) -> float:
        """Largest boundary value magnitude over [0, t_end]."""
        probe = self.probe_times(t_end)
        return max(float(np.max(np.abs(getattr(self.column, end).schedule.value(probe))))
                   if getattr(self.column, end).schedule is not None
                   else abs(getattr(self.column, end).value) for end in ("top", "bottom"))

    def probe_times(self, t_end: float) -> np.ndarray:
        """0, t_end and the change times between, each also just before itself: where
        steps, ramps and depletion take their extremes."""
        t = np.array(sorted({0.0, t_end, *[c for c in self.change_times
                                            if 0.0 <= c <= t_end]}))
        return np.concatenate([t, np.maximum(np.nextafter(t, -np.inf), 0.0)])

    def intervals(self, t_end: float):
        """(a, b) pieces of [0, t_end] between change times."""
        cuts = [0.0] + [c for c in self.change_times if 0.0 < c < t_end] + [t_end]
        return list(zip(cuts[:-1], cuts[1:]))
