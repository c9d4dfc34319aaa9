"""CSV and NetCDF writers for a budget Dataset.

Columns, units and CF names come from the term catalogue (budget/terms.py). Files are written
by budget.outputs: a temporary file beside the target, renamed into place only when complete,
so an existing output is never left half-written.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from . import terms
from .errors import RequestError
from .outputs import atomic_write

#: CSV columns after `time`: (column name, Dataset variable, display unit), read from the term
#: catalogue (budget/terms.py); a variable missing from the Dataset is skipped.
CSV_COLUMNS = [(c.name, t.name, c.unit) for c, t in terms.csv_columns()]


def to_frame(ds: xr.Dataset) -> pd.DataFrame:
    """The budget series as a table with unit-bearing column names, `time` as ISO 8601 UTC."""
    area = float(ds.attrs["region_area_m2"])
    cols = {"time": [np.datetime_as_string(t, unit="s") + "Z" for t in ds["time"].values]}
    for col, term in terms.csv_columns():
        if term.name not in ds:
            continue
        if "layer" in term.dims:  # one column per layer, e.g. layer_1000_850hPa_import_kg_s
            for lay in ds["layer"].values:
                values = ds[term.name].sel(layer=lay).values
                cols[col.name.format(layer=lay)] = terms.to_display(term, values, col.unit, area)
        else:
            cols[col.name] = terms.to_display(term, ds[term.name].values, col.unit, area)
    return pd.DataFrame(cols)


def to_csv_text(ds: xr.Dataset) -> str:
    """The budget series as CSV text."""
    return to_frame(ds).to_csv(index=False, float_format="%.6g", lineterminator="\n")


def _netcdf_ready(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy()
    for name in out.data_vars:  # CF standard names from the catalogue where the engine left none
        t = terms.BY_NAME.get(name)
        if t is not None and t.standard_name and "standard_name" not in out[name].attrs:
            out[name].attrs["standard_name"] = t.standard_name
    for name in list(out.coords) + list(out.data_vars):
        if out[name].dtype == object:
            out[name] = out[name].astype(str)
    out["time"].encoding.update({"units": "seconds since 1970-01-01T00:00:00Z", "calendar": "proleptic_gregorian"})
    return out


#: Output formats by file-name ending.
CSV_SUFFIXES = (".csv",)
NETCDF_SUFFIXES = (".nc", ".nc4", ".netcdf")
SUFFIXES = CSV_SUFFIXES + NETCDF_SUFFIXES


def to_netcdf_bytes(ds: xr.Dataset) -> bytes:
    """The budget as NetCDF-4 bytes, built in memory (a full disk never meets the HDF5 writer)."""
    return bytes(_netcdf_ready(ds).to_netcdf(engine="h5netcdf"))


def encode(ds: xr.Dataset, path) -> bytes:
    """The bytes of the output `path` by its ending: .csv or .nc."""
    suffix = Path(path).suffix.lower()
    if suffix in CSV_SUFFIXES:
        return to_csv_text(ds).encode("utf-8")
    if suffix in NETCDF_SUFFIXES:
        return to_netcdf_bytes(ds)
    raise RequestError(f"Cannot tell the output format of {str(path)!r}; end the name in .csv or .nc.")


def write_csv(ds: xr.Dataset, path, overwrite: bool = True) -> Path:
    """The budget series as CSV, written atomically (budget.outputs)."""
    return atomic_write(path, to_csv_text(ds), overwrite=overwrite)


def write_netcdf(ds: xr.Dataset, path, overwrite: bool = True) -> Path:
    """The full budget as NetCDF-4, written atomically (budget.outputs)."""
    return atomic_write(path, to_netcdf_bytes(ds), overwrite=overwrite)


def write(ds: xr.Dataset, path, overwrite: bool = True) -> Path:
    """Write by extension: .csv or .nc."""
    return atomic_write(path, encode(ds, path), overwrite=overwrite)


def frame_csv_text(df: pd.DataFrame) -> str:
    """Any table (for example a batch summary) as CSV text."""
    return df.to_csv(index=False, float_format="%.6g", lineterminator="\n")


def write_frame(df: pd.DataFrame, path, overwrite: bool = True) -> Path:
    """Any table as CSV, written atomically."""
    return atomic_write(path, frame_csv_text(df), overwrite=overwrite)
