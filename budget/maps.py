"""Gridded column fields at one time step, for maps: IVT, precipitable water, convergence.

Uses the same column integrals (vertical.py) and the same divergence operator (stencil.py)
as the regional budget, applied to every cell of the grid.

`lonlat_view` puts a snapshot of a rotated or projected grid (dims y, x with 2-D latitude and
longitude) on a regular longitude-latitude grid, for display only: bilinear interpolation in
the grid's native plane (the same weights the stencil uses), NaN outside the grid. Budgets
never read it.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .stencil import Grid
from .vertical import column_integral


def column_snapshot(fields, time_index: int) -> xr.Dataset:
    """IVT components and magnitude, precipitable water and convergence on the whole grid."""
    ds = fields.ds.isel(time=int(time_index))
    if fields.kind == "column":
        qu = np.asarray(ds["qu"].values, float)
        qv = np.asarray(ds["qv"].values, float)
        w = np.asarray(ds["w"].values, float)
    else:
        u, v, q, ps = (np.asarray(ds[k].values, float) for k in ("u", "v", "q", "ps"))
        dp = fields.vertical.thickness(ps)  # (level, lat, lon)
        qu = column_integral(q * u, dp)
        qv = column_integral(q * v, dp)
        w = column_integral(q, dp)
    grid = Grid.from_fields(fields)
    cells = np.arange(qu.size)
    du, dv = grid.divergence(cells)
    conv = -(du @ np.nan_to_num(qu).ravel() + dv @ np.nan_to_num(qv).ravel()).reshape(qu.shape)
    dims = grid.dims
    coords = {"lat": ds["lat"], "lon": ds["lon"], "time": ds["time"]}
    return xr.Dataset(
        {
            "ivt_u": (dims, qu, {"units": "kg m-1 s-1", "long_name": "eastward integrated vapour transport"}),
            "ivt_v": (dims, qv, {"units": "kg m-1 s-1", "long_name": "northward integrated vapour transport"}),
            "ivt": (dims, np.hypot(qu, qv), {"units": "kg m-1 s-1", "long_name": "integrated vapour transport magnitude"}),
            "precipitable_water": (dims, w, {"units": "kg m-2", "long_name": "precipitable water"}),
            "convergence": (dims, conv, {"units": "kg m-2 s-1", "long_name": "vapour-flux convergence"}),
        },
        coords=coords,
    )


#: Most cells of a longitude-latitude display grid (the dashboard thins larger ones anyway).
VIEW_MAX_CELLS = 250_000


def _continuous(lon: np.ndarray) -> np.ndarray:
    """2-D longitudes in one frame without a jump: within 180° of the grid's central one."""
    mid = float(lon[lon.shape[0] // 2, lon.shape[1] // 2])
    return mid + np.mod(lon - mid + 180.0, 360.0) - 180.0


def lonlat_view(snapshot: xr.Dataset, grid, max_cells: int = VIEW_MAX_CELLS) -> xr.Dataset:
    """The snapshot on a regular longitude-latitude grid (display only), dims (lat, lon).

    A snapshot already on (lat, lon) is returned unchanged. On a projected grid (a
    budget.gridmap.ProjectedGrid with dims y, x) the step is the grid's own spacing as an angle
    (coarser when the view would exceed ``max_cells``); each display point takes the bilinear
    interpolation of the native cells around it and points beyond the grid's outer cell edges
    are NaN. Vector components stay earth-relative (they already are in the fields).
    """
    if "y" not in snapshot.dims:
        return snapshot
    from .gridmap import axis_bilinear

    lon2 = _continuous(np.asarray(snapshot["lon"].values, float))
    lat2 = np.asarray(snapshot["lat"].values, float)
    lo0, lo1 = float(lon2.min()), float(lon2.max())
    la0, la1 = float(lat2.min()), float(lat2.max())
    step = max(float(grid.spacing_deg()), 1e-6)
    cells = ((lo1 - lo0) / step + 1) * ((la1 - la0) / step + 1)
    if cells > max_cells:
        step *= float(np.sqrt(cells / max_cells))
    lon = np.arange(lo0, lo1 + 0.5 * step, step)
    lat = np.arange(la0, la1 + 0.5 * step, step)
    LON, LAT = np.meshgrid(lon, lat)
    px, py = grid.to_native(LON.ravel(), LAT.ravel())
    px, py = np.asarray(px, float), np.asarray(py, float)
    hx, hy = 0.5 * abs(grid.dx), 0.5 * abs(grid.dy)
    inside = (
        np.isfinite(px) & np.isfinite(py)
        & (px >= grid.x[0] - hx) & (px <= grid.x[-1] + hx) & (py >= grid.y[0] - hy) & (py <= grid.y[-1] + hy)
    )
    idx, w = axis_bilinear(grid.x, grid.y, px[inside], py[inside])
    out = {}
    for name, var in snapshot.data_vars.items():
        flat = np.asarray(var.values, float).ravel()
        vals = np.full(LON.size, np.nan)
        vals[inside] = (flat[idx] * w).sum(axis=1)
        attrs = dict(var.attrs, display_regrid="bilinear in the native plane of the grid mapping, for display only")
        out[name] = (("lat", "lon"), vals.reshape(LON.shape), attrs)
    coords = {
        "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
        "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
    }
    if "time" in snapshot.coords:
        coords["time"] = snapshot["time"]
    return xr.Dataset(out, coords=coords, attrs={"regridded_from": grid.extent_text()})


def display_snapshot(fields, time_index: int) -> xr.Dataset:
    """`column_snapshot` on a longitude-latitude grid for pictures (the dashboard's map, the
    report figures): unchanged on lon-lat grids, `lonlat_view` on rotated and projected ones."""
    return lonlat_view(column_snapshot(fields, time_index), Grid.from_fields(fields))
