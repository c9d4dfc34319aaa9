"""Opening stage of budget.fields: paths (a file, a glob, a list, a Zarr store or an open
xarray.Dataset) become one raw, lazy xarray.Dataset.

Formats sit in one table, `FORMATS`: each row says which paths it claims and how to open
them.  Adding a format is one opener function and one row; everything after this stage is
format-independent.

Several files are joined by coordinates.  Each file's own attributes count: a variable whose
unit differs between files (kg/kg and g/kg, Pa and hPa, m/s and knots) is put into the first
file's unit, file by file, before the join.  Files that cannot be joined (different grid,
levels or calendar, or units of different quantities) are refused naming both files.
"""

from __future__ import annotations

import glob as _glob
import os
import warnings as _warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import xarray as xr

from ..errors import FieldsError
from ..grib import SUFFIXES as GRIB_SUFFIXES, is_grib
from .grid import LAT_NAMES, LON_NAMES, guess_time_dim
from . import joining
from .hints import short, where as where_text

#: Target size of one dask chunk when Fluxfence picks the time chunking itself.
CHUNK_BYTES = 64 * 2**20
#: Horizontal tile (grid cells) of the dask chunks of multi-file inputs.
TILE = 128


@dataclass
class Source:
    """The opening stage's result.

    ds:       the raw dataset (lazy; dask-backed unless ``deferred``)
    files:    the paths read
    deferred: dask chunks to apply after orientation and windowing (one plain file), or None
    notes:    what was done to reconcile the files (unit conversions per file)
    """

    ds: xr.Dataset
    files: list
    deferred: dict | None = None
    notes: list = field(default_factory=list)

    @property
    def where(self) -> str:
        return where_text(self.files)


@dataclass(frozen=True)
class Format:
    """One row of the format table: a name, which paths it claims, how to open them, and the
    file name endings by which a folder listing (the dashboard's --data-dir) finds them."""

    name: str
    claims: Callable[[list], bool]
    open: Callable[[list, object], Source]
    suffixes: tuple = ()


def is_zarr(path: str) -> bool:
    p = Path(path)
    if not p.is_dir():
        return False
    if p.suffix == ".zarr":
        return True
    return any((p / m).exists() for m in (".zgroup", ".zarray", ".zmetadata", "zarr.json"))


def expand_paths(paths) -> list[str]:
    if isinstance(paths, (str, os.PathLike)):
        items = [paths]
    else:
        try:
            items = list(paths)
        except TypeError:
            raise FieldsError(
                f"Cannot open {paths!r}: give a file path, a glob such as 'data/*.nc', "
                "a list of paths, a Zarr store directory or an xarray.Dataset."
            ) from None
    if not items:
        raise FieldsError("No input files were given; pass at least one NetCDF file or Zarr store.")
    out: list[str] = []
    for item in items:
        s = os.fspath(item)
        if os.path.exists(s):
            out.append(s)
        elif any(c in s for c in "*?["):
            hits = sorted(_glob.glob(s))
            if not hits:
                raise FieldsError(
                    f"The pattern '{s}' matches no files; check the directory and the pattern."
                )
            out.extend(hits)
        else:
            raise FieldsError(f"The input file '{s}' does not exist; check the path.")
    for s in out:
        if os.path.isdir(s) and not is_zarr(s):
            raise FieldsError(
                f"'{s}' is a directory but not a Zarr store; pass the files inside it, "
                f"e.g. '{os.path.join(s, '*.nc')}'."
            )
    if len(out) > 1 and any(is_zarr(s) for s in out):
        raise FieldsError(
            "Give either one Zarr store or NetCDF files, not a mixture: " + ", ".join(out) + "."
        )
    return out


def open_plain(path: str) -> xr.Dataset:
    """One file opened without dask (for its metadata), or one sentence naming it."""
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            return xr.open_dataset(path)
    except Exception as exc:  # noqa: BLE001 - any reader failure is the user's file
        raise FieldsError(
            f"Cannot read '{path}' as NetCDF ({short(exc)}); check that it is a complete "
            "NetCDF or HDF5 file."
        ) from None


def time_chunks(ds: xr.Dataset) -> dict:
    """Chunks {time_dim: n} so that one chunk of the largest variable is about 64 MiB."""
    tname = guess_time_dim(ds)
    if tname is None:
        return {}
    nt = ds.sizes[tname]
    step = 1
    stored = 1
    for var in ds.data_vars.values():
        if tname in var.dims and nt:
            step = max(step, int(var.size * var.dtype.itemsize // max(nt, 1)))
            cs = var.encoding.get("chunksizes")
            if cs:
                stored = max(stored, int(cs[var.dims.index(tname)]))
    n = max(1, CHUNK_BYTES // step)
    n = max(stored, (n // stored) * stored)
    return {tname: int(n)}


def space_tiles(ds: xr.Dataset) -> dict:
    """{lat_dim: TILE, lon_dim: TILE} for horizontal dims longer than a tile."""
    return {name: TILE for name in LAT_NAMES + LON_NAMES if name in ds.dims and ds.sizes[name] > TILE}


# --------------------------------------------------------------------------------------
# the formats


def _open_dataset_object(ds: xr.Dataset, chunks) -> Source:
    if chunks is not None:
        ds = ds.chunk(chunks)
    src = ds.encoding.get("source")
    return Source(ds, [str(src)] if src else [])


def _open_zarr(files: list, chunks) -> Source:
    try:
        kwargs = {} if chunks is None else {"chunks": chunks}
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            ds = xr.open_zarr(files[0], **kwargs)
    except Exception as exc:  # noqa: BLE001
        raise FieldsError(
            f"Cannot read the Zarr store '{files[0]}' ({short(exc)}); check that it is a "
            "complete Zarr store."
        ) from None
    return Source(ds, files)


def _open_netcdf_one(files: list, chunks) -> Source:
    path = files[0]
    deferred = None
    if chunks is None:
        first = open_plain(path)
        try:
            deferred = time_chunks(first)
        finally:
            first.close()
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            # Without dask first: xarray composes every later isel (orientation, time
            # window) into one lazy read, and open_fields chunks at the end. Chunking here
            # would put those isel as extra layers on the dask arrays, and dask then
            # loads whole chunks instead of the few cells a region reads.
            ds = xr.open_dataset(path, chunks=None if deferred is not None else chunks)
    except Exception as exc:  # noqa: BLE001
        raise FieldsError(
            f"Cannot read '{path}' as NetCDF ({short(exc)}); check that it is a "
            "complete NetCDF or HDF5 file."
        ) from None
    return Source(ds, files, deferred)


#: The format table, tried in order; the first row that claims the paths opens them.
#: (An xarray.Dataset given directly is handled before the table.)
NETCDF_SUFFIXES = (".nc", ".nc4", ".netcdf")
FORMATS: list[Format] = [
    Format("grib", lambda files: any(is_grib(f) for f in files), lambda files, chunks: open_grib_files(files, chunks),
           GRIB_SUFFIXES),
    Format("zarr", lambda files: len(files) == 1 and is_zarr(files[0]), _open_zarr, (".zarr",)),
    Format("netcdf", lambda files: len(files) == 1, _open_netcdf_one, NETCDF_SUFFIXES),
    Format("netcdf-many", lambda files: len(files) > 1, lambda files, chunks: open_many(files, chunks), NETCDF_SUFFIXES),
]
#: Every file name ending a format of the table claims (lower case), in the table's order.
FIELD_SUFFIXES: tuple = tuple(dict.fromkeys(s for fmt in FORMATS for s in fmt.suffixes))


def open_source(paths, chunks=None) -> Source:
    """The opening stage: the raw dataset and the files behind it."""
    if isinstance(paths, xr.Dataset):
        return _open_dataset_object(paths, chunks)
    files = expand_paths(paths)
    for fmt in FORMATS:
        if fmt.claims(files):
            return fmt.open(files, chunks)
    raise FieldsError(f"No reader accepts {where_text(files)}; give NetCDF files or a Zarr store.")


def open_grib_files(files: list, chunks) -> Source:
    """GRIB files (budget.grib), with any NetCDF files of the same grid beside them (e.g. a
    surface-pressure file next to GRIB levels), joined by coordinates."""
    from ..grib import join_inputs, open_grib

    parts, notes = [], []
    for f in files:
        if is_grib(f):
            g = open_grib(f)
            parts.append((f, g.ds))
            notes += g.warnings
        else:
            parts.append((f, open_plain(f)))
    ds = join_inputs(parts, where_text(files))
    return Source(ds.chunk(chunks) if chunks is not None else ds, files, None, notes)


def open_many(files: list, chunks) -> Source:
    """Several NetCDF files joined by coordinates (budget.fields.joining)."""
    ds, notes = joining.open_many(files, chunks, open_plain, time_chunks, space_tiles)
    return Source(ds, files, None, notes)
