"""Open gridded fields and turn them into one canonical, lazy, SI dataset.

`open_fields` accepts one NetCDF file, a glob, a list of files, a Zarr store or an open
`xarray.Dataset`.  It finds each *role* (u, v, q, ps for level inputs; qu, qv, w for column
inputs) by CF standard_name first, then by common short names, and lets an explicit
``var_map`` override both.  It converts units explicitly (never guessing a missing unit),
sorts latitude ascending, longitude ascending (in the frame the file uses), levels top first,
decodes times to datetime64[ns], and describes the vertical coordinate as a
`budget.vertical.PressureLevels` or `budget.vertical.HybridLevels`.

Nothing here loads the data: orientation changes are `isel` with index arrays and unit
conversions are multiplications of dask arrays.  Only a small sample of q and ps is read, to
catch humidity in g/kg labelled kg/kg and surface pressure in hPa labelled Pa.

Every problem the user can fix is raised as `budget.errors.FieldsError` with one sentence
naming the variable, the file and the fix (``--var role=name`` / ``--units role=unit`` on the
command line, ``var_map`` / ``units`` in Python).
"""

from __future__ import annotations

import glob as _glob
import os
import re
import warnings as _warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from .errors import FieldsError, RequestError
from .vertical import HybridLevels, PressureLevels

__all__ = [
    "Fields",
    "open_fields",
    "LEVEL_ROLES",
    "COLUMN_ROLES",
    "STANDARD_NAMES",
    "SHORT_NAMES",
    "UNIT_FACTORS",
]

LEVEL_ROLES = ("u", "v", "q", "ps")
COLUMN_ROLES = ("qu", "qv", "w")
#: Optional roles, read when present (budget.closure): precipitation and evaporation (units,
#: accumulations and sign handled in budget.observed), cloud liquid / ice mass fractions on
#: levels, and for column inputs the all-phase water flux and cloud liquid / ice columns.
OPTIONAL_ROLES = ("precip", "evap", "ql", "qi", "tu", "tv", "wl", "wi")
ALL_ROLES = LEVEL_ROLES + COLUMN_ROLES + OPTIONAL_ROLES
_OPTIONAL_FOR = {"levels": ("precip", "evap", "ql", "qi"), "column": ("precip", "evap", "tu", "tv", "wl", "wi")}
#: Optional roles whose units are read (not converted) here: budget.observed converts them.
_RAW_UNITS = {"precip", "evap"}

#: Roles that live on levels (need a vertical dimension); the others are 2-D in space.
_ON_LEVELS = {"u", "v", "q", "ql", "qi"}

ROLE_LONG_NAMES = {
    "u": "eastward wind",
    "v": "northward wind",
    "q": "specific humidity",
    "ps": "surface air pressure",
    "qu": "eastward vertically integrated water vapour flux",
    "qv": "northward vertically integrated water vapour flux",
    "w": "precipitable water (atmosphere mass content of water vapour)",
    "precip": "precipitation (rate or accumulated amount)",
    "evap": "evaporation (rate or accumulated amount)",
    "ql": "mass fraction of cloud liquid water",
    "qi": "mass fraction of cloud ice",
    "tu": "eastward vertically integrated water flux, all phases",
    "tv": "northward vertically integrated water flux, all phases",
    "wl": "atmosphere mass content of cloud liquid water",
    "wi": "atmosphere mass content of cloud ice",
}

#: CF standard names per role (CF standard-name table v83).
STANDARD_NAMES = {
    "u": ("eastward_wind",),
    "v": ("northward_wind",),
    "q": ("specific_humidity",),
    "ps": ("surface_air_pressure",),
    "qu": ("eastward_atmosphere_water_vapor_transport_across_unit_distance",),
    "qv": ("northward_atmosphere_water_vapor_transport_across_unit_distance",),
    "w": (
        "atmosphere_mass_content_of_water_vapor",
        "atmosphere_water_vapor_content",
        "lwe_thickness_of_atmosphere_mass_content_of_water_vapor",
    ),
    "precip": (
        "precipitation_flux", "lwe_precipitation_rate", "precipitation_amount",
        "lwe_thickness_of_precipitation_amount",
    ),
    "evap": (
        "water_evapotranspiration_flux", "water_evaporation_flux", "lwe_water_evaporation_rate",
        "water_evapotranspiration_amount", "water_evaporation_amount",
    ),
    "ql": ("mass_fraction_of_cloud_liquid_water_in_air",),
    "qi": ("mass_fraction_of_cloud_ice_in_air",),
    "tu": ("eastward_atmosphere_water_transport_across_unit_distance",),
    "tv": ("northward_atmosphere_water_transport_across_unit_distance",),
    "wl": ("atmosphere_mass_content_of_cloud_liquid_water",),
    "wi": ("atmosphere_mass_content_of_cloud_ice",),
}

#: Common short names per role, tried (exact, case-sensitive) after the standard names.
SHORT_NAMES = {
    "u": ("u", "ua", "uwnd", "U", "u_component_of_wind"),
    "v": ("v", "va", "vwnd", "V", "v_component_of_wind"),
    "q": ("q", "hus", "shum", "Q", "QV", "specific_humidity"),
    "ps": ("sp", "ps", "PS", "psfc", "PSFC", "pres", "surface_pressure"),
    "qu": (
        "qu", "viwve", "p71.162", "UFLXQV", "uflxqv", "ivt_u", "ivtu", "IVTU", "uivt",
        "vertical_integral_of_eastward_water_vapour_flux",
    ),
    "qv": (
        "qv", "viwvn", "p72.162", "VFLXQV", "vflxqv", "ivt_v", "ivtv", "IVTV", "vivt",
        "vertical_integral_of_northward_water_vapour_flux",
    ),
    "w": (
        "w", "tcwv", "TCWV", "prw", "pwat", "PWAT", "pr_wtr", "TQV", "tqv", "pw", "PW",
        "precipitable_water", "total_column_water_vapour",
    ),
    "precip": ("pr", "tp", "precip", "precipitation", "PRECTOT", "PRECTOTCORR", "prate", "mtpr", "avg_tprate"),
    "evap": ("evspsbl", "e", "evap", "evaporation", "EVAP", "QFX", "mer"),
    "ql": ("clwc", "clw", "QL", "QC", "ql", "cloud_liquid_water_content"),
    "qi": ("ciwc", "cli", "QI", "qi", "cloud_ice_water_content"),
    "tu": ("tu", "total_water_flux_east"),
    "tv": ("tv", "total_water_flux_north"),
    "wl": ("tclw", "lwp", "TQL", "wl"),
    "wi": ("tciw", "iwp", "TQI", "wi"),
}

_SI = {
    "u": "m s-1",
    "v": "m s-1",
    "q": "kg kg-1",
    "ps": "Pa",
    "qu": "kg m-1 s-1",
    "qv": "kg m-1 s-1",
    "w": "kg m-2",
    "ql": "kg kg-1",
    "qi": "kg kg-1",
    "tu": "kg m-1 s-1",
    "tv": "kg m-1 s-1",
    "wl": "kg m-2",
    "wi": "kg m-2",
}

# "ms-1" is deliberately not accepted: strictly it reads "per millisecond".  "mb" is the
# meteorological millibar (not the millibarn of strict unit parsers).
_WIND = {
    "m s-1": 1.0, "m/s": 1.0, "m s**-1": 1.0, "m.s-1": 1.0, "meters/second": 1.0,
    "metres/second": 1.0, "meter/second": 1.0, "metre/second": 1.0, "m s^-1": 1.0,
    "m/sec": 1.0, "m sec-1": 1.0, "meters second-1": 1.0,
}
_HUMIDITY = {
    "kg kg-1": 1.0, "kg/kg": 1.0, "kg kg**-1": 1.0, "1": 1.0, "kg kg^-1": 1.0,
    "kg.kg-1": 1.0,
    "g kg-1": 1e-3, "g/kg": 1e-3, "g kg**-1": 1e-3, "g kg^-1": 1e-3, "g.kg-1": 1e-3,
}
_PRESSURE = {
    "pa": 1.0, "hpa": 100.0, "mbar": 100.0, "millibar": 100.0, "millibars": 100.0,
    "mb": 100.0, "kpa": 1000.0, "n m-2": 1.0, "pascal": 1.0, "pascals": 1.0,
    "hectopascal": 100.0, "hectopascals": 100.0,
}
_FLUX = {
    "kg m-1 s-1": 1.0, "kg/m/s": 1.0, "kg m**-1 s**-1": 1.0, "kg m^-1 s^-1": 1.0,
    "kg.m-1.s-1": 1.0, "kg/(m s)": 1.0, "kg m-1s-1": 1.0,
}
# 1 kg m-2 of vapour is 1 mm of liquid water with a density of 1000 kg m-3 (common practice).
_COLUMN = {
    "kg m-2": 1.0, "kg/m2": 1.0, "kg/m^2": 1.0, "kg m**-2": 1.0, "kg m^-2": 1.0,
    "kg.m-2": 1.0, "kg/m**2": 1.0, "mm": 1.0, "cm": 10.0, "m": 1000.0,
}

#: Accepted units (lower-cased, spaces collapsed) and the factor to SI, per role.
UNIT_FACTORS = {
    "u": _WIND,
    "v": _WIND,
    "q": _HUMIDITY,
    "ps": _PRESSURE,
    "qu": _FLUX,
    "qv": _FLUX,
    "w": _COLUMN,
}

#: The same for the optional roles converted here (precipitation and evaporation are converted
#: in budget.observed, which tells rates from accumulated amounts).
OPTIONAL_UNIT_FACTORS = {
    "ql": _HUMIDITY,
    "qi": _HUMIDITY,
    "tu": _FLUX,
    "tv": _FLUX,
    "wl": _COLUMN,
    "wi": _COLUMN,
}

_EXAMPLE_UNIT = {
    "u": "m/s", "v": "m/s", "q": "g/kg", "ps": "hPa", "qu": "kg/m/s", "qv": "kg/m/s",
    "w": "kg/m2", "level": "hPa", "p0": "Pa", "ap": "Pa",
}

# Plausibility limits (common practice, no source): q above 0.04 kg/kg does not occur in the
# atmosphere (CHECKS.md), surface pressure lies between about 300 and 1100 hPa.
_Q_MAX = 0.04
_PS_RANGE = (30000.0, 110000.0)

_TIME_NAMES = ("time", "valid_time", "Time", "t", "date", "times", "TIME")
_LAT_NAMES = ("lat", "latitude", "Latitude", "LAT", "y")
_LON_NAMES = ("lon", "longitude", "Longitude", "LON", "x")
_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
_HYBRID = "atmosphere_hybrid_sigma_pressure_coordinate"

#: Target size of one dask chunk when Fluxfence picks the time chunking itself.
_CHUNK_BYTES = 64 * 2**20


# --------------------------------------------------------------------------------------
# the result


@dataclass
class Fields:
    """Canonical gridded input.

    ``ds`` holds the roles of ``kind`` on dims (time, level, lat, lon) or (time, lat, lon),
    SI units, lat ascending, lon ascending, levels top first.  When a level input also carries
    the column variables (qu, qv, w), they are kept in ``column_ds`` (same grid and times) with
    their sources in ``column_roles``; otherwise ``column_ds`` is None.
    """

    ds: xr.Dataset
    kind: str
    vertical: PressureLevels | HybridLevels | None
    roles: dict
    files: list
    periodic: bool
    lat: np.ndarray
    lon: np.ndarray
    times: np.ndarray
    warnings: list = field(default_factory=list)
    column_ds: xr.Dataset | None = None
    column_roles: dict = field(default_factory=dict)
    extra_roles: dict = field(default_factory=dict)  # optional roles found (OPTIONAL_ROLES)

    def describe(self) -> str:
        """A few lines for command-line summaries."""
        lines = []
        src = ", ".join(f"{r}={s}" for r, s in self.roles.items())
        lines.append(f"{self.kind} input: {src}")
        if isinstance(self.vertical, PressureLevels):
            p = np.asarray(self.vertical.p) / 100.0
            lines.append(
                f"vertical: {p.size} pressure levels, {_fmt(p[0])} to {_fmt(p[-1])} hPa"
            )
        elif isinstance(self.vertical, HybridLevels):
            n = len(self.vertical.b_interface) - 1
            a = np.asarray(self.vertical.a_interface_pa, float)
            b = np.asarray(self.vertical.b_interface, float)
            lines.append(
                f"vertical: {n} hybrid sigma-pressure levels, top interface "
                f"{_fmt(a[0] / 100.0)} hPa + {_fmt(b[0])} ps, bottom "
                f"{_fmt(a[-1] / 100.0)} hPa + {_fmt(b[-1])} ps"
            )
        nlat, nlon = self.lat.size, self.lon.size
        dlat = _spacing(self.lat)
        dlon = _spacing(self.lon)
        lines.append(
            f"grid: {nlat} lat x {nlon} lon ({_fmt(dlat)} x {_fmt(dlon)} deg), "
            f"lat {_fmt(self.lat[0])} to {_fmt(self.lat[-1])}, "
            f"lon {_fmt(self.lon[0])} to {_fmt(self.lon[-1])}"
            + (" (global, periodic)" if self.periodic else "")
        )
        t = self.times
        if t.size and not np.isnat(t[0]):
            step = ""
            if t.size > 1:
                step = f", step {_fmt_step(pd.Timedelta(np.median(np.diff(t))))}"
            lines.append(
                f"time: {t.size} steps, {_iso(t[0])} to {_iso(t[-1])}{step}"
            )
        else:
            lines.append("time: 1 step, no time in the file")
        if self.extra_roles:
            lines.append("also: " + ", ".join(f"{r}={s}" for r, s in self.extra_roles.items()))
        if self.column_ds is not None:
            lines.append(
                "also column fields: "
                + ", ".join(f"{r}={s}" for r, s in self.column_roles.items())
            )
        nf = len(self.files)
        if nf:
            lines.append(f"files: {nf} ({self.files[0]}{' ...' if nf > 1 else ''})")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines)


def _fmt(x) -> str:
    return f"{float(x):g}"


def _iso(t) -> str:
    return pd.Timestamp(t).isoformat()


def _fmt_step(dt: pd.Timedelta) -> str:
    secs = dt.total_seconds()
    for size, unit in ((86400, "day"), (3600, "h"), (60, "min")):
        if secs >= size and secs % size == 0:
            n = int(secs // size)
            return f"{n} {unit}{'s' if unit == 'day' and n > 1 else ''}"
    return f"{secs:g} s"


def _spacing(x: np.ndarray) -> float:
    return float(np.median(np.diff(x))) if x.size > 1 else float("nan")


# --------------------------------------------------------------------------------------
# opening


def _is_zarr(path: str) -> bool:
    p = Path(path)
    if not p.is_dir():
        return False
    if p.suffix == ".zarr":
        return True
    return any((p / m).exists() for m in (".zgroup", ".zarray", ".zmetadata", "zarr.json"))


def _expand_paths(paths) -> list[str]:
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
        if os.path.isdir(s) and not _is_zarr(s):
            raise FieldsError(
                f"'{s}' is a directory but not a Zarr store; pass the files inside it, "
                f"e.g. '{os.path.join(s, '*.nc')}'."
            )
    if len(out) > 1 and any(_is_zarr(s) for s in out):
        raise FieldsError(
            "Give either one Zarr store or NetCDF files, not a mixture: " + ", ".join(out) + "."
        )
    return out


def _where(files: list[str]) -> str:
    if not files:
        return "the input dataset"
    if len(files) == 1:
        return f"'{files[0]}'"
    return f"'{files[0]}' (and {len(files) - 1} more files)"


def _open_one_plain(path: str) -> xr.Dataset:
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            return xr.open_dataset(path)
    except Exception as exc:  # noqa: BLE001 - any reader failure is the user's file
        raise FieldsError(
            f"Cannot read '{path}' as NetCDF ({_short(exc)}); check that it is a complete "
            "NetCDF or HDF5 file."
        ) from None


def _short(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if "did not find a match in any of xarray" in text:  # xarray's wording for "no reader"
        return "its contents are not NetCDF, HDF5 or Zarr"
    return text[:200]


def _time_chunks(path: str) -> dict | None:
    """Chunks {time_dim: n} so that one chunk of the largest variable is about 64 MiB."""
    ds = _open_one_plain(path)
    try:
        tname = _guess_time_dim(ds)
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
        n = max(1, _CHUNK_BYTES // step)
        n = max(stored, (n // stored) * stored)
        return {tname: int(n)}
    finally:
        ds.close()


#: Horizontal tile (grid cells) of the dask chunks of multi-file inputs.
_TILE = 128


def _space_tiles(path: str) -> dict:
    """{lat_dim: _TILE, lon_dim: _TILE} for horizontal dims longer than a tile."""
    ds = _open_one_plain(path)
    try:
        return {name: _TILE for name in _LAT_NAMES + _LON_NAMES if name in ds.dims and ds.sizes[name] > _TILE}
    finally:
        ds.close()


def _open(paths, chunks) -> tuple[xr.Dataset, list[str]]:
    if isinstance(paths, xr.Dataset):
        ds = paths
        if chunks is not None:
            ds = ds.chunk(chunks)
        src = ds.encoding.get("source")
        return ds, ([str(src)] if src else [])
    files = _expand_paths(paths)
    if len(files) == 1 and _is_zarr(files[0]):
        try:
            kwargs = {} if chunks is None else {"chunks": chunks}
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                ds = xr.open_zarr(files[0], **kwargs)
        except Exception as exc:  # noqa: BLE001
            raise FieldsError(
                f"Cannot read the Zarr store '{files[0]}' ({_short(exc)}); check that it is a "
                "complete Zarr store."
            ) from None
        return ds, files
    deferred = chunks is None and len(files) == 1
    if chunks is None:
        chunks = _time_chunks(files[0])
        if len(files) > 1:
            # several files are joined by dask, and slices do not reach the file reader
            # through the join; tiled chunks let dask compute only the tiles a region touches
            chunks = {**chunks, **_space_tiles(files[0])}
    if len(files) == 1:
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                # Without dask first: xarray composes every later isel (orientation, time
                # window) into one lazy read, and open_fields chunks at the end. Chunking here
                # would put those isel as extra layers on the dask arrays, and dask then
                # loads whole chunks instead of the few cells a region reads.
                ds = xr.open_dataset(files[0], chunks=None if deferred else chunks)
                if deferred:
                    ds.encoding["fluxfence_chunks"] = dict(chunks)
        except Exception as exc:  # noqa: BLE001
            raise FieldsError(
                f"Cannot read '{files[0]}' as NetCDF ({_short(exc)}); check that it is a "
                "complete NetCDF or HDF5 file."
            ) from None
        return ds, files
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            ds = xr.open_mfdataset(
                files, combine="by_coords", chunks=chunks, parallel=False,
                data_vars="minimal", coords="minimal", compat="override",
                join="exact",
            )
    except Exception as exc:  # noqa: BLE001
        for f in files:  # name the unreadable file when there is one
            _open_one_plain(f).close()
        raise FieldsError(
            f"Cannot combine the {len(files)} files starting with '{files[0]}' "
            f"({_short(exc)}); they must share one grid and levels and must not overlap "
            "in time."
        ) from None
    return ds, files


# --------------------------------------------------------------------------------------
# coordinates


def _norm_units(u) -> str:
    return " ".join(str(u).strip().split()).lower()


def _guess_time_dim(ds: xr.Dataset) -> str | None:
    for name, var in ds.variables.items():
        if var.ndim == 1 and var.dims[0] == name:
            if var.attrs.get("standard_name") == "time" or var.attrs.get("axis") == "T":
                return name
            if np.issubdtype(var.dtype, np.datetime64):
                return name
    for name in _TIME_NAMES:
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


def _find_horizontal(ds: xr.Dataset, axis: str, where: str) -> str:
    std = "latitude" if axis == "lat" else "longitude"
    units = _LAT_UNITS if axis == "lat" else _LON_UNITS
    names = _LAT_NAMES if axis == "lat" else _LON_NAMES
    cands = [n for n in ds.coords] + [n for n in ds.data_vars]
    chosen = None
    for n in cands:
        if ds[n].attrs.get("standard_name") == std:
            chosen = n
            break
    if chosen is None:
        for n in cands:
            if _norm_units(ds[n].attrs.get("units", "")) in units:
                chosen = n
                break
    if chosen is None:
        for n in names:
            if n in ds.variables:
                u = _norm_units(ds[n].attrs.get("units", ""))
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
    if var.ndim != 1:
        raise FieldsError(
            f"The {std} coordinate '{chosen}' in {where} is {var.ndim}-dimensional "
            "(a curvilinear or projected grid); regrid the fields to a regular "
            "longitude-latitude grid first."
        )
    return chosen


def _decode_times(index, where: str, notes: list[str]) -> pd.DatetimeIndex:
    from xarray.coding.cftimeindex import CFTimeIndex

    if isinstance(index, CFTimeIndex):
        cal = getattr(index, "calendar", "unknown")
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                out = index.to_datetimeindex(unsafe=True, time_unit="us")
        except Exception as exc:  # noqa: BLE001
            raise FieldsError(
                f"The times in {where} use the '{cal}' calendar and cannot be converted to "
                f"standard dates ({_short(exc)}); convert the file to a standard calendar "
                "first (for example with xarray's convert_calendar)."
            ) from None
        if cal not in ("standard", "gregorian", "proleptic_gregorian"):
            notes.append(
                f"times use the '{cal}' calendar and were converted to standard dates; "
                "intervals across a missing or extra day are off by that day"
            )
        return _as_ns(pd.DatetimeIndex(out), where)
    if isinstance(index, pd.DatetimeIndex):
        if index.tz is not None:
            index = index.tz_convert("UTC").tz_localize(None)
        return _as_ns(index, where)
    raise FieldsError(
        f"The time coordinate in {where} could not be read as dates; give it CF units such "
        "as 'hours since 2000-01-01 00:00' and a calendar."
    )


def _as_ns(index: pd.DatetimeIndex, where: str) -> pd.DatetimeIndex:
    try:
        return index.as_unit("ns")
    except (OverflowError, ValueError, pd.errors.OutOfBoundsDatetime):
        raise FieldsError(
            f"The times in {where} ({index[0]} to {index[-1]}) lie outside the years 1678-2261 "
            "that datetime64[ns] can hold; shift the time axis into that range."
        ) from None


def _orient_lon(lon: np.ndarray, where: str) -> tuple[np.ndarray, np.ndarray]:
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


# --------------------------------------------------------------------------------------
# variables


def _spatial_extra_dims(var: xr.DataArray, hdims: set[str]) -> list[str]:
    return [d for d in var.dims if d not in hdims and var.sizes[d] > 1]


def _fits(role: str, var: xr.DataArray, hdims: set[str], lat: str, lon: str) -> bool:
    if lat not in var.dims or lon not in var.dims:
        return False
    extra = _spatial_extra_dims(var, hdims)
    return len(extra) == 1 if role in _ON_LEVELS else len(extra) == 0


def _detect(ds, roles, var_map, hdims, lat, lon) -> dict[str, str]:
    found: dict[str, str] = {}
    names = list(ds.data_vars)
    used: set[str] = set()
    for role in roles:
        if role in var_map:
            found[role] = var_map[role]
            used.add(var_map[role])
    for role in roles:
        if role in found:
            continue
        for n in names:
            if n in used:
                continue
            std = ds[n].attrs.get("standard_name")
            if std in STANDARD_NAMES[role] and _fits(role, ds[n], hdims, lat, lon):
                found[role] = n
                used.add(n)
                break
    for role in roles:
        if role in found:
            continue
        for n in SHORT_NAMES[role]:
            if n in ds.data_vars and n not in used and _fits(role, ds[n], hdims, lat, lon):
                found[role] = n
                used.add(n)
                break
    return found


def _var_hint(role: str) -> str:
    return f"--var {role}=NAME (var_map={{'{role}': 'NAME'}} in Python)"


def _units_hint(key: str) -> str:
    ex = _EXAMPLE_UNIT.get(key, "UNIT")
    return f"--units {key}={ex} (units={{'{key}': '{ex}'}} in Python)"


def _contents(ds: xr.Dataset) -> str:
    items = []
    for n in ds.data_vars:
        std = ds[n].attrs.get("standard_name")
        items.append(f"{n} [{std}]" if std else str(n))
    return ", ".join(items) if items else "no data variables"


def _factor(role: str, src: str, da: xr.DataArray, units: dict, where: str) -> tuple[float, str]:
    given = units.get(role, units.get(src))
    raw = given if given is not None else da.attrs.get("units")
    if raw is None or str(raw).strip() == "":
        raise FieldsError(
            f"Variable '{src}' ({ROLE_LONG_NAMES[role]}) in {where} has no units attribute; "
            f"state its unit with {_units_hint(role)}."
        )
    table = UNIT_FACTORS[role] if role in UNIT_FACTORS else OPTIONAL_UNIT_FACTORS[role]
    key = _norm_units(raw)
    if key not in table:
        accepted = ", ".join(dict.fromkeys(table))
        raise FieldsError(
            f"Variable '{src}' ({ROLE_LONG_NAMES[role]}) in {where} has units '{raw}', which "
            f"Fluxfence cannot convert to {_SI[role]} (accepted: {accepted}); if the attribute "
            f"is wrong, override it with {_units_hint(role)}."
        )
    return table[key], str(raw)


def _pressure_factor(name: str, raw, where: str, key: str) -> float:
    if raw is None or str(raw).strip() == "":
        raise FieldsError(
            f"The pressure '{name}' in {where} has no units attribute; state its unit with "
            f"{_units_hint(key)}."
        )
    k = _norm_units(raw)
    if k not in _PRESSURE:
        raise FieldsError(
            f"The pressure '{name}' in {where} has units '{raw}', which is not a pressure "
            f"unit Fluxfence knows (Pa, hPa, mbar, millibar, mb); override it with "
            f"{_units_hint(key)}."
        )
    return _PRESSURE[k]


# --------------------------------------------------------------------------------------
# vertical coordinates


def _parse_terms(text: str) -> dict[str, str]:
    parts = re.findall(r"(\w+)\s*:\s*(\S+)", str(text))
    return {k: v for k, v in parts}


def _is_pressure_coord(var: xr.DataArray) -> bool:
    if var.attrs.get("standard_name") == "air_pressure":
        return True
    return _norm_units(var.attrs.get("units", "")) in _PRESSURE


def _pressure_vertical(ds, vdim, units, where, src_vars):
    coord = ds[vdim]
    override = units.get("level", units.get(vdim))
    raw = override if override is not None else coord.attrs.get("units")
    fac = _pressure_factor(vdim, raw, where, "level")
    p = np.asarray(coord.values, dtype=float) * fac
    if np.unique(p).size != p.size:
        raise FieldsError(
            f"The pressure levels '{vdim}' in {where} repeat a value "
            f"({_dupes(p / 100.0)} hPa); each level must appear once."
        )
    if np.nanmax(p) < 5000.0:
        raise FieldsError(
            f"The pressure levels '{vdim}' in {where} are labelled '{raw}' but all lie above "
            f"50 hPa (largest {np.nanmax(p):g} Pa), which looks like hPa labelled Pa; "
            f"correct it with {_units_hint('level')}."
        )
    order = np.argsort(p, kind="stable")
    return order, p[order], PressureLevels(p[order]), []


def _dupes(x: np.ndarray) -> str:
    vals, counts = np.unique(x, return_counts=True)
    return ", ".join(f"{v:g}" for v in vals[counts > 1])


def _coef(ds, name, where, what):
    if name not in ds.variables:
        raise FieldsError(
            f"The hybrid coordinate's formula_terms in {where} name '{name}' as {what}, but the "
            "file has no such variable; fix the formula_terms attribute or add the variable."
        )
    return ds[name]


def _hybrid_vertical(ds, vdim, units, where):
    coord = ds[vdim]
    terms = _parse_terms(coord.attrs.get("formula_terms", ""))
    notes: list[str] = []
    if "b" not in terms or not ("a" in terms or "ap" in terms):
        raise FieldsError(
            f"The hybrid sigma-pressure coordinate '{vdim}' in {where} lacks usable "
            "formula_terms (need 'a: A b: B ps: PS p0: P0' or 'ap: AP b: B ps: PS'); add the "
            "attribute as in CF conventions appendix D."
        )

    def a_pa(term_map, bounds: bool):
        if "ap" in term_map:
            var = _coef(ds, term_map["ap"], where, "ap")
            ov = units.get("ap", units.get(term_map["ap"]))
            raw_units = var.attrs.get("units")
            if bounds and raw_units is None and terms.get("ap") in ds.variables:
                # CF 7.1: a boundary variable takes its units from its parent variable
                raw_units = ds[terms["ap"]].attrs.get("units")
            fac = _pressure_factor(term_map["ap"], ov or raw_units, where, "ap")
            return np.asarray(var.values, dtype=float) * fac
        var = _coef(ds, term_map["a"], where, "a")
        if "p0" not in term_map:
            raise FieldsError(
                f"The hybrid coordinate '{vdim}' in {where} gives 'a' without 'p0' in its "
                "formula_terms; add 'p0: P0' naming the reference pressure variable."
            )
        p0v = _coef(ds, term_map["p0"], where, "p0")
        ov = units.get("p0", units.get(term_map["p0"]))
        fac = _pressure_factor(term_map["p0"], ov or p0v.attrs.get("units"), where, "p0")
        p0 = float(np.asarray(p0v.values, dtype=float).ravel()[0]) * fac
        return np.asarray(var.values, dtype=float) * p0

    a_mid = a_pa(terms, False)
    b_mid = np.asarray(_coef(ds, terms["b"], where, "b").values, dtype=float)
    if a_mid.shape != (coord.size,) or b_mid.shape != (coord.size,):
        raise FieldsError(
            f"The hybrid coefficients of '{vdim}' in {where} do not have one value per level; "
            "check the formula_terms variables."
        )
    ref = 101325.0  # any surface pressure orders the levels; standard atmosphere here
    p_mid = a_mid + b_mid * ref
    if np.unique(p_mid).size != p_mid.size:
        raise FieldsError(
            f"The hybrid levels '{vdim}' in {where} repeat a level (equal a and b); each level "
            "must appear once."
        )
    order = np.argsort(p_mid, kind="stable")
    a_mid, b_mid = a_mid[order], b_mid[order]

    bname = coord.attrs.get("bounds")
    a_int = b_int = None
    if bname and bname in ds.variables:
        bterms = _parse_terms(ds[bname].attrs.get("formula_terms", ""))
        if "b" in bterms and ("a" in bterms or "ap" in bterms):
            if "p0" not in bterms and "p0" in terms:
                bterms["p0"] = terms["p0"]
            a_b = a_pa(bterms, True)
            b_b = np.asarray(_coef(ds, bterms["b"], where, "b bounds").values, dtype=float)
            a_int, b_int = _interfaces_from_bounds(a_b, b_b, order, ref, vdim, where)
    if a_int is None:
        # no bounds: coefficients' own bounds attributes (as CMIP files carry), else midway
        an = terms.get("ap", terms.get("a"))
        ab = ds[an].attrs.get("bounds") if an in ds.variables else None
        bb = ds[terms["b"]].attrs.get("bounds")
        if ab and bb and ab in ds.variables and bb in ds.variables:
            key = "ap" if "ap" in terms else "a"
            bt = {key: ab, "b": bb}
            if "p0" in terms:
                bt["p0"] = terms["p0"]
            a_b = a_pa(bt, True)
            b_b = np.asarray(ds[bb].values, dtype=float)
            a_int, b_int = _interfaces_from_bounds(a_b, b_b, order, ref, vdim, where)
    if a_int is None:
        a_int = _midway(a_mid)
        b_int = _midway(b_mid)
        a_int = np.clip(a_int, 0.0, None)
        b_int = np.clip(b_int, 0.0, 1.0)
        notes.append(
            f"hybrid coordinate '{vdim}' has no bounds; layer interfaces were placed midway "
            "between levels, the outermost extrapolated (a >= 0, 0 <= b <= 1)"
        )
    vert = HybridLevels(np.asarray(a_int, float), np.asarray(b_int, float))
    return order, np.asarray(coord.values)[order], vert, notes


def _midway(c: np.ndarray) -> np.ndarray:
    if c.size == 1:
        return np.array([c[0], c[0]], dtype=float)
    inner = 0.5 * (c[1:] + c[:-1])
    first = c[0] - 0.5 * (c[1] - c[0])
    last = c[-1] + 0.5 * (c[-1] - c[-2])
    return np.concatenate([[first], inner, [last]])


def _interfaces_from_bounds(a_b, b_b, order, ref, vdim, where):
    n = order.size
    if a_b.shape != (n, 2) or b_b.shape != (n, 2):
        raise FieldsError(
            f"The bounds of the hybrid coordinate '{vdim}' in {where} are not shaped "
            "(level, 2); fix the bounds variables."
        )
    a_b, b_b = a_b[order], b_b[order]
    p_b = a_b + b_b * ref
    swap = p_b[:, 0] > p_b[:, 1]  # upper (smaller pressure) bound first
    a_b = np.where(swap[:, None], a_b[:, ::-1], a_b)
    b_b = np.where(swap[:, None], b_b[:, ::-1], b_b)
    if n > 1 and not (
        np.allclose(a_b[1:, 0], a_b[:-1, 1], rtol=1e-6, atol=1e-6 * max(1.0, np.abs(a_b).max()))
        and np.allclose(b_b[1:, 0], b_b[:-1, 1], rtol=1e-6, atol=1e-9)
    ):
        raise FieldsError(
            f"The bounds of the hybrid coordinate '{vdim}' in {where} leave gaps or overlaps "
            "between layers; each layer's lower bound must be the next layer's upper bound."
        )
    a_int = np.concatenate([[a_b[0, 0]], a_b[:, 1]])
    b_int = np.concatenate([[b_b[0, 0]], b_b[:, 1]])
    return a_int, b_int


# --------------------------------------------------------------------------------------
# the main entry point


def open_fields(
    paths,
    var_map: dict | None = None,
    units: dict | None = None,
    start=None,
    end=None,
    chunks=None,
) -> Fields:
    """Open gridded input and return canonical `Fields` (lazy; only a small sample is read).

    paths:   a NetCDF file, a glob, a list of files, a Zarr store directory, or an open
             xarray.Dataset.
    var_map: {role: variable name}, overriding detection; roles u, v, q, ps, qu, qv, w.
    units:   {role or variable name: unit}, overriding a missing or wrong units attribute;
             also "level" (pressure levels), "p0" and "ap" (hybrid coefficients).
    start, end: ISO 8601 times bounding the window (inclusive).
    chunks:  dask chunks passed to xarray; by default about 64 MiB per chunk, split in time.
    """
    var_map = dict(var_map or {})
    units = dict(units or {})
    bad = [r for r in var_map if r not in ALL_ROLES]
    if bad:
        raise FieldsError(
            f"Unknown role '{bad[0]}' in the variable mapping; roles are "
            f"{', '.join(ALL_ROLES)} (e.g. --var q=hus)."
        )
    raw, files = _open(paths, chunks)
    # lazy, not yet dask: chunk (and convert units) after orientation and windows (see _open)
    deferred = raw.encoding.get("fluxfence_chunks")
    factors: dict = {}
    where = _where(files)
    for role, name in var_map.items():
        if name not in raw.variables or name in raw.dims:
            raise FieldsError(
                f"The variable '{name}' given for {role} ({ROLE_LONG_NAMES[role]}) is not in "
                f"{where}, which holds: {_contents(raw)}; correct {_var_hint(role)}."
            )

    lat_name = _find_horizontal(raw, "lat", where)
    lon_name = _find_horizontal(raw, "lon", where)
    lat_dim, lon_dim = raw[lat_name].dims[0], raw[lon_name].dims[0]
    time_dim = _guess_time_dim(raw)
    hdims = {d for d in (time_dim, lat_dim, lon_dim) if d is not None}

    level_found = _detect(raw, LEVEL_ROLES, var_map, hdims, lat_dim, lon_dim)
    column_found = _detect(raw, COLUMN_ROLES, var_map, hdims, lat_dim, lon_dim)
    # an explicit mapping of one kind only chooses that kind
    mapped_level = any(r in var_map for r in LEVEL_ROLES)
    mapped_column = any(r in var_map for r in COLUMN_ROLES)
    level_ok = len(level_found) == len(LEVEL_ROLES)
    column_ok = len(column_found) == len(COLUMN_ROLES)
    if mapped_column and not mapped_level:
        kind = "column"
    elif mapped_level and not mapped_column:
        kind = "levels"
    elif level_ok:
        kind = "levels"
    elif column_ok:
        kind = "column"
    elif level_found and (len(level_found) >= len(column_found) or not column_found):
        kind = "levels"
    elif column_found:
        kind = "column"
    else:
        raise FieldsError(
            f"Found none of the variables Fluxfence needs in {where}, which holds: "
            f"{_contents(raw)}; level inputs need u, v, q, ps and column inputs need qu, qv, w "
            "(name them with --var role=NAME, e.g. --var q=hus)."
        )
    roles_needed = LEVEL_ROLES if kind == "levels" else COLUMN_ROLES
    found = level_found if kind == "levels" else column_found
    missing = [r for r in roles_needed if r not in found]

    # hybrid coordinates name their own surface pressure
    vdim = None
    if kind == "levels":
        for r in ("u", "v", "q"):
            if r in found:
                ex = _spatial_extra_dims(raw[found[r]], hdims)
                if len(ex) == 1:
                    vdim = ex[0]
                    break
        if vdim is not None and vdim in raw.variables and "ps" not in var_map:
            coord = raw[vdim]
            if coord.attrs.get("standard_name") == _HYBRID or "formula_terms" in coord.attrs:
                psn = _parse_terms(coord.attrs.get("formula_terms", "")).get("ps")
                if psn and psn in raw.variables and psn not in raw.dims:
                    found["ps"] = psn
                    if "ps" in missing:
                        missing.remove("ps")
    if missing:
        names = ", ".join(f"{r} ({ROLE_LONG_NAMES[r]})" for r in missing)
        raise FieldsError(
            f"No variable found for {names} in {where}, which holds: {_contents(raw)}; "
            f"name it with {_var_hint(missing[0])}."
        )

    notes: list[str] = []
    for role, name in found.items():
        _check_dims(role, name, raw, hdims, lat_dim, lon_dim, where, time_dim)

    # vertical coordinate
    vertical = None
    level_order = level_values = None
    if kind == "levels":
        for r in ("u", "v", "q"):
            ex = _spatial_extra_dims(raw[found[r]], hdims)
            if ex[0] != vdim:
                raise FieldsError(
                    f"Variables '{found['u']}' and '{found[r]}' in {where} lie on different "
                    f"vertical coordinates ('{vdim}' and '{ex[0]}'); u, v and q must share "
                    "one set of levels."
                )
        if vdim not in raw.variables:
            raise FieldsError(
                f"The vertical dimension '{vdim}' of '{found['u']}' in {where} has no "
                "coordinate values; add a pressure (Pa or hPa) or CF hybrid sigma-pressure "
                "coordinate variable."
            )
        coord = raw[vdim]
        if coord.attrs.get("standard_name") == _HYBRID or "formula_terms" in coord.attrs:
            level_order, level_values, vertical, vnotes = _hybrid_vertical(raw, vdim, units, where)
            notes += vnotes
        elif _is_pressure_coord(coord) or "level" in units or vdim in units:
            level_order, level_values, vertical, _ = _pressure_vertical(
                raw, vdim, units, where, found
            )
        else:
            u = coord.attrs.get("units")
            raise FieldsError(
                f"The vertical coordinate '{vdim}' in {where} (units "
                f"'{u if u is not None else 'none'}') is neither pressure nor CF hybrid "
                "sigma-pressure; give pressure levels a units attribute (or "
                f"{_units_hint('level')}), or a hybrid coordinate its formula_terms."
            )

    # canonical variables, lazily
    rename = {lat_dim: "lat", lon_dim: "lon"}
    if time_dim is not None:
        rename[time_dim] = "time"
    if vdim is not None:
        rename[vdim] = "level"

    def canon(role, src, keep_units=False):
        da = raw[src]
        for d in list(da.dims):
            if d not in hdims and d != vdim:  # size-1 extra dims (checked above)
                da = da.isel({d: 0})
        da = da.reset_coords(drop=True)
        da = da.drop_vars([c for c in da.coords], errors="ignore")
        if keep_units:  # precipitation / evaporation: budget.observed reads units and metadata
            da = da.rename({k: v for k, v in rename.items() if k in da.dims and k != v})
            da = da.transpose(*[d for d in ("time", "level", "lat", "lon") if d in da.dims])
            meta = {k: v for k, v in raw[src].attrs.items() if isinstance(v, (str, int, float, np.integer, np.floating))}
            given = units.get(role, units.get(src))
            if given is not None:
                meta["source_units"], meta["units"] = meta.get("units", ""), str(given)
            da.attrs = {**meta, "source_name": src}
            da.name = role
            return da
        fac, raw_units = _factor(role, src, da, units, where)
        da = da.rename({k: v for k, v in rename.items() if k in da.dims and k != v})
        order = [d for d in ("time", "level", "lat", "lon") if d in da.dims]
        da = da.transpose(*order)
        if fac != 1.0:
            if deferred is not None:
                factors[role] = fac  # applied once chunked (arithmetic would load the data)
            else:
                da = da * fac
        da.attrs = {
            "units": _SI[role],
            "long_name": ROLE_LONG_NAMES[role],
            "source_name": src,
            "source_units": raw_units,
        }
        if STANDARD_NAMES[role]:
            da.attrs["standard_name"] = STANDARD_NAMES[role][0]
        da.name = role
        return da

    ds = xr.Dataset({r: canon(r, found[r]) for r in roles_needed})
    extra_roles = _optional_roles(raw, kind, var_map, units, found, hdims, lat_dim, lon_dim, vdim, where, notes)
    for r, src in extra_roles.items():
        ds[r] = canon(r, src, keep_units=r in _RAW_UNITS)
    column_ds = None
    column_roles: dict = {}
    if kind == "levels" and column_ok:
        try:
            column_ds = xr.Dataset({r: canon(r, column_found[r]) for r in COLUMN_ROLES})
            column_roles = {r: column_found[r] for r in COLUMN_ROLES}
        except FieldsError as exc:
            notes.append(f"column fields were ignored: {exc}")
            column_ds = None

    # coordinates and orientation
    lat = np.asarray(raw[lat_name].values, dtype=float)
    lon = np.asarray(raw[lon_name].values, dtype=float)
    if lat.size > 1 and not (np.all(np.diff(lat) > 0) or np.all(np.diff(lat) < 0)):
        raise FieldsError(
            f"The latitudes '{lat_name}' in {where} are not strictly ascending or descending; "
            "store each latitude once, in order."
        )
    if np.nanmin(lat) < -90.0001 or np.nanmax(lat) > 90.0001:
        raise FieldsError(
            f"The latitudes '{lat_name}' in {where} run outside -90..90 degrees; check that "
            "this coordinate really is latitude."
        )
    isel = {}
    if lat.size > 1 and lat[0] > lat[-1]:
        isel["lat"] = np.arange(lat.size)[::-1]
        lat = lat[::-1]
    lon_idx, lon = _orient_lon(lon, where)
    if lon.size > 2:
        step = _spacing(lon)
        if abs((lon[-1] - lon[0]) - 360.0) <= 0.1 * step:  # a repeated cyclic column
            lon_idx, lon = lon_idx[:-1], lon[:-1]
            notes.append(
                f"longitude {lon[0] + 360.0:g} repeats {lon[0]:g} (a cyclic column); "
                "the repeated column was dropped"
            )
    if not np.array_equal(lon_idx, np.arange(raw[lon_name].size)):
        isel["lon"] = lon_idx
    if level_order is not None and not np.array_equal(level_order, np.arange(level_order.size)):
        isel["level"] = level_order

    def orient(d: xr.Dataset) -> xr.Dataset:
        if isel:
            d = d.isel({k: _indexer(v) for k, v in isel.items() if k in d.dims})
        coords = {
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude",
                                 "long_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude",
                                 "long_name": "longitude"}),
        }
        if "level" in d.dims:
            if isinstance(vertical, PressureLevels):
                coords["level"] = ("level", np.asarray(vertical.p, float), {
                    "units": "Pa", "standard_name": "air_pressure",
                    "long_name": "pressure level", "positive": "down"})
            else:
                coords["level"] = ("level", np.asarray(level_values), {
                    "long_name": f"hybrid sigma-pressure level (values of '{vdim}')",
                    "positive": "down"})
        return d.assign_coords(coords)

    ds = orient(ds)
    if column_ds is not None:
        column_ds = orient(column_ds)

    # time
    if time_dim is None:
        t0 = None
        for name, var in raw.coords.items():
            if var.ndim == 0 and (np.issubdtype(var.dtype, np.datetime64)
                                  or var.attrs.get("standard_name") == "time"):
                t0 = var.values
                break
        tvals = pd.DatetimeIndex([pd.Timestamp(t0) if t0 is not None else pd.NaT]).as_unit("ns")
        if t0 is None:
            notes.append("the input has no time; it was given one time step with no date")
        if deferred is not None:
            ds, column_ds = _chunk_deferred(ds, {}, factors), _chunk_deferred(column_ds, {}, factors)
            deferred = None
        ds = ds.expand_dims(time=tvals)
        if column_ds is not None:
            column_ds = column_ds.expand_dims(time=tvals)
        times = tvals
    else:
        times = _decode_times(raw.indexes[time_dim], where, notes)
        if times.has_duplicates:
            raise FieldsError(
                f"The times in {where} repeat (first repeat {times[times.duplicated()][0]}); "
                "remove overlapping files or steps."
            )
        ds = ds.assign_coords(time=("time", times, {"long_name": "time", "standard_name": "time"}))
        if column_ds is not None:
            column_ds = column_ds.assign_coords(time=("time", times))
        if not times.is_monotonic_increasing:
            tord = np.argsort(times.values, kind="stable")
            ds = ds.isel(time=tord)
            if column_ds is not None:
                column_ds = column_ds.isel(time=tord)
            times = times[tord]
    for d in (ds, column_ds):
        if d is not None:
            for r in d.data_vars:
                d[r] = d[r].transpose(*[x for x in ("time", "level", "lat", "lon") if x in d[r].dims])

    if start is not None or end is not None:
        t_start = _parse_time(start, "start")
        t_end = _parse_time(end, "end")
        if times.size and pd.isna(times[0]):
            raise FieldsError(
                f"A time window was asked for but {where} has no time coordinate; drop "
                "--start/--end or give files with times."
            )
        sel = np.ones(times.size, bool)
        if t_start is not None:
            sel &= times >= t_start
        if t_end is not None:
            sel &= times <= t_end
        if not sel.any():
            raise FieldsError(
                f"No time steps between {start or 'the beginning'} and {end or 'the end'} in "
                f"{where}, which covers {_iso(times[0])} to {_iso(times[-1])}; choose a window "
                "inside that range."
            )
        idx = np.nonzero(sel)[0]
        idx = slice(int(idx[0]), int(idx[-1]) + 1) if np.all(np.diff(idx) == 1) else idx
        ds = ds.isel(time=idx)
        if column_ds is not None:
            column_ds = column_ds.isel(time=idx)
        times = times[idx]

    if deferred is not None:
        n = next(iter(deferred.values()), None)
        tchunks = {"time": int(n)} if n and "time" in ds.dims else {}
        ds, column_ds = _chunk_deferred(ds, tchunks, factors), _chunk_deferred(column_ds, tchunks, factors)

    ds.attrs = {
        "kind": kind,
        "input_files": "; ".join(files),
        "roles": ", ".join(f"{r}={s}" for r, s in found.items()),
    }
    if column_ds is not None:
        column_ds.attrs = {"kind": "column", "input_files": "; ".join(files)}

    _plausible(ds, found, where)

    spacing = _spacing(lon)
    periodic = bool(lon.size > 1 and abs(lon.size * spacing - 360.0) <= 0.1 * spacing)
    return Fields(
        ds=ds,
        kind=kind,
        vertical=vertical,
        roles={r: found[r] for r in roles_needed},
        files=list(files),
        periodic=periodic,
        lat=np.asarray(ds["lat"].values),
        lon=np.asarray(ds["lon"].values),
        times=np.asarray(ds["time"].values).astype("datetime64[ns]"),
        warnings=notes,
        column_ds=column_ds,
        column_roles=column_roles,
        extra_roles=extra_roles,
    )


def _optional_roles(raw, kind, var_map, units, found, hdims, lat_dim, lon_dim, vdim, where, notes):
    """{role: variable} of the optional roles present and usable; detected ones that do not fit
    are left out with a note, mapped ones (var_map) that do not fit raise FieldsError."""
    roles = _OPTIONAL_FOR[kind]
    taken = set(found.values())
    cand = _detect(raw.drop_vars([n for n in taken if n in raw.data_vars]), roles, {r: n for r, n in var_map.items() if r in roles}, hdims, lat_dim, lon_dim)
    out = {}
    for role, src in cand.items():
        try:
            _check_dims(role, src, raw, hdims, lat_dim, lon_dim, where)
            if role in _ON_LEVELS:
                ex = _spatial_extra_dims(raw[src], hdims)
                if ex[0] != vdim:
                    raise FieldsError(
                        f"Variable '{src}' ({ROLE_LONG_NAMES[role]}) in {where} lies on '{ex[0]}', not on "
                        f"the levels '{vdim}' of the winds; give it on the same levels."
                    )
            if role not in _RAW_UNITS:
                _factor(role, src, raw[src], units, where)
        except FieldsError as exc:
            if role in var_map:
                raise
            notes.append(f"'{src}' was not used as {ROLE_LONG_NAMES[role]}: {exc}")
            continue
        out[role] = src
    return out


def _indexer(order: np.ndarray):
    """Reversals and prefixes become slices (cheapest for dask); else the index array."""
    n = order.size
    if n and np.array_equal(order, np.arange(order[0], order[0] - n, -1)) and order[-1] == 0:
        return slice(order[0], None, -1)
    if n and np.array_equal(order, np.arange(n)):
        return slice(0, n)
    return order


def _check_dims(role, name, raw, hdims, lat_dim, lon_dim, where, time_dim=None):
    var = raw[name]
    if time_dim is not None and time_dim not in var.dims:
        raise FieldsError(
            f"Variable '{name}' chosen for {role} ({ROLE_LONG_NAMES[role]}) in {where} has no "
            f"'{time_dim}' dimension while the file has one; give it the time dimension or name "
            f"another variable with {_var_hint(role)}."
        )
    if lat_dim not in var.dims or lon_dim not in var.dims:
        raise FieldsError(
            f"Variable '{name}' chosen for {role} ({ROLE_LONG_NAMES[role]}) in {where} is not "
            f"on the latitude-longitude grid (its dims are {', '.join(map(str, var.dims))}); "
            f"name another variable with {_var_hint(role)}."
        )
    extra = _spatial_extra_dims(var, hdims)
    if role in _ON_LEVELS and len(extra) != 1:
        if not extra:
            raise FieldsError(
                f"Variable '{name}' chosen for {role} ({ROLE_LONG_NAMES[role]}) in {where} has "
                f"no vertical dimension; level inputs need {role} on pressure or hybrid levels "
                f"(name another variable with {_var_hint(role)}, or give column inputs qu, qv, w)."
            )
        raise FieldsError(
            f"Variable '{name}' in {where} has more than one dimension besides time, latitude "
            f"and longitude ({', '.join(extra)}); select one member or level set first."
        )
    if role not in _ON_LEVELS and extra:
        raise FieldsError(
            f"Variable '{name}' chosen for {role} ({ROLE_LONG_NAMES[role]}) in {where} has an "
            f"extra dimension '{extra[0]}' of size {var.sizes[extra[0]]}; it must be a 2-D "
            f"field in time (name another variable with {_var_hint(role)})."
        )


def _chunk_deferred(d: xr.Dataset | None, chunks: dict, factors: dict) -> xr.Dataset | None:
    """Dask-chunk a lazily opened canonical dataset and apply the deferred unit factors."""
    if d is None:
        return None
    attrs = {r: dict(d[r].attrs) for r in d.data_vars}
    d = d.chunk({k: v for k, v in chunks.items() if k in d.dims} or {})
    for r, fac in factors.items():
        if r in d:
            d[r] = d[r] * fac
            d[r].attrs = attrs[r]
    return d


def _parse_time(value, what: str):
    if value is None or value == "":
        return None
    try:
        t = pd.Timestamp(value)
    except (ValueError, TypeError):
        raise RequestError(
            f"The {what} time '{value}' is not an ISO 8601 date such as 2020-01-31 or "
            "2020-01-31T18:00."
        ) from None
    if pd.isna(t):
        raise RequestError(f"The {what} time '{value}' is not a date; give ISO 8601.")
    if t.tzinfo is not None:
        t = t.tz_convert("UTC").tz_localize(None)
    return t


def _sample(da: xr.DataArray) -> np.ndarray:
    """A few hundred values of the first time step (all levels), read cheaply."""
    sub = da.isel(time=0)
    sl = {}
    for d in ("lat", "lon"):
        n = sub.sizes[d]
        sl[d] = slice(None, None, max(1, n // 24))
    sub = sub.isel(sl)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        return np.asarray(sub.values, dtype=float)


def _plausible(ds: xr.Dataset, found: dict, where: str) -> None:
    if "q" in ds:
        vals = _sample(ds["q"])
        qmax = np.nanmax(vals) if np.isfinite(vals).any() else 0.0
        if qmax > 1000 * _Q_MAX:
            raise FieldsError(
                f"Specific humidity '{found['q']}' in {where} holds values up to {qmax:.3g}, far "
                "above any humidity even in g/kg, which looks like missing values that are not "
                "marked; give the variable a _FillValue (or missing_value) attribute."
            )
        if qmax > _Q_MAX:
            src_units = ds["q"].attrs.get("source_units")
            raise FieldsError(
                f"Specific humidity '{found['q']}' in {where} reaches "
                f"{np.nanmax(vals):.3g} kg kg-1 after conversion from '{src_units}', above "
                f"the physical limit of about {_Q_MAX} kg kg-1, so it looks like g/kg labelled "
                f"kg/kg; declare the real unit with {_units_hint('q')}."
            )
    if "ps" in ds:
        vals = _sample(ds["ps"])
        if np.isfinite(vals).any():
            lo, hi = np.nanmin(vals), np.nanmax(vals)
            if lo < _PS_RANGE[0] or hi > _PS_RANGE[1]:
                src_units = ds["ps"].attrs.get("source_units")
                raise FieldsError(
                    f"Surface pressure '{found['ps']}' in {where} spans {lo:.6g} to {hi:.6g} Pa "
                    f"after conversion from '{src_units}', outside the plausible "
                    f"{_PS_RANGE[0]:.0f}-{_PS_RANGE[1]:.0f} Pa, so its unit looks wrong "
                    f"(hPa labelled Pa?); declare the real unit with {_units_hint('ps')}."
                )
