"""Projected-grid stage of budget.fields: canonical coordinates of a grid with a CF grid
mapping, and its winds (or vapour fluxes) turned earth-relative (budget.gridmap).

Canonical fields on such a grid have dims (time, [level,] y, x): `y`, `x` are the native
coordinates (ascending), `lat`, `lon` the 2-D latitude and longitude of the cell centres.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..gridmap import earth_relative, wind_frame

#: Vector roles as (eastward, northward) pairs.
PAIRS = (("u", "v"), ("qu", "qv"), ("tu", "tv"))


def coords(native) -> dict:
    """The canonical coordinates of a projected grid."""
    units = native.mapping.native_units
    return {
        "y": ("y", native.y, {"units": units, "long_name": "native y coordinate of the grid mapping"}),
        "x": ("x", native.x, {"units": units, "long_name": "native x coordinate of the grid mapping"}),
        "lat": (("y", "x"), native.lat, {"units": "degrees_north", "standard_name": "latitude"}),
        "lon": (("y", "x"), native.lon, {"units": "degrees_east", "standard_name": "longitude"}),
    }


def to_earth(ds: xr.Dataset | None, raw: xr.Dataset, sources: dict, native, where: str, notes: list):
    """Vector pairs along the grid axes rotated to east and north (lazy, dask-backed)."""
    if ds is None:
        return None
    alpha = None
    for east, north in PAIRS:
        if east not in ds or north not in ds:
            continue
        frames = {wind_frame(raw[sources[k]], where) for k in (east, north) if k in sources}
        if frames != {"grid"}:
            continue
        if alpha is None:
            alpha = xr.DataArray(native.metric().alpha, dims=("y", "x"))
        attrs = (dict(ds[east].attrs), dict(ds[north].attrs))
        if ds[east].chunks is None:
            ds = ds.chunk({d: -1 for d in ("y", "x") if d in ds.dims})
        ue, vn = earth_relative(ds[east], ds[north], alpha)
        ds[east], ds[north] = ue.transpose(*ds[east].dims), vn.transpose(*ds[north].dims)
        ds[east].attrs, ds[north].attrs = attrs
        for k, a in ((east, attrs[0]), (north, attrs[1])):
            ds[k].attrs["method_detail"] = "rotated from grid-relative to earth-relative components"
        notes.append(
            f"'{sources[east]}' and '{sources[north]}' are along the grid axes; turned to east and north by the "
            f"local angle of the grid ({np.degrees(np.abs(alpha.values)).max():.1f}° at most)"
        )
    return ds
