"""`open_fields`: gridded input to canonical, lazy, SI `Fields`, as a short list of stages.

    open      budget.fields.opening   paths → raw dataset (format table; files reconciled)
    grid      budget.fields.grid      latitude, longitude, time; the canonical orientation
    roles     budget.fields.roles     which variable plays which role (budget.catalogue)
    levels    budget.fields.levels    pressure or hybrid sigma-pressure levels, top first
    units     budget.fields.convert   canonical variables in SI (each file's own units)
    orient    (here)                  lat ascending, lon ascending, levels top first
    times     budget.fields.times     decoded, sorted, windowed, chunked
    humidity  budget.fields.moisture  q from another humidity form, when needed
    checks    budget.fields.checks    a cheap sample against wrong unit labels

Nothing here loads the data: orientation changes are lazy ``isel`` and unit conversions are
arithmetic on dask arrays.  Every problem the user can fix is a `budget.errors.FieldsError`
with one sentence naming the variable, the file and the fix.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from .. import humidity
from ..catalogue import COLUMN_ROLES, LEVEL_ROLES
from ..errors import RequestError
from ..vertical import PressureLevels
from . import checks, convert, gridwinds, moisture, opening, roles, times
from .grid import Orientation, find_grid, indexer, orientation
from .levels import Levels, read_levels
from .model import Fields


@dataclass(frozen=True)
class Request:
    """What the caller asked for (see `open_fields`)."""

    var_map: dict
    units: dict
    start: object = None
    end: object = None
    chunks: object = None
    rh_reference: str | None = None


def open_fields(paths, var_map: dict | None = None, units: dict | None = None,
                start=None, end=None, chunks=None, rh_reference: str | None = None) -> Fields:
    """Open gridded input and return canonical `Fields` (lazy; only a small sample is read).

    paths:   a NetCDF file, a glob, a list of files, a Zarr store directory, or an open
             xarray.Dataset.
    var_map: {role: variable name}, overriding detection; roles in budget.catalogue
             (u, v, q, ps, qu, qv, w, the optional ones, and the humidity forms mr, rh, td,
             vp with t).
    units:   {role or variable name: unit}, overriding a missing or wrong units attribute;
             also "level" (pressure levels), "p0" and "ap" (hybrid coefficients).
    start, end: ISO 8601 times bounding the window (inclusive).
    chunks:  dask chunks passed to xarray; by default about 64 MiB per chunk, split in time.
    rh_reference: what relative humidity is relative to when q is derived from it: "water",
             "ice" (below 0 degC) or "mixed" (the ECMWF IFS blend, as ERA5's r is defined);
             None reads the variable's attributes (ice when they say so, else water).
    """
    if rh_reference is not None and rh_reference not in humidity.RH_REFERENCES:
        raise RequestError(
            f"The relative-humidity reference {rh_reference!r} is not known; choose one of "
            f"{', '.join(humidity.RH_REFERENCES)} (--rh-reference)."
        )
    req = Request(dict(var_map or {}), dict(units or {}), start, end, chunks, rh_reference)
    src = opening.open_source(paths, req.chunks)                              # open
    raw, where, notes = src.ds, src.where, list(src.notes)
    g = find_grid(raw, where)                                                 # grid
    choice = roles.choose_roles(raw, g, req.var_map, req.units, where)        # roles
    lev = (read_levels(raw, choice.vdim, choice.found["u"], req.units, where)  # levels
           if choice.kind == "levels" else None)
    extra = roles.optional_roles(
        raw, choice, req.var_map, g, where, notes,
        lambda key, name: None if key in convert.RAW_UNITS
        else convert.conversion(key, name, raw[name], req.units, where))
    canon = convert.canonical(raw, g, choice, extra, req.units, where,      # units
                              defer=src.deferred is not None)
    orient = orientation(raw, g, where)
    notes += (lev.notes if lev else []) + canon.notes + orient.notes
    ds, column_ds = (_orient(d, orient, lev, choice.vdim) for d in (canon.ds, canon.column_ds))
    ds, column_ds, tvals = _times(raw, g, ds, column_ds, src, canon, req, where, notes)  # times
    if orient.native is not None:                                             # winds
        ds, column_ds = (gridwinds.to_earth(d, raw, {**choice.found, **choice.column}, orient.native, where, notes)
                         for d in (ds, column_ds))
    derived = {}
    if choice.humidity:                                                       # humidity
        checks.humidity_forms(ds, choice.humidity, where)
        phase = _rh_phase(raw, choice.humidity, req.rh_reference)
        ds, derived["q"] = moisture.derive_q(ds, choice.humidity, lev.vertical, phase)
    if req.rh_reference is not None and "rh" not in choice.humidity:
        notes.append(f"The relative-humidity reference '{req.rh_reference}' has no effect: {where} "
                     "gives humidity in another form than relative humidity.")
    found = dict(choice.found)
    if choice.humidity:
        found["q"] = "+".join(choice.humidity.values())
    ds.attrs = {"kind": choice.kind, "input_files": "; ".join(src.files),
                "roles": ", ".join(f"{r}={s}" for r, s in found.items())}
    if column_ds is not None:
        column_ds.attrs = {"kind": "column", "input_files": "; ".join(src.files)}
    checks.plausible(ds, found, where)                                        # checks
    needed = LEVEL_ROLES if choice.kind == "levels" else COLUMN_ROLES
    return Fields(
        ds=ds, kind=choice.kind, vertical=lev.vertical if lev else None,
        roles={r: found[r] for r in needed}, files=list(src.files), periodic=orient.periodic,
        lat=np.asarray(ds["lat"].values), lon=np.asarray(ds["lon"].values),
        times=np.asarray(ds["time"].values).astype("datetime64[ns]"), warnings=notes,
        column_ds=column_ds, column_roles=canon.column_roles, extra_roles=canon.extra_roles,
        derived=derived, native_grid=orient.native,
    )


def _orient(d: xr.Dataset | None, o: Orientation, lev: Levels | None, vdim) -> xr.Dataset | None:
    """The orient stage: canonical order and coordinates of one canonical dataset."""
    if d is None:
        return None
    isel = dict(o.isel)
    if lev is not None and not np.array_equal(lev.order, np.arange(lev.order.size)):
        isel["level"] = lev.order
    if isel:
        d = d.isel({k: indexer(v) for k, v in isel.items() if k in d.dims})
    coords = gridwinds.coords(o.native) if o.native is not None else {
        "lat": ("lat", o.lat, {"units": "degrees_north", "standard_name": "latitude",
                               "long_name": "latitude"}),
        "lon": ("lon", o.lon, {"units": "degrees_east", "standard_name": "longitude",
                               "long_name": "longitude"}),
    }
    if "level" in d.dims:
        if isinstance(lev.vertical, PressureLevels):
            coords["level"] = ("level", np.asarray(lev.vertical.p, float), {
                "units": "Pa", "standard_name": "air_pressure",
                "long_name": "pressure level", "positive": "down"})
        else:
            coords["level"] = ("level", np.asarray(lev.values), {
                "long_name": f"hybrid sigma-pressure level (values of '{vdim}')",
                "positive": "down"})
    return d.assign_coords(coords)


def _times(raw, g, ds, column_ds, src, canon, req: Request, where, notes):
    """The times stage: a time axis (decoded, sorted), the window, then dask chunks."""
    deferred = src.deferred
    pair = [ds, column_ds]
    if g.time_dim is None:
        tvals = times.single_time(raw, where, notes)
        if deferred is not None:
            pair = [convert.apply_deferred(d, {}, canon.deferred) for d in pair]
            deferred = None
        pair = [d.expand_dims(time=tvals) if d is not None else None for d in pair]
    else:
        tvals, order = times.sorted_times(raw, g.time_dim, where, notes)
        tattrs = {"long_name": "time", "standard_name": "time"}
        pair = [d.assign_coords(time=("time", tvals, tattrs if i == 0 else {}))
                if d is not None else None for i, d in enumerate(pair)]
        if order is not None:
            pair = [d.isel(time=order) if d is not None else None for d in pair]
            tvals = tvals[order]
    for d in pair:
        if d is not None:
            for r in d.data_vars:
                d[r] = d[r].transpose(*[x for x in convert.CANONICAL_ORDER if x in d[r].dims])
    if req.start is not None or req.end is not None:
        idx = times.window_index(tvals, req.start, req.end, where)
        pair = [d.isel(time=idx) if d is not None else None for d in pair]
        tvals = tvals[idx]
    if deferred is not None:
        n = next(iter(deferred.values()), None)
        tchunks = {"time": int(n)} if n and "time" in pair[0].dims else {}
        pair = [convert.apply_deferred(d, tchunks, canon.deferred) for d in pair]
    return pair[0], pair[1], tvals


def _rh_phase(raw, forms: dict, asked: str | None) -> str:
    """The saturation reference of relative humidity: the caller's, else the variable's own
    attributes (budget.humidity.phase_of), else water."""
    if "rh" not in forms:
        return "water"
    return asked if asked is not None else humidity.phase_of(raw[forms["rh"]].attrs)
