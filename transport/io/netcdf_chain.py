"""The CF file of a decay-chain run: every species on one (species, time, depth) grid.

Each species' dataset is built as for a single run (:func:`column_dataset`) and the
datasets are joined along a ``species`` dimension (xarray ``concat``): every data variable
is per species; the coordinates (time, depth, layer) are shared.
The species dimension has an integer coordinate ``species`` (1 = parent) and the names in
the string auxiliary coordinate ``species_name`` (CF 1.11, sec. 6.1.2 string-valued
auxiliary coordinates; a variable-length string in NETCDF4).
"""
from __future__ import annotations

import numpy as np
import xarray as xr

from transport.io.netcdf import column_dataset, write_dataset_atomic

__all__ = ["chain_dataset", "write_chain_netcdf", "SHARED"]

#: Variables every species shares: kept without the species dimension.
SHARED = ("depth_bnds", "layer_name", "layer_top", "layer_bottom", "water_content",
          "porosity", "darcy_flux", "receptor_depth")


def chain_dataset(solutions, names, *, title: str, yields, screening_levels=None,
                  receptor_depth=None, metrics=None, metrics_notes=None,
                  **kwargs) -> xr.Dataset:
    """The CF dataset of a chain run: ``solutions`` and ``names`` parent first,
    ``yields`` (kg/kg, 0 for the parent), ``screening_levels``, ``metrics`` and
    ``metrics_notes`` (why a species' metrics are not written: the global attribute
    ``receptor_metrics``) one per species (None where absent); other keywords as
    :func:`column_dataset`."""
    n = len(solutions)
    levels = list(screening_levels or [None] * n)
    views = list(metrics or [None] * n)
    parts = []
    for sol, name, level, view in zip(solutions, names, levels, views):
        ds = column_dataset(sol, title=title, screening_level=level,
                            receptor_depth=receptor_depth, metrics=view, **kwargs)
        if "screening_level" not in ds and any(v is not None for v in levels):
            ds["screening_level"] = xr.DataArray(float("nan"), attrs={
                "long_name": "screening level used to read the receptor curve (none given "
                             "for this species)", "units": "kg m-3"})
        parts.append(ds)
    # every data variable gets the species dimension (layer properties differ between
    # species too), so a variable's shape never depends on whether two species agree
    joined = xr.concat(parts, dim="species", data_vars="all", coords="minimal",
                       compat="override", combine_attrs="override")
    # what every species shares (geometry, flow, the receptor) is kept once, so CF bounds
    # keep the dimensions of their coordinate
    for name in SHARED:
        if name in joined and "species" in joined[name].dims:
            joined[name] = joined[name].isel(species=0, drop=True)
    joined = joined.assign_coords(
        species=("species", np.arange(1, n + 1, dtype=np.int32),
                 {"long_name": "species index in the decay chain, 1 = parent"}),
        species_name=("species", [str(x) for x in names],
                      {"long_name": "species of the decay chain, parent first"}))
    joined["decay_yield"] = xr.DataArray(
        [float(y) for y in yields], dims=("species",),
        attrs={"long_name": "mass of this species formed per mass of the previous species "
                            "decayed (0 for the parent)", "units": "1"})
    chain_text = " -> ".join(str(x) for x in names)
    joined.attrs["summary"] = (parts[0].attrs.get("summary", "") + f" Decay chain: "
                               f"{chain_text}; each daughter is produced by its parent's "
                               "decay (variable decay_yield); its mass budget counts that "
                               "gain as produced.")
    joined.attrs["decay_chain"] = chain_text
    notes = [f"{name}: {note}" for name, note in zip(names, metrics_notes or ()) if note]
    if notes:
        joined.attrs["receptor_metrics"] = " ".join(notes)
    return joined


def write_chain_netcdf(solutions, names, path, *, stage=None, **kwargs) -> str:
    """Build :func:`chain_dataset` and write it atomically (as a single run's file)."""
    return write_dataset_atomic(chain_dataset(solutions, names, **kwargs), path, stage=stage)
