"""Write the invented demonstration event as small CF NetCDF files and a GeoJSON basin.

Invented demonstration scenario for Fluxfence — not real weather.  The values are samples of
the closed-form fields in ``sample_fields.truth`` (deterministic: no random numbers), so the
exact budget of any polygon is known; the winds are mass-consistent (non-divergent column
air-mass flux, steady surface pressure), so the dry air closes but for P − E.

Files written by ``write_sample(out_dir)``:

* ``demo_levels.nc``  — ``ua``, ``va`` (m s-1), ``hus`` (kg kg-1) on (time, plev, lat, lon) and
  ``ps`` (Pa) on (time, lat, lon); 11 pressure levels 1000..200 hPa stored surface first, and
  latitude stored north to south, as many reanalysis files are.  Below the ground the values
  are the surface values held constant downward (extrapolated, not air).
* ``demo_column.nc``  — ``ivt_east``, ``ivt_north`` (kg m-1 s-1) and ``pwat`` (kg m-2) on
  (time, lat, lon): the exact column integrals from the top level (200 hPa) to the surface.
* ``basin.geojson``   — one Feature, the invented basin (counter-clockwise, RFC 7946).

Run ``python -m sample_fields.generate [out_dir]`` to regenerate the files in the package
directory (or in ``out_dir``).
"""

from __future__ import annotations

import json
import os
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from budget.errors import RequestError
from budget.outputs import atomic_write

from . import truth as T

LABEL = "Invented demonstration scenario for Fluxfence — not real weather"
LEVELS_NAME = "demo_levels.nc"
COLUMN_NAME = "demo_column.nc"
BASIN_NAME = "basin.geojson"
PACKAGE_DIR = Path(__file__).resolve().parent
_TIME_UNITS = "hours since 2025-01-15 00:00:00"


@dataclass(frozen=True)
class SamplePaths:
    """Paths of the three demo files."""

    levels: Path
    column: Path
    basin: Path

    def all(self) -> tuple[Path, Path, Path]:
        return (self.levels, self.column, self.basin)


def _coords():
    lat = T.LAT[::-1]  # north to south, as many reanalysis files store it
    lon = T.LON
    times = T.file_times()
    return lat, lon, times


def _coord_vars(lat, lon, times):
    return {
        "time": ("time", times, {"standard_name": "time", "long_name": "time (UTC)", "axis": "T"}),
        "lat": ("lat", lat, {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }


def _global_attrs(what: str) -> dict:
    return {
        "title": f"{LABEL}: {what}",
        "comment": (
            LABEL + ". An atmospheric-river-like moisture plume drifting east across a "
            "mountain ridge over five days, built from closed-form fields "
            "(sample_fields/truth.py) so that its water-vapour budget is known exactly. "
            "The winds carry a non-divergent column air-mass flux over a steady surface "
            "pressure, so the dry air closes but for the vapour lost to P - E."
        ),
        "Conventions": "CF-1.8",
        "source": "Fluxfence sample_fields/generate.py (analytic fields, deterministic)",
        "institution": "Fluxfence project (invented data)",
    }


def build_levels() -> xr.Dataset:
    """The pressure-level dataset (float32 values, before encoding)."""
    lat, lon, times = _coords()
    t = T.seconds_since_start(times)
    tt, la, lo = np.meshgrid(t, lat, lon, indexing="ij")
    q, u, v, ps = T.level_values(lo, la, tt)
    # (plev, time, lat, lon) -> (time, plev, lat, lon)
    q, u, v = (round_mantissa(np.moveaxis(x, 0, 1)) for x in (q, u, v))
    ps = round_mantissa(ps)
    coords = _coord_vars(lat, lon, times)
    coords["plev"] = (
        "plev",
        T.LEVELS_PA / 100.0,
        {"standard_name": "air_pressure", "long_name": "pressure level", "units": "hPa", "positive": "down", "axis": "Z"},
    )
    dims4 = ("time", "plev", "lat", "lon")
    below = "values below the ground are the surface values held constant downward (extrapolated, not air)"
    data = {
        "ua": (dims4, u, {"standard_name": "eastward_wind", "long_name": "eastward wind", "units": "m s-1", "comment": below}),
        "va": (dims4, v, {"standard_name": "northward_wind", "long_name": "northward wind", "units": "m s-1", "comment": below}),
        "hus": (dims4, q, {"standard_name": "specific_humidity", "long_name": "specific humidity", "units": "kg kg-1", "comment": below}),
        "ps": (("time", "lat", "lon"), ps, {"standard_name": "surface_air_pressure", "long_name": "surface pressure", "units": "Pa"}),
    }
    return xr.Dataset(data, coords=coords, attrs=_global_attrs("pressure-level winds, humidity and surface pressure"))


def build_column() -> xr.Dataset:
    """The column (pre-integrated) dataset (float32 values, before encoding)."""
    lat, lon, times = _coords()
    t = T.seconds_since_start(times)
    tt, la, lo = np.meshgrid(t, lat, lon, indexing="ij")
    fu, fv = T.vapour_flux(lo, la, tt)
    w = T.precipitable_water(lo, la, tt)
    dims = ("time", "lat", "lon")
    how = "exact column integral (1/g) of the analytic profile from 200 hPa (the top level) to the surface pressure"
    data = {
        "ivt_east": (dims, round_mantissa(fu), {
            "standard_name": "eastward_atmosphere_water_vapor_transport_across_unit_distance",
            "long_name": "eastward vertically integrated water-vapour transport", "units": "kg m-1 s-1", "comment": how}),
        "ivt_north": (dims, round_mantissa(fv), {
            "standard_name": "northward_atmosphere_water_vapor_transport_across_unit_distance",
            "long_name": "northward vertically integrated water-vapour transport", "units": "kg m-1 s-1", "comment": how}),
        "pwat": (dims, round_mantissa(w), {
            "standard_name": "atmosphere_mass_content_of_water_vapor",
            "long_name": "precipitable water", "units": "kg m-2", "comment": how}),
    }
    return xr.Dataset(data, coords=_coord_vars(lat, lon, times), attrs=_global_attrs("column water-vapour transport and precipitable water"))


def basin_geojson() -> dict:
    """The invented basin as a GeoJSON FeatureCollection with one Feature (CCW exterior)."""
    ring = [[float(x), float(y)] for x, y in zip(T.BASIN_LON, T.BASIN_LAT)]
    ring.append(ring[0])
    return {
        "type": "FeatureCollection",
        "features": [{
            "type": "Feature",
            "properties": {"name": T.BASIN_NAME, "comment": LABEL + "; an invented basin, not a real place"},
            "geometry": {"type": "Polygon", "coordinates": [ring]},
        }],
    }


#: Explicit mantissa bits kept in stored values (relative rounding at most 2**-17 ≈ 7.6e-6);
#: the dropped bits are noise for the demo and dropping them halves the compressed size.
MANTISSA_BITS = 16


def round_mantissa(values, keep: int = MANTISSA_BITS) -> np.ndarray:
    """float32 values rounded to nearest with ``keep`` explicit mantissa bits (bit rounding)."""
    a = np.ascontiguousarray(values, dtype=np.float32)
    bits = a.view(np.uint32)
    drop = 23 - keep
    half = np.uint32(1 << (drop - 1))
    mask = np.uint32((0xFFFFFFFF >> drop) << drop)
    return ((bits + half) & mask).view(np.float32)


def _encoding(ds: xr.Dataset) -> dict:
    enc = {}
    for name, var in ds.data_vars.items():
        chunks = tuple(1 if d == "time" else n for d, n in zip(var.dims, var.shape))  # one time per chunk
        enc[name] = {"zlib": True, "complevel": 6, "shuffle": True, "dtype": "float32", "_FillValue": None, "chunksizes": chunks}
    for c in ds.coords:
        enc[c] = {"_FillValue": None}
    enc["time"] = {"units": _TIME_UNITS, "calendar": "proleptic_gregorian", "dtype": "int32", "_FillValue": None}
    return enc


def write_sample(out_dir, overwrite: bool = False) -> SamplePaths:
    """Write the three demo files into ``out_dir`` (created if missing) and return their paths.

    Existing demo files there are kept unless ``overwrite`` is True (raises RequestError).
    """
    out = Path(out_dir).expanduser()
    if out.exists() and not out.is_dir():
        raise RequestError(f"The sample output path {out} is a file, not a directory; give a directory to write the demo files into.")
    paths = SamplePaths(out / LEVELS_NAME, out / COLUMN_NAME, out / BASIN_NAME)
    if not overwrite:
        for p in paths.all():
            if p.exists():
                raise RequestError(f"{p} already exists; choose an empty directory or allow overwriting to replace the demo files.")
    try:
        out.mkdir(parents=True, exist_ok=True)
        for ds, path in ((build_levels(), paths.levels), (build_column(), paths.column)):
            atomic_write(path, lambda tmp, ds=ds: ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=_encoding(ds)))
        atomic_write(paths.basin, _geojson_text(basin_geojson()))
    except PermissionError as exc:
        raise RequestError(f"Cannot write the demo files into {out} ({exc.strerror}); choose a directory you can write to.") from None
    return paths


def _geojson_text(obj: dict) -> str:
    """Indented GeoJSON with one vertex per line."""
    text = json.dumps(obj, indent=1, ensure_ascii=False)
    # collapse the innermost [lon, lat] pairs onto single lines
    import re

    text = re.sub(r"\[\s+(-?[0-9.]+),\s+(-?[0-9.]+)\s+\]", r"[\1, \2]", text)
    return text + "\n"


def _cache_dir() -> Path:
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "fluxfence" / "sample"


def _complete(paths: SamplePaths) -> bool:
    return all(p.is_file() and p.stat().st_size > 0 for p in paths.all())


def ensure_sample(directory=None) -> SamplePaths:
    """Paths of the demo files: the bundled ones when present, otherwise written once.

    The package ships the files next to this module.  When they are missing (e.g. a stripped
    install) they are written to ``directory`` — or to ``$XDG_CACHE_HOME/fluxfence/sample``
    (``~/.cache/fluxfence/sample``) when no directory is given — and reused from there.
    """
    bundled = SamplePaths(PACKAGE_DIR / LEVELS_NAME, PACKAGE_DIR / COLUMN_NAME, PACKAGE_DIR / BASIN_NAME)
    if _complete(bundled):
        return bundled
    target = Path(directory).expanduser() if directory is not None else _cache_dir()
    paths = SamplePaths(target / LEVELS_NAME, target / COLUMN_NAME, target / BASIN_NAME)
    if _complete(paths):
        return paths
    present = [p for p in paths.all() if p.exists()]
    if present:
        raise RequestError(f"{present[0]} exists but the demo set in {target} is incomplete; remove it or choose another directory.")
    return write_sample(target)


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0]) if argv else PACKAGE_DIR
    paths = write_sample(out, overwrite=True)
    for p in paths.all():
        print(f"{p}  {p.stat().st_size / 1024:.0f} KiB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
