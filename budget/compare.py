"""Datasets side by side: the same region budgeted on two or more field sets.

Each field set is budgeted on its own grid, levels and time steps (never regridded); the
results are then put on the common time axis — the time stamps every field set has — and
stacked along a ``dataset`` dimension.  The spread between field sets is reported as a range
(the smallest and largest value at each time step), which is how far the answer depends on the
choice of dataset.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from .errors import RequestError


def common_times(budgets: dict[str, xr.Dataset]) -> np.ndarray:
    """Time stamps present in every budget, ascending; a sentence when there are none."""
    names = list(budgets)
    common = None
    for name in names:
        t = np.asarray(budgets[name]["time"].values, dtype="datetime64[ns]")
        common = t if common is None else np.intersect1d(common, t)
    if common is None or common.size == 0:
        spans = "; ".join(
            f"{n}: {np.datetime_as_string(b['time'].values[0], unit='m')} to {np.datetime_as_string(b['time'].values[-1], unit='m')}"
            for n, b in budgets.items()
        )
        raise RequestError(f"The datasets share no time step ({spans}); choose field sets that cover the same period with a common step.")
    return common


def _series_only(ds: xr.Dataset, keep_dims=("time", "edge", "region")) -> xr.Dataset:
    """The variables a comparison can line up: those on time (and edge or region) only; piece
    and level profiles depend on each dataset's own levels and are left out."""
    names = [n for n, v in ds.data_vars.items() if "time" in v.dims and set(v.dims) <= set(keep_dims)]
    return ds[names]


def stack(budgets: dict[str, xr.Dataset]) -> xr.Dataset:
    """One Dataset with a ``dataset`` dimension on the common time axis."""
    if len(budgets) < 2:
        raise RequestError("A comparison needs at least two datasets (--dataset NAME=FILES, given twice or more).")
    t = common_times(budgets)
    parts = []
    for name, b in budgets.items():
        part = _series_only(b).sel(time=t)
        areas = float(b.attrs.get("region_area_m2", np.nan))
        parts.append(part.expand_dims(dataset=[name]).assign_coords(region_area_m2=("dataset", [areas])))
    out = xr.concat(parts, dim="dataset", join="outer", combine_attrs="drop_conflicts")
    first = next(iter(budgets.values()))
    out.attrs.update({k: v for k, v in first.attrs.items() if k.startswith("region") or k in ("method", "sign_convention", "Conventions")})
    out.attrs["datasets"] = json.dumps({n: json.loads(b.attrs.get("input_files", "[]")) for n, b in budgets.items()})
    out.attrs["time_axis"] = "time stamps common to every dataset; each dataset budgeted on its own grid and levels"
    return out


def spread(stacked: xr.Dataset) -> xr.Dataset:
    """Per time step and variable, the smallest and largest value across datasets and their
    difference (``<var>_min``, ``<var>_max``, ``<var>_range``) in the variable's own units."""
    out = {}
    for name, v in stacked.data_vars.items():
        lo = v.min("dataset", skipna=True)
        hi = v.max("dataset", skipna=True)
        units = v.attrs.get("units", "")
        out[f"{name}_min"] = lo.assign_attrs(units=units, long_name=f"smallest {v.attrs.get('long_name', name)} across datasets")
        out[f"{name}_max"] = hi.assign_attrs(units=units, long_name=f"largest {v.attrs.get('long_name', name)} across datasets")
        out[f"{name}_range"] = (hi - lo).assign_attrs(units=units, long_name=f"spread of {v.attrs.get('long_name', name)} across datasets")
    return xr.Dataset(out, attrs={"datasets": stacked.attrs.get("datasets", "")})
