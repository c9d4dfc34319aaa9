"""Grid stage of budget.fields: find the time, latitude and longitude of a raw dataset and
the orientation that makes latitude ascending and longitude ascending in one continuous frame
(regular longitude-latitude grids; the selections are lazy ``isel``)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import FieldsError
from ..gridmap import ProjectedGrid, find_mapping
from ..units import normalise
from .model import spacing

TIME_NAMES = ("time", "valid_time", "Time", "t", "date", "times", "TIME")
LAT_NAMES = ("lat", "latitude", "Latitude", "LAT", "y")
LON_NAMES = ("lon", "longitude", "Longitude", "LON", "x")
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}


@dataclass(frozen=True)
class GridDims:
    """Names in the raw dataset: coordinate variables and their dims (time may be absent)."""

    lat_name: str
    lon_name: str
    lat_dim: str
    lon_dim: str
    time_dim: str | None
    mapping: object = None  # budget.gridmap.GridMapping of a projected grid, else None

    @property
    def canon(self) -> tuple:
        """Canonical names of the row and column dims: (lat, lon), or (y, x) when projected."""
        return ("y", "x") if self.mapping is not None else ("lat", "lon")

    @property
    def hdims(self) -> set:
        """The dims that are not vertical: time (if any), latitude, longitude."""
        return {d for d in (self.time_dim, self.lat_dim, self.lon_dim) if d is not None}


def find_grid(raw: xr.Dataset, where: str) -> GridDims:
    """The grid stage's first half: which variables are latitude, longitude and time."""
    lat_name = find_horizontal(raw, "lat", where)
    lon_name = find_horizontal(raw, "lon", where)
    if raw[lat_name].ndim == 2:  # a projected grid: budget.gridmap
        ydim, xdim = raw[lat_name].dims
        return GridDims(lat_name, lon_name, ydim, xdim, guess_time_dim(raw), find_mapping(raw, where))
    return GridDims(lat_name, lon_name, raw[lat_name].dims[0], raw[lon_name].dims[0],
                    guess_time_dim(raw))


@dataclass
class Orientation:
    """Canonical lat/lon values and the index arrays (by canonical dim) that produce them."""

    lat: np.ndarray
    lon: np.ndarray
    isel: dict
    notes: list = field(default_factory=list)
    native: object = None  # budget.gridmap.ProjectedGrid on projected grids

    @property
    def periodic(self) -> bool:
        if self.native is not None:
            return False
        step = spacing(self.lon)
        return bool(self.lon.size > 1 and abs(self.lon.size * step - 360.0) <= 0.1 * step)


def orientation(raw: xr.Dataset, g: GridDims, where: str) -> Orientation:
    """The grid stage's second half: check the coordinates, find the canonical order."""
    if g.mapping is not None:
        return projected_orientation(raw, g, where)
    lat = np.asarray(raw[g.lat_name].values, dtype=float)
    lon = np.asarray(raw[g.lon_name].values, dtype=float)
    if lat.size > 1 and not (np.all(np.diff(lat) > 0) or np.all(np.diff(lat) < 0)):
        raise FieldsError(
            f"The latitudes '{g.lat_name}' in {where} are not strictly ascending or descending; "
            "store each latitude once, in order."
        )
    if np.nanmin(lat) < -90.0001 or np.nanmax(lat) > 90.0001:
        raise FieldsError(
            f"The latitudes '{g.lat_name}' in {where} run outside -90..90 degrees; check that "
            "this coordinate really is latitude."
        )
    isel, notes = {}, []
    if lat.size > 1 and lat[0] > lat[-1]:
        isel["lat"] = np.arange(lat.size)[::-1]
        lat = lat[::-1]
    lon_idx, lon = orient_lon(lon, where)
    if lon.size > 2:
        step = spacing(lon)
        if abs((lon[-1] - lon[0]) - 360.0) <= 0.1 * step:  # a repeated cyclic column
            lon_idx, lon = lon_idx[:-1], lon[:-1]
            notes.append(
                f"longitude {lon[0] + 360.0:g} repeats {lon[0]:g} (a cyclic column); "
                "the repeated column was dropped"
            )
    if not np.array_equal(lon_idx, np.arange(raw[g.lon_name].size)):
        isel["lon"] = lon_idx
    return Orientation(lat, lon, isel, notes)


def projected_orientation(raw: xr.Dataset, g: GridDims, where: str) -> Orientation:
    """A projected grid: native x, y found from the 2-D coordinates, ascending (budget.gridmap)."""
    lon2d = raw[g.lon_name].transpose(g.lat_dim, g.lon_dim).values
    lat2d = raw[g.lat_name].transpose(g.lat_dim, g.lon_dim).values
    grid, flip_y, flip_x = ProjectedGrid.from_latlon(g.mapping, lon2d, lat2d, where)
    isel = {}
    if flip_y:
        isel["y"] = np.arange(grid.y.size)[::-1]
    if flip_x:
        isel["x"] = np.arange(grid.x.size)[::-1]
    return Orientation(grid.lat, grid.lon, isel, [], native=grid)


def guess_time_dim(ds: xr.Dataset) -> str | None:
    for name, var in ds.variables.items():
        if var.ndim == 1 and var.dims[0] == name:
            if var.attrs.get("standard_name") == "time" or var.attrs.get("axis") == "T":
                return name
            if np.issubdtype(var.dtype, np.datetime64):
                return name
    for name in TIME_NAMES:
        if name in ds.dims:
            return name
    for name, var in ds.variables.items():
        if var.ndim == 1 and var.dims[0] == name and var.dtype == object:
            try:
                import cftime

                if isinstance(var.values[0], cftime.datetime):
                    return name
            except Exception:  # noqa: BLE001
                pass
    return None


def find_horizontal(ds: xr.Dataset, axis: str, where: str) -> str:
    std = "latitude" if axis == "lat" else "longitude"
    units = _LAT_UNITS if axis == "lat" else _LON_UNITS
    names = LAT_NAMES if axis == "lat" else LON_NAMES
    cands = [n for n in ds.coords] + [n for n in ds.data_vars]
    chosen = None
    for n in cands:
        if ds[n].attrs.get("standard_name") == std:
            chosen = n
            break
    if chosen is None:
        for n in cands:
            if normalise(ds[n].attrs.get("units", "")) in units:
                chosen = n
                break
    if chosen is None:
        for n in names:
            if n in ds.variables:
                u = normalise(ds[n].attrs.get("units", ""))
                if n in ("x", "y") and u and u not in units and not u.startswith("degree"):
                    continue
                chosen = n
                break
    if chosen is None:
        raise FieldsError(
            f"No {std} coordinate found in {where} (looked for standard_name '{std}', "
            f"units '{sorted(units)[0]}' or a coordinate named "
            f"{', '.join(names)}); Fluxfence needs a regular longitude-latitude grid."
        )
    var = ds[chosen]
    if var.ndim == 2 and find_mapping(ds, where) is not None:
        return chosen
    if var.ndim != 1:
        raise FieldsError(
            f"The {std} coordinate '{chosen}' in {where} is {var.ndim}-dimensional "
            "(a curvilinear or projected grid); regrid the fields to a regular "
            "longitude-latitude grid first."
        )
    return chosen


def orient_lon(lon: np.ndarray, where: str) -> tuple[np.ndarray, np.ndarray]:
    """Return (index, new_lon): an ascending order of the longitudes in a continuous frame."""
    n = lon.size
    if n == 1:
        return np.arange(1), lon.astype(float)
    d = np.diff(lon)
    if np.all(d > 0):
        return np.arange(n), lon.astype(float)
    if np.all(d < 0):
        idx = np.arange(n)[::-1]
        return idx, lon[idx].astype(float)
    # one seam, e.g. [180..359, 0..179] (global, rolled) or [170, 175, -180, -175] (regional)
    order = np.argsort(lon, kind="stable")
    s = lon[order]
    if np.any(np.diff(s) == 0):
        raise FieldsError(
            f"The longitudes in {where} repeat a value; each longitude must appear once."
        )
    drops = np.nonzero(d < 0)[0]
    if len(drops) == 1 and np.all(d[d > 0] > 0) and abs(d[drops[0]]) > 180:
        k = drops[0] + 1
        unwrapped = np.concatenate([lon[:k], lon[k:] + 360.0]).astype(float)
        spacing = float(np.median(np.diff(unwrapped)))
        if abs(n * spacing - 360.0) <= 0.1 * spacing:  # global: sort in the file's frame
            return order, s.astype(float)
        return np.arange(n), unwrapped  # regional across the seam: continuous frame
    raise FieldsError(
        f"The longitudes in {where} are neither ascending nor descending; "
        "store them in order."
    )


def indexer(order: np.ndarray):
    """Reversals and prefixes become slices (cheapest for dask); else the index array."""
    n = order.size
    if n and np.array_equal(order, np.arange(order[0], order[0] - n, -1)) and order[-1] == 0:
        return slice(order[0], None, -1)
    if n and np.array_equal(order, np.arange(n)):
        return slice(0, n)
    return order
