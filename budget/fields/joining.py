"""Several NetCDF files joined into one raw dataset (part of the opening stage).

Each file is compared with the first before the join: its grid and levels (every index
coordinate but time) and its calendar must match, and a data variable whose unit differs is
put into the first file's unit using that file's own attribute (budget.units).  Whatever
cannot be reconciled is refused in one sentence naming both files.
"""

from __future__ import annotations

import os
import warnings as _warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..errors import FieldsError
from ..units import normalise, same_quantity
from .grid import LAT_NAMES, LON_NAMES, guess_time_dim
from .hints import short


@dataclass(frozen=True)
class Signature:
    """What the first file fixes for the others: index coordinates, units, calendar."""

    path: str
    time_dim: str | None
    coords: dict  # {dim: values} of every index coordinate but time
    units: dict  # {data variable: units attribute}
    calendar: str | None

    @classmethod
    def of(cls, path: str, ds: xr.Dataset) -> "Signature":
        tdim = guess_time_dim(ds)
        coords = {d: np.asarray(ds[d].values) for d in ds.dims if d != tdim and d in ds.variables}
        units = {n: str(v.attrs["units"]) for n, v in ds.data_vars.items() if "units" in v.attrs}
        return cls(path, tdim, coords, units, _calendar(ds, tdim))


def _calendar(ds: xr.Dataset, tdim) -> str | None:
    if tdim is None or tdim not in ds.variables:
        return None
    cal = ds[tdim].encoding.get("calendar") or ds[tdim].attrs.get("calendar")
    return {"gregorian": "standard"}.get(str(cal).lower(), str(cal).lower()) if cal else "standard"


def _compare(ref: Signature, path: str, ds: xr.Dataset) -> None:
    """Refuse, naming both files, what cannot be reconciled."""
    both = f"'{ref.path}' and '{path}'"
    for dim, values in ref.coords.items():
        what = ("latitudes" if dim in LAT_NAMES else "longitudes" if dim in LON_NAMES
                else f"'{dim}' coordinates")
        if dim not in ds.dims:  # files may hold different variables (levels apart from ps)
            continue
        other = np.asarray(ds[dim].values) if dim in ds.variables else None
        same = other is not None and other.shape == values.shape and (
            np.array_equal(other, values) if other.dtype.kind not in "fc"
            else np.allclose(other, values, rtol=1e-9, atol=1e-9))
        if not same:
            raise FieldsError(
                f"The files {both} disagree in their {what} (the grid or levels differ); "
                "give files on one grid with the same levels, or regrid one of them first."
            )
    cal = _calendar(ds, ref.time_dim) if ref.time_dim in ds.dims else None
    if ref.calendar and cal and cal != ref.calendar:
        raise FieldsError(
            f"The files {both} use different calendars ('{ref.calendar}' and '{cal}'); "
            "convert them to one calendar first (for example with xarray's convert_calendar)."
        )


def _same_units(ref: Signature, path: str, ds: xr.Dataset, notes: list) -> xr.Dataset:
    """Put each data variable of ``ds`` into the first file's unit, from its own attribute."""
    for name, var in list(ds.data_vars.items()):
        mine, theirs = var.attrs.get("units"), ref.units.get(name)
        if mine is None or theirs is None or normalise(mine) == normalise(theirs):
            continue  # only in one file, or unlabelled: the roles stage judges it
        q = same_quantity(mine, theirs)
        if q is None:
            raise FieldsError(
                f"Variable '{name}' has units '{theirs}' in '{ref.path}' but '{mine}' in "
                f"'{path}', which Fluxfence cannot reconcile; give the files one unit for it "
                "(or correct the wrong units attribute)."
            )
        _dim, scale_mine, scale_ref = q
        attrs = dict(var.attrs, units=theirs)
        ds[name] = var * (scale_mine / scale_ref)
        ds[name].attrs = attrs
        notes.append(f"'{name}' in '{path}' was in '{mine}' and was converted to '{theirs}' "
                     f"as in '{ref.path}'")
    return ds


def open_many(files: list, chunks, plain, time_chunks, space_tiles):
    """(dataset, notes) of several files joined by coordinates, each checked against the first.
    ``plain``, ``time_chunks`` and ``space_tiles`` are the opening stage's helpers."""
    first = plain(files[0])
    try:
        ref = Signature.of(files[0], first)
        if chunks is None:
            # several files are joined by dask, and slices do not reach the file reader
            # through the join; tiled chunks let dask compute only the tiles a region touches
            chunks = {**time_chunks(first), **space_tiles(first)}
    finally:
        first.close()
    notes: list = []

    given = {os.path.realpath(f): f for f in files}

    def each(ds: xr.Dataset) -> xr.Dataset:
        source = ds.encoding.get("source")
        path = given.get(os.path.realpath(source), source) if source else None
        if path is None or path == files[0]:
            return ds
        _compare(ref, path, ds)
        return _same_units(ref, path, ds, notes)

    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            ds = xr.open_mfdataset(
                files, combine="by_coords", chunks=chunks, parallel=False,
                data_vars="minimal", coords="minimal", compat="override",
                join="exact", preprocess=each,
            )
    except FieldsError:
        raise
    except Exception as exc:  # noqa: BLE001
        for f in files:  # name the unreadable file when there is one
            plain(f).close()
        raise FieldsError(
            f"Cannot combine the {len(files)} files starting with '{files[0]}' "
            f"({short(exc)}); they must share one grid and levels and must not overlap "
            "in time."
        ) from None
    return ds, notes
