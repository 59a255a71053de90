"""Validated, unit-free (SI) description of a layered column.

Everything here is plain SI floats: metres, seconds, kilograms. Conversion from
user units happens once, at the edges (``transport.units``, ``transport.scenario.schema``).

Conventions
-----------
* depth z is positive DOWN, z = 0 at the top of the column;
* C is the pore-water concentration (kg m-3);
* total flux F = q C - theta D dC/dz (kg m-2 s-1), positive downward;
* on each layer  theta R dC/dt = d/dz(theta D dC/dz) - q dC/dz - theta R mu C + sigma.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "check_output_grid",
    "InputError",
    "Layer",
    "Boundary",
    "Column",
    "InitialState",
    "BOUNDARY_KINDS",
    "has_source_zone",
]


class InputError(ValueError):
    """Invalid physical input, with the offending item, value and the fix."""


BOUNDARY_KINDS = (
    "concentration",  # C = value
    "flux",  # total flux F = value (top: entering downward; bottom: leaving downward)
    "inlet",  # F = q * value  (flux-type inlet, value = inlet concentration)
    "free-outflow",  # dC/dz = 0
    "mass-transfer",  # F = h (value - C) at top, F = h (C - value) at bottom
    "sealed",  # F = 0
    "source-zone",  # a well-mixed source zone of finite inventory beyond this end
)


def _finite(name: str, value: float) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(value):
        raise InputError(f"{name} must be a finite number, got {value!r}")
    return value


@dataclass(frozen=True)
class Layer:
    """One homogeneous layer, SI units.

    Parameters
    ----------
    thickness : m, > 0
    water_content : volumetric water content theta (the water-filled porosity), 0 < theta <= 1
    diffusivity : pore-water diffusion + mechanical dispersion D, m2 s-1, > 0
    retardation : R >= 1 (values below 1, anion exclusion, are accepted if > 0)
    decay_rate : first-order rate mu, s-1, >= 0 (acts on dissolved and sorbed phases)
    source_rate : zero-order production sigma, kg m-3 s-1 per bulk volume
    partition_to_next : K at the lower face, C(next layer) = K C(this layer), > 0
    name : label used in messages and plots
    source_schedule : optional :class:`transport.model.schedules.Schedule`; the source is
        source_rate times its value (constant 1 when absent)
    """

    thickness: float
    water_content: float
    diffusivity: float
    retardation: float = 1.0
    decay_rate: float = 0.0
    source_rate: float = 0.0
    partition_to_next: float = 1.0
    name: str = ""
    source_schedule: object = None  # Schedule multiplying source_rate in time, or None

    def __post_init__(self):
        label = f"layer {self.name!r}" if self.name else "layer"
        for attr in ("thickness", "water_content", "diffusivity", "retardation", "decay_rate",
                     "source_rate", "partition_to_next"):
            object.__setattr__(self, attr, _finite(f"{label}: {attr}", getattr(self, attr)))
        if self.thickness <= 0:
            raise InputError(f"{label}: thickness must be > 0 m, got {self.thickness!r}; "
                             "remove the layer or give its real thickness")
        if not 0 < self.water_content <= 1:
            raise InputError(f"{label}: water_content must be in (0, 1], got {self.water_content!r}")
        if self.diffusivity <= 0:
            raise InputError(f"{label}: diffusivity must be > 0 m2/s, got {self.diffusivity!r}")
        if self.retardation <= 0:
            raise InputError(f"{label}: retardation factor must be > 0, got {self.retardation!r}")
        if self.decay_rate < 0:
            raise InputError(f"{label}: decay rate must be >= 0 1/s, got {self.decay_rate!r}")
        if self.partition_to_next <= 0:
            raise InputError(f"{label}: partition_to_next must be > 0, got "
                             f"{self.partition_to_next!r}")


@dataclass(frozen=True)
class Boundary:
    """Boundary condition at one end of the column (SI).

    kind : one of BOUNDARY_KINDS
    value : concentration (kg m-3) for concentration / inlet / mass-transfer (outside
        concentration); total flux (kg m-2 s-1) for flux; ignored otherwise
    transfer_coefficient : h (m s-1) for mass-transfer
    schedule : optional :class:`transport.model.schedules.Schedule` giving the value in time
        (replaces ``value``)
    capacity : Gamma (m), source-zone only: the zone's mass per plan area per unit
        pore-water concentration, H (theta + rho_b Kd) for a zone of thickness H
    decay_rate : lambda (s-1), source-zone only: first-order decay inside the zone

    A ``source-zone`` end is a well-mixed zone of finite inventory just beyond the end
    (above the top, below the bottom).  The column's concentration at that end equals the
    zone's, C_s(t), which starts at ``value`` and falls as mass leaves the zone: at the top
    ``Gamma dC_s/dt = -F(0, t) - q_out C_s - Gamma lambda C_s``, at the bottom
    ``Gamma dC_s/dt = F(L, t) - q_out C_s - Gamma lambda C_s``, with q_out = max(-q, 0)
    at the top and max(q, 0) at the bottom the water that passes through the zone away
    from the column (water entering the zone from outside is clean).  This is the mass
    balance of a well-mixed reservoir in contact with a medium (Crank 1975, The
    Mathematics of Diffusion, 2nd ed., sec. 3.3, "diffusion from a stirred solution of
    limited volume", generalised to flow through the zone).
    """

    kind: str
    value: float = 0.0
    transfer_coefficient: float = 0.0
    schedule: object = None  # transport.model.schedules.Schedule of the value in time, or None
    capacity: float = 0.0
    decay_rate: float = 0.0

    def __post_init__(self):
        if self.kind not in BOUNDARY_KINDS:
            raise InputError(f"boundary kind {self.kind!r} is unknown; use one of "
                             + ", ".join(BOUNDARY_KINDS))
        object.__setattr__(self, "value", _finite(f"{self.kind} boundary value", self.value))
        h = _finite("transfer_coefficient", self.transfer_coefficient)
        object.__setattr__(self, "transfer_coefficient", h)
        if self.kind == "mass-transfer" and not h > 0:
            raise InputError(f"mass-transfer boundary needs transfer_coefficient > 0 m/s, got {h!r}")
        cap = _finite("source-zone capacity", self.capacity)
        lam = _finite("source-zone decay_rate", self.decay_rate)
        object.__setattr__(self, "capacity", cap)
        object.__setattr__(self, "decay_rate", lam)
        if self.kind == "source-zone":
            if not cap > 0:
                raise InputError(f"a source-zone boundary needs capacity > 0 m (its mass per "
                                 f"area per unit concentration), got {cap!r}")
            if lam < 0:
                raise InputError(f"source-zone decay_rate must be >= 0 1/s, got {lam!r}")
            if self.value < 0:
                raise InputError(f"source-zone initial concentration must be >= 0, got "
                                 f"{self.value!r}")
            if self.schedule is not None:
                raise InputError("a source-zone boundary takes its initial concentration, "
                                 "not a schedule: its concentration follows from its mass "
                                 "balance")

    def zone_outflow(self, darcy_flux: float, end: str) -> float:
        """q_out (m s-1): the water passing through a source zone at ``end`` away from
        the column (it carries C_s out of the system); 0 for other kinds."""
        if self.kind != "source-zone":
            return 0.0
        return max(-darcy_flux, 0.0) if end == "top" else max(darcy_flux, 0.0)

    def zone_inventory(self) -> float:
        """Initial mass per area in a source zone (kg m-2): Gamma C_s(0)."""
        return self.capacity * self.value if self.kind == "source-zone" else 0.0


@dataclass(frozen=True)
class Column:
    """A stack of layers (top first), a steady Darcy flux and two boundaries."""

    layers: tuple
    top: Boundary
    bottom: Boundary
    darcy_flux: float = 0.0  # m s-1, positive downward

    def __post_init__(self):
        layers = tuple(self.layers)
        object.__setattr__(self, "layers", layers)
        if not layers:
            raise InputError("a column needs at least one layer")
        q = _finite("darcy_flux", self.darcy_flux)
        object.__setattr__(self, "darcy_flux", q)
        if q != 0:
            for lay in layers[:-1]:
                if lay.partition_to_next != 1.0:
                    raise InputError(
                        f"layer {lay.name!r}: a partition jump (partition_to_next = "
                        f"{lay.partition_to_next}) with a nonzero Darcy flux ({q} m/s) is not "
                        "physical in this 1-D model; set darcy_flux to 0 or the partition to 1")

    @functools.cached_property
    def interfaces(self) -> np.ndarray:
        """Depths of the layer faces, 0 first, total thickness last (m); computed once
        per column (read-only: the layers are frozen)."""
        faces = np.concatenate([[0.0], np.cumsum([lay.thickness for lay in self.layers])])
        faces.flags.writeable = False
        return faces

    @property
    def length(self) -> float:
        return float(self.interfaces[-1])


@dataclass(frozen=True)
class InitialState:
    """Initial pore-water concentration (kg m-3).

    kind "clean": zero everywhere; "uniform": one value per layer (``values``);
    "profile": piecewise-linear through samples (``depths`` m, ``values`` kg m-3),
    constant beyond the first and last sample.

    Profile depths are non-decreasing.  A depth given twice is a step (a jump) in the
    initial state: the first of the two values is the limit from above (the segment
    ending there), the second the limit from below (the segment starting there).  The
    profile is right-continuous: its value AT the jump depth is the second (deeper)
    value.  At most two samples share a depth.  Engines put a segment or panel break
    at every sample depth, so a jump is represented exactly, not as a steep ramp.
    """

    kind: str = "clean"
    values: tuple = field(default_factory=tuple)
    depths: tuple = field(default_factory=tuple)

    def __post_init__(self):
        if self.kind not in ("clean", "uniform", "profile"):
            raise InputError(f"initial state kind {self.kind!r} is unknown; use clean, "
                             "uniform or profile")
        values = tuple(_finite(f"initial value #{i + 1}", v) for i, v in enumerate(self.values))
        depths = tuple(_finite(f"initial sample depth #{i + 1}", v)
                       for i, v in enumerate(self.depths))
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "depths", depths)
        if self.kind == "profile":
            if len(depths) != len(values) or not depths:
                raise InputError("a measured profile needs as many depths as values (at least one)")
            if any(b < a for a, b in zip(depths, depths[1:])):
                raise InputError(f"profile sample depths must not decrease, got {depths}; "
                                 "list the samples top to bottom")
            if any(a == c for a, c in zip(depths, depths[2:])):
                raise InputError(f"profile sample depths {depths}: three or more samples at "
                                 "one depth; give at most two there (the value just above "
                                 "and just below a step)")
            if depths[0] < 0:
                raise InputError(f"profile sample depth {depths[0]} m is above the column top (0 m)")

    @classmethod
    def clean(cls):
        return cls("clean")

    @classmethod
    def uniform(cls, values):
        return cls("uniform", values=tuple(np.atleast_1d(values).tolist()))

    @classmethod
    def profile(cls, depths, values):
        return cls("profile", values=tuple(values), depths=tuple(depths))

    def profile_at(self, z, side: str = "right") -> np.ndarray:
        """The measured profile at depths ``z`` (m): piecewise-linear between samples,
        constant beyond the ends.  ``side="right"`` gives the value at z (at a jump the
        deeper value: right-continuous); ``side="left"`` the limit from above."""
        if self.kind != "profile":
            raise InputError(f"profile_at needs a measured profile, not a {self.kind!r} state")
        if side not in ("left", "right"):
            raise ValueError(f"side must be 'left' or 'right', got {side!r}")
        d = np.asarray(self.depths, dtype=float)
        v = np.asarray(self.values, dtype=float)
        z = np.asarray(z, dtype=float)
        # samples lo, lo + 1 bracket z with d[lo] < d[lo + 1] (right: d[lo] <= z <
        # d[lo + 1]; left: d[lo] < z <= d[lo + 1]), so a repeated depth is never the pair
        lo = np.searchsorted(d, z, side=side) - 1
        inside = (lo >= 0) & (lo + 1 < d.size)
        i = np.clip(lo, 0, max(d.size - 2, 0))
        j = np.minimum(i + 1, d.size - 1)
        span = np.where(d[j] > d[i], d[j] - d[i], 1.0)
        lin = v[i] + (z - d[i]) / span * (v[j] - v[i])
        return np.where(inside, lin, np.where(lo < 0, v[0], v[-1]))


def has_source_zone(column: Column) -> bool:
    """Whether either end of ``column`` is a source zone of finite inventory."""
    return "source-zone" in (column.top.kind, column.bottom.kind)


def check_output_grid(column: Column, times, depths, semi_infinite_bottom: bool = False):
    """Validated 1-D float arrays of output times (s, >= 0) and depths (m, in the column)."""
    times = np.asarray(times, dtype=float).ravel()
    depths = np.asarray(depths, dtype=float).ravel()
    if times.size == 0 or depths.size == 0:
        raise InputError("give at least one output time and one output depth")
    if not (np.all(np.isfinite(times)) and np.all(np.isfinite(depths))):
        raise InputError("output times and depths must be finite numbers")
    if np.any(times < 0):
        raise InputError(f"output times must be >= 0 s, got {times.min()!r}")
    L = column.length
    if np.any(depths < 0) or (not semi_infinite_bottom and np.any(depths > L * (1 + 1e-12))):
        raise InputError(f"output depths must lie in the column [0, {L}] m"
                         + ("" if semi_infinite_bottom else
                            "; for a deep last layer use semi_infinite_bottom=True"))
    return times, depths
