"""Gridded column fields at one time step, for maps: IVT, precipitable water, convergence.

Uses the same column integrals (vertical.py) and the same divergence operator (stencil.py)
as the regional budget, applied to every cell of the grid.
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
