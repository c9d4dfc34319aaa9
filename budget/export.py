"""CSV and NetCDF writers for a budget Dataset.

Writes go to a temporary file beside the target and are renamed into place only when
complete, so an existing output is never left half-written.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from . import terms
from .errors import RequestError

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


def to_netcdf_bytes(ds: xr.Dataset) -> bytes:
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "budget.nc"
        _netcdf_ready(ds).to_netcdf(p, engine="h5netcdf")
        return p.read_bytes()


def _atomic_write(path, write) -> Path:
    path = Path(path)
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise RequestError(f"The output folder {str(parent)!r} does not exist; create it or choose another --out path.")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=parent)
    os.close(fd)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def write_csv(ds: xr.Dataset, path) -> Path:
    text = to_csv_text(ds)
    return _atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))


def write_netcdf(ds: xr.Dataset, path) -> Path:
    ready = _netcdf_ready(ds)
    return _atomic_write(path, lambda tmp: ready.to_netcdf(tmp, engine="h5netcdf"))


def write(ds: xr.Dataset, path) -> Path:
    """Write by extension: .csv or .nc."""
    suffix = Path(path).suffix.lower()
    if suffix == ".csv":
        return write_csv(ds, path)
    if suffix in (".nc", ".nc4", ".netcdf"):
        return write_netcdf(ds, path)
    raise RequestError(f"Cannot tell the output format of {str(path)!r}; end the name in .csv or .nc.")


def write_frame(df: pd.DataFrame, path) -> Path:
    """Any table (for example a batch summary) as CSV, written atomically."""
    text = df.to_csv(index=False, float_format="%.6g", lineterminator="\n")
    return _atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
