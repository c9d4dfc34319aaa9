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

from .errors import RequestError
from .units import convert, kg_m2_to_mm

#: CSV columns after `time`: (column name, Dataset variable, unit key). Unit key "mm" turns
#: kg m-2 into mm, "kg/s" of a transport stays as it is, the rate units go through
#: budget.units.convert, "raw" keeps the variable's own units (named in the column). Add a term
#: here to export it; a variable missing from the Dataset is skipped.
CSV_COLUMNS = [
    ("precipitable_water_mm", "precipitable_water", "mm"),
    ("vapour_convergence_mm_day", "vapour_convergence", "mm/day"),
    ("pw_tendency_mm_day", "pw_tendency", "mm/day"),
    ("p_minus_e_mm_day", "p_minus_e", "mm/day"),
    ("vapour_import_kg_s", "vapour_import", "transport"),
    ("inflow_kg_s", "inflow", "transport"),
    ("outflow_kg_s", "outflow", "transport"),
    ("boundary_convergence_mm_day", "boundary_convergence", "mm/day"),
    ("area_convergence_mm_day", "area_convergence", "mm/day"),
    ("p_minus_e_kg_s", "p_minus_e", "kg/s"),
    ("p_minus_e_m3_s", "p_minus_e", "m3/s"),
    # closing the budget (budget.closure): level inputs / files with P, E or condensate only
    ("p_minus_e_uncorrected_mm_day", "p_minus_e_uncorrected", "mm/day"),
    ("mass_correction_mm_day", "mass_correction_convergence", "mm/day"),
    ("mass_correction_speed_m_s", "mass_correction_speed", "raw"),
    ("vapour_import_uncorrected_kg_s", "vapour_import_uncorrected", "transport"),
    ("dry_air_mass_kg_m2", "dry_air_mass", "raw"),
    ("dry_air_residual_kg_m2_s", "dry_air_residual", "raw"),
    ("dry_air_residual_hpa_day", "dry_air_residual_pressure", "raw"),
    ("precipitation_mm_day", "precipitation", "mm/day"),
    ("evaporation_mm_day", "evaporation", "mm/day"),
    ("p_minus_e_observed_mm_day", "p_minus_e_observed", "mm/day"),
    ("closure_residual_mm_day", "closure_residual", "mm/day"),
    ("total_water_mm", "total_water_content", "mm"),
    ("total_water_convergence_mm_day", "total_water_convergence", "mm/day"),
    ("p_minus_e_total_water_mm_day", "p_minus_e_total_water", "mm/day"),
]


def to_frame(ds: xr.Dataset) -> pd.DataFrame:
    """The budget series as a table with unit-bearing column names, `time` as ISO 8601 UTC."""
    area = float(ds.attrs["region_area_m2"])
    cols = {"time": [np.datetime_as_string(t, unit="s") + "Z" for t in ds["time"].values]}
    for name, var, unit in CSV_COLUMNS:
        if var not in ds:
            continue
        vals = ds[var].values
        if unit == "mm":
            cols[name] = kg_m2_to_mm(vals)
        elif unit in ("transport", "raw"):
            cols[name] = np.asarray(vals, float)
        else:
            cols[name] = convert(vals, unit, area)
    return pd.DataFrame(cols)


def to_csv_text(ds: xr.Dataset) -> str:
    return to_frame(ds).to_csv(index=False, float_format="%.6g", lineterminator="\n")


def _netcdf_ready(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy()
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
