"""GRIB1 and GRIB2 input through cfgrib and the ecCodes wheels.

A GRIB file is a sequence of messages, each one field on one level type. cfgrib groups the
messages into hypercubes that share their keys; this module picks, for each budget role, the
messages it needs — winds and humidity on one vertical type (isobaricInhPa / isobaricInPa, or
hybrid model levels),
surface pressure on `surface`, pre-integrated columns on `atmosphereSingleLayer`,
`entireAtmosphere` or `surface` — and returns one dataset that looks like a CF NetCDF file:

* the vertical coordinate is `level` (hPa or Pa, standard_name air_pressure) holding only the
  levels every level variable of the budget shares; levels dropped because one variable
  lacks them are named in a warning (the GFS 2.5° product has no humidity at 20 hPa); on model
  levels it is the level number with a CF hybrid sigma-pressure coordinate from the pv array;
* `time` is the valid time (analysis time plus forecast step);
* winds carry the CF standard name that says how they are oriented: eastward_wind on
  longitude-latitude grids and when `uvRelativeToGrid` is 0, grid_eastward_wind when it is 1;
* a projected grid (Lambert conformal, polar stereographic, rotated longitude-latitude) comes
  with a CF grid-mapping variable `crs` built from the GRIB grid keys, and 2-D latitude and
  longitude;
* every variable says which messages served it in `source_message` (provenance).
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from .errors import FieldsError

#: Vertical types read as pressure levels, in order of preference.
PRESSURE_TYPES = {"isobaricInhPa": "hPa", "isobaricInPa": "Pa"}
#: Hybrid sigma-pressure model levels: level k lies between interfaces k-1 and k of the
#: message's pv array (a in Pa, then b), WMO GRIB2 code table 4.5 value 105.
HYBRID_TYPE = "hybrid"
#: Level types that hold surface fields and pre-integrated columns.
SURFACE_TYPES = ("surface",)
COLUMN_TYPES = ("atmosphereSingleLayer", "entireAtmosphere", "surface")
#: GRIB grid types on a regular longitude-latitude (or Gaussian) grid: winds earth-relative.
LONLAT_TYPES = ("regular_ll", "regular_gg")
#: GRIB keys cfgrib must read besides its defaults (grid shape of the Earth, rotation).
EXTRA_KEYS = [
    "shapeOfTheEarth", "radius", "uvRelativeToGrid", "resolutionAndComponentFlags", "projectionCentreFlag",
    "orientationOfTheGridInDegrees", "angleOfRotationInDegrees", "LaDInDegrees",
]
#: Bit 5 of the resolution and component flags (GRIB1 table 7, GRIB2 flag table 3.3): winds
#: relative to the grid's x/y axes. Read when ecCodes defines no uvRelativeToGrid for the grid
#: template (its GRIB2 polar stereographic template, 3.20).
GRID_RELATIVE_BIT = 8
MAGIC = b"GRIB"
#: File name endings taken as GRIB without reading the file (a file starting with "GRIB" is too).
SUFFIXES = (".grib", ".grb", ".grib1", ".grib2", ".grb1", ".grb2")


def is_grib(path: str) -> bool:
    """True when the file starts like a GRIB message (or is named like one)."""
    if os.path.isdir(path):
        return False
    if path.lower().endswith(SUFFIXES):
        return True
    try:
        with open(path, "rb") as f:
            return f.read(4) == MAGIC
    except OSError:
        return False


@dataclass
class GribInput:
    """One GRIB file as a CF-like dataset, with what was read from where."""

    ds: xr.Dataset
    path: str
    warnings: list = field(default_factory=list)
    notes: list = field(default_factory=list)


def _cfgrib(path: str):
    try:
        import cfgrib  # noqa: F401
        import eccodes

        eccodes.codes_get_api_version()
    except Exception as exc:  # ImportError, or the ecCodes library missing behind the binding
        raise FieldsError(
            f"Reading the GRIB file '{path}' needs cfgrib with the ecCodes library, which is not "
            f"available here ({str(exc).splitlines()[0] if str(exc) else type(exc).__name__}); install them with "
            "'pip install cfgrib eccodes' (the eccodes wheel brings the library) or convert the file to NetCDF."
        ) from None
    return cfgrib


def _index_path(path: str) -> str:
    """Where cfgrib keeps its message index: a private temporary folder, never beside the
    input (an input is never an output). Keyed by the file's path, size, time stamp and the
    keys read (EXTRA_KEYS)."""
    import hashlib
    import tempfile

    st = os.stat(path)
    # the keys read are part of the index: an index built with other keys is refused by cfgrib
    key = hashlib.sha256(f"{os.path.abspath(path)}|{st.st_size}|{st.st_mtime_ns}|{','.join(EXTRA_KEYS)}".encode()).hexdigest()[:24]
    folder = os.path.join(tempfile.gettempdir(), f"fluxfence-grib-index-{os.getuid()}")
    os.makedirs(folder, mode=0o700, exist_ok=True)
    return os.path.join(folder, key + ".{short_hash}.idx")


def _groups(path: str) -> list[xr.Dataset]:
    cfgrib = _cfgrib(path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            groups = cfgrib.open_datasets(path, backend_kwargs={"indexpath": _index_path(path), "read_keys": EXTRA_KEYS})
    except Exception as exc:  # noqa: BLE001 - any decoder failure is the user's file
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise FieldsError(f"Cannot decode the GRIB file '{path}' ({first}); check that the file is complete.") from None
    if not groups:
        raise FieldsError(f"The GRIB file '{path}' holds no messages cfgrib can read; check that it is complete.")
    return groups


def _type_of(var: xr.DataArray) -> str:
    return str(var.attrs.get("GRIB_typeOfLevel", ""))


def _message_text(var: xr.DataArray, path: str, levels=None) -> str:
    a = var.attrs
    text = (
        f"GRIB messages shortName={a.get('GRIB_shortName', var.name)} "
        f"paramId={a.get('GRIB_paramId', '?')} typeOfLevel={a.get('GRIB_typeOfLevel', '?')}"
    )
    if levels is not None:
        text += f" on {len(levels)} levels ({_fmt_levels(levels)})"
    return f"{text} in {os.path.basename(path)}"


def _fmt_levels(levels) -> str:
    vals = [f"{v:g}" for v in np.asarray(levels, float)]
    return ", ".join(vals) if len(vals) <= 4 else f"{vals[0]}..{vals[-1]}"


# -- choosing the messages ----------------------------------------------------------------
def _names(where: tuple) -> set:
    """Short names of the catalogue's roles read at the given places (level / surface / column)."""
    from .catalogue import ROLES

    return {n for r in ROLES if r.where in where for n in r.short_names}


def _by_type(groups) -> dict:
    out: dict = {}
    for g in groups:
        for name, var in g.data_vars.items():
            out.setdefault(_type_of(var), {}).setdefault(str(name), var)
    return out


def _level_vars(by_type: dict, path: str):
    """(vertical type, {name: var}) of the budget's level variables, or (None, {})."""
    wanted = _names(("level",))
    for vtype in PRESSURE_TYPES:
        found = {n: v for n, v in by_type.get(vtype, {}).items() if n in wanted}
        if "u" in found or "v" in found:
            return vtype, found
    found = {n: v for n, v in by_type.get(HYBRID_TYPE, {}).items() if n in wanted}
    if "u" in found or "v" in found:
        return HYBRID_TYPE, found
    for vtype in ("generalVertical", "sigma"):
        if any(n in ("u", "v") for n in by_type.get(vtype, {})):
            raise FieldsError(
                f"The winds in the GRIB file '{path}' are on {vtype} levels, which Fluxfence does not read from "
                "GRIB; request the fields on pressure levels (isobaricInhPa) or hybrid model levels, or convert them "
                "to a CF NetCDF with hybrid coefficients."
            )
    return None, {}


def _shared_levels(found: dict, vtype: str, path: str, warn: list):
    """Levels every required level variable has; optional ones without them are left out."""
    from .catalogue import ROLES

    optional = {n for r in ROLES if r.where == "level" and not r.required and r.key in ("ql", "qi") for n in r.short_names}
    core = {n: v for n, v in found.items() if n not in optional}
    sets = {n: set(np.atleast_1d(v[vtype].values).tolist()) if vtype in v.dims or vtype in v.coords else set() for n, v in core.items()}
    shared = set.intersection(*sets.values()) if sets else set()
    everything = set.union(*sets.values()) if sets else set()
    unit = "hPa" if vtype == "isobaricInhPa" else "Pa" if vtype in PRESSURE_TYPES else "(model level numbers)"
    if shared != everything:
        lacking = sorted(n for n, s in sets.items() if s != everything)
        dropped = sorted(everything - shared, reverse=True)
        warn.append(
            f"Levels {_fmt_levels(dropped)} {unit} are dropped: {', '.join(repr(n) for n in lacking)} in "
            f"{os.path.basename(path)} has no values there, so the budget uses the {len(shared)} levels "
            "every level variable shares."
        )
    if not shared:
        raise FieldsError(
            f"The level variables in the GRIB file '{path}' share no {vtype} level; supply winds and humidity "
            "on the same pressure levels."
        )
    keep = sorted(shared, reverse=True)
    out = {}
    for n, v in found.items():
        have = set(np.atleast_1d(v[vtype].values).tolist())
        if not shared <= have:
            warn.append(f"'{n}' in {os.path.basename(path)} lacks some of the shared levels and is left out.")
            continue
        out[n] = v.sel({vtype: keep}) if vtype in v.dims else v
    return out, keep


def _valid_time(var: xr.DataArray, path: str) -> xr.DataArray:
    """The variable on a `time` dimension holding the valid time (analysis time + step)."""
    dims = set(var.dims)
    if "number" in dims and var.sizes["number"] > 1:
        raise FieldsError(
            f"'{var.name}' in the GRIB file '{path}' holds {var.sizes['number']} ensemble members; "
            "split out one member (e.g. with grib_copy -w number=0) and pass that file."
        )
    if "time" in dims and "step" in dims:
        raise FieldsError(
            f"'{var.name}' in the GRIB file '{path}' has several analysis times and several forecast steps; "
            "pass analyses, or the steps of one forecast, in separate files."
        )
    if "step" in dims:
        var = var.swap_dims(step="valid_time")
    elif "time" in dims:
        var = var.assign_coords(valid_time=("time", np.atleast_1d(var["valid_time"].values))).swap_dims(time="valid_time")
    else:
        var = var.expand_dims(valid_time=np.atleast_1d(var["valid_time"].values))
    drop = [c for c in var.coords if c not in var.dims and c not in ("latitude", "longitude")]
    var = var.drop_vars(drop + [c for c in ("time",) if c in var.coords]).rename(valid_time="time")
    return var.squeeze([d for d in ("number",) if d in var.dims], drop=True)


def _winds(var: xr.DataArray, path: str, grid_type: str) -> dict:
    """CF standard name of a wind component from the file's own orientation flag."""
    comp = "eastward" if var.name == "u" else "northward"
    flag = var.attrs.get("GRIB_uvRelativeToGrid")
    bits = var.attrs.get("GRIB_resolutionAndComponentFlags")
    if flag is None and isinstance(bits, (int, np.integer)):
        flag = 1 if int(bits) & GRID_RELATIVE_BIT else 0
    if grid_type in LONLAT_TYPES and flag in (None, 0):
        return {"standard_name": f"{comp}_wind"}
    if flag in (0, 1):
        return {"standard_name": f"grid_{comp}_wind" if flag == 1 else f"{comp}_wind"}
    raise FieldsError(
        f"The orientation of the wind '{var.name}' in the GRIB file '{path}' cannot be told (no "
        f"uvRelativeToGrid flag on a {grid_type} grid); rewrite the messages with resolutionAndComponentFlags set, "
        "or convert them to NetCDF with standard_name eastward_wind or grid_eastward_wind."
    )


_EARTH = {0: 6367470.0, 6: 6371229.0, 8: 6371200.0}


def _earth_radius(a: dict, path: str) -> float:
    shape = a.get("GRIB_shapeOfTheEarth")
    if shape in _EARTH:
        return _EARTH[shape]
    if shape == 1 and a.get("GRIB_radius"):
        return float(a["GRIB_radius"])
    return 6371229.0  # the GRIB1 / NCEP sphere (WMO Manual on Codes, GRIB code table 3.2)


def grid_mapping_of(var: xr.DataArray, path: str) -> dict | None:
    """CF grid-mapping attributes from a message's grid keys (None on lon-lat grids).

    GRIB2 template 3.30 (Lambert), 3.20 (polar stereographic) and 3.1 (rotated lon-lat, given
    by its southern pole) mapped to CF appendix F.
    """
    a = var.attrs
    gt = a.get("GRIB_gridType", "")
    if gt in LONLAT_TYPES:
        return None
    if gt == "lambert":
        return {
            "grid_mapping_name": "lambert_conformal_conic",
            "standard_parallel": (float(a["GRIB_Latin1InDegrees"]), float(a["GRIB_Latin2InDegrees"])),
            "longitude_of_central_meridian": float(a["GRIB_LoVInDegrees"]),
            "latitude_of_projection_origin": float(a["GRIB_LaDInDegrees"]),
            "earth_radius": _earth_radius(a, path),
        }
    if gt == "polar_stereographic":
        south = int(a.get("GRIB_projectionCentreFlag", 0)) & 128
        return {
            "grid_mapping_name": "polar_stereographic",
            "straight_vertical_longitude_from_pole": float(a.get("GRIB_orientationOfTheGridInDegrees", a.get("GRIB_LoVInDegrees", 0.0))),
            "latitude_of_projection_origin": -90.0 if south else 90.0,
            "standard_parallel": float(a.get("GRIB_LaDInDegrees", -60.0 if south else 60.0)),
            "earth_radius": _earth_radius(a, path),
        }
    if gt == "rotated_ll":
        return {
            "grid_mapping_name": "rotated_latitude_longitude",
            "grid_north_pole_latitude": -float(a["GRIB_latitudeOfSouthernPoleInDegrees"]),
            "grid_north_pole_longitude": (float(a["GRIB_longitudeOfSouthernPoleInDegrees"]) + 360.0) % 360.0 - 180.0,
            "north_pole_grid_longitude": -float(a.get("GRIB_angleOfRotationInDegrees", 0.0)),
        }
    raise FieldsError(
        f"The grid of '{var.name}' in the GRIB file '{path}' is of type {gt or 'unknown'}, which Fluxfence does not "
        "read; regrid it to a regular longitude-latitude, Lambert, polar stereographic or rotated-pole grid."
    )


_KEEP_ATTRS = ("GRIB_shortName", "GRIB_paramId", "GRIB_typeOfLevel", "GRIB_gridType", "GRIB_uvRelativeToGrid", "long_name", "units", "standard_name")


def _tidy(var: xr.DataArray, path: str, levels=None, vtype=None) -> xr.DataArray:
    src = _message_text(var, path, levels)
    grid_type = var.attrs.get("GRIB_gridType", "")
    attrs = {k: var.attrs[k] for k in _KEEP_ATTRS if k in var.attrs}
    if attrs.get("standard_name") in ("unknown", None, ""):
        attrs.pop("standard_name", None)
    if var.name in ("u", "v") and vtype is not None:
        attrs.update(_winds(var, path, grid_type))
    attrs["source_message"] = src
    var = _valid_time(var, path)
    if vtype is not None:
        if vtype not in var.dims:
            var = var.expand_dims(vtype)
        var = var.rename({vtype: "level"})
    var.attrs = attrs
    return var


def open_grib(path: str) -> GribInput:
    """One GRIB1/GRIB2 file as a CF-like, lazy xarray.Dataset with the budget's variables."""
    path = os.fspath(path)
    by_type = _by_type(_groups(path))
    warn: list = []
    out: dict = {}
    raw: list = []
    vtype, found = _level_vars(by_type, path)
    if found:
        chosen, levels = _shared_levels(found, vtype, path, warn)
        out.update({n: _tidy(v, path, levels, vtype) for n, v in chosen.items()})
        raw.extend(chosen.values())
    surface = _names(("surface",))
    column = _names(("column",))
    for t in dict.fromkeys(SURFACE_TYPES + COLUMN_TYPES):
        for n, v in by_type.get(t, {}).items():
            if n not in out and ((t in SURFACE_TYPES and n in surface) or (t in COLUMN_TYPES and n in column)):
                out[n] = _tidy(v, path)
                raw.append(v)
    if not out:
        kinds = ", ".join(sorted(f"{n} ({t})" for t, vs in by_type.items() for n in vs)[:12])
        raise FieldsError(
            f"The GRIB file '{path}' holds none of the variables a budget needs (it has {kinds}); supply winds and "
            "humidity on pressure levels with surface pressure, or vertically integrated fluxes."
        )
    try:
        xr.align(*out.values(), join="exact")
        ds = xr.Dataset(out)
    except ValueError as exc:
        raise FieldsError(
            f"The messages of the GRIB file '{path}' are on different grids or times ({str(exc).splitlines()[0]}); "
            "split the file so that each holds one grid."
        ) from None
    if "level" in ds.coords and vtype == HYBRID_TYPE:
        ds = hybrid_coordinate(ds, path, by_type, warn)
    elif "level" in ds.coords:
        ds["level"].attrs = {"units": PRESSURE_TYPES[vtype], "standard_name": "air_pressure", "long_name": "pressure", "positive": "down"}
    mapping = grid_mapping_of(raw[0], path)
    if mapping is not None:
        ds["crs"] = xr.DataArray(0, attrs=mapping)
        for n in out:
            ds[n].attrs["grid_mapping"] = "crs"
    ds.attrs = {"source": path, "Conventions": "CF-1.8", "history": f"read from GRIB by Fluxfence (cfgrib) from {os.path.basename(path)}"}
    return GribInput(ds, path, warn, [f"{n}: {v.attrs['source_message']}" for n, v in out.items()])


# -- hybrid model levels ----------------------------------------------------------------------
def _pv(path: str):
    """The pv array (a coefficients in Pa, then b) of the first hybrid-level message, or None."""
    import eccodes

    with open(path, "rb") as f:
        while (h := eccodes.codes_grib_new_from_file(f)) is not None:
            try:
                if eccodes.codes_get(h, "typeOfLevel") == HYBRID_TYPE and eccodes.codes_get(h, "PVPresent"):
                    return np.asarray(eccodes.codes_get_array(h, "pv"), float)
            finally:
                eccodes.codes_release(h)
    return None


def _log_surface_pressure(ds: xr.Dataset, path: str, by_type: dict) -> xr.Dataset:
    """Surface pressure sp = exp(lnsp) when the file has lnsp (ECMWF: on hybrid level 1) but no sp."""
    lnsp = next((v for t in (HYBRID_TYPE,) + SURFACE_TYPES for n, v in by_type.get(t, {}).items() if n == "lnsp"), None)
    if "sp" in ds or lnsp is None:
        return ds
    var = _tidy(lnsp, path)
    var = var.drop_vars([c for c in var.coords if c not in var.dims and c not in ("latitude", "longitude")])
    sp = np.exp(var)
    sp.attrs = {"units": "Pa", "standard_name": "surface_air_pressure", "long_name": "surface pressure",
                "source_message": f"exp of the {var.attrs['source_message']}"}
    try:
        return ds.assign(sp=xr.align(sp, ds, join="exact")[0])
    except ValueError:
        raise FieldsError(
            f"The log surface pressure 'lnsp' in the GRIB file '{path}' is not on the grid and times of the winds; "
            "supply it for the same grid and times."
        ) from None


def hybrid_coordinate(ds: xr.Dataset, path: str, by_type: dict, warn: list) -> xr.Dataset:
    """A CF hybrid sigma-pressure coordinate (CF appendix D, `ap: ap b: b ps: sp`, with bounds)
    for model levels numbered k = 1..N, from the messages' pv array: level k lies between
    interfaces k-1 and k, a in Pa and b dimensionless (WMO Manual on Codes, GRIB2 section 4)."""
    pv = _pv(path)
    if pv is None or pv.size < 4 or pv.size % 2:
        raise FieldsError(
            f"The model-level messages in the GRIB file '{path}' carry no vertical coefficients (pv array), so "
            "their pressures cannot be known; write the messages with PVPresent=1 and the a/b coefficients."
        )
    a, b = pv[: pv.size // 2], pv[pv.size // 2:]
    k = np.asarray(ds["level"].values, float).astype(int)
    if k.min() < 1 or k.max() > a.size - 1:
        raise FieldsError(
            f"The model levels of the GRIB file '{path}' run to {k.max()}, but its pv array describes "
            f"{a.size - 1} levels; supply messages whose pv array matches their levels."
        )
    ds = _log_surface_pressure(ds, path, by_type)
    lev = ("level",)
    ds = ds.assign(
        ap=(lev, 0.5 * (a[k - 1] + a[k]), {"units": "Pa", "long_name": "hybrid coefficient a at the level"}),
        b=(lev, 0.5 * (b[k - 1] + b[k]), {"units": "1", "long_name": "hybrid coefficient b at the level"}),
        ap_bnds=(("level", "nv"), np.stack([a[k - 1], a[k]], axis=1), {"units": "Pa"}),
        b_bnds=(("level", "nv"), np.stack([b[k - 1], b[k]], axis=1), {"units": "1"}),
        level_bnds=(("level", "nv"), np.stack([k - 0.5, k + 0.5], axis=1).astype(float),
                    {"formula_terms": "ap: ap_bnds b: b_bnds ps: sp"}),
    )
    ds = ds.set_coords(["ap", "b", "ap_bnds", "b_bnds", "level_bnds"])
    ds["level"].attrs = {
        "standard_name": "atmosphere_hybrid_sigma_pressure_coordinate", "long_name": "model level number",
        "units": "1", "positive": "down", "formula_terms": "ap: ap b: b ps: sp", "bounds": "level_bnds",
    }
    if k.size < a.size - 1:
        warn.append(f"Model levels {k.min()}..{k.max()} of {a.size - 1} are in {os.path.basename(path)}; the column "
                    "integrals cover only the layers between them.")
    return ds


# -- joining GRIB with other files ------------------------------------------------------------
def _horizontal_names(ds: xr.Dataset) -> tuple:
    """(latitude, longitude) coordinate names by standard name, else by usual names."""
    out = []
    for std, names in (("latitude", ("latitude", "lat")), ("longitude", ("longitude", "lon"))):
        hit = [n for n in ds.coords if ds[n].attrs.get("standard_name") == std]
        hit += [n for n in names if n in ds.variables]
        out.append(hit[0] if hit else None)
    return tuple(out)


def join_inputs(parts: list, where: str) -> xr.Dataset:
    """GRIB datasets (several times) and NetCDF datasets (other variables) of one grid as one.

    GRIB datasets are combined along time; every other file is put on the first GRIB
    dataset's coordinate names and values (a NetCDF of surface pressure beside GRIB levels).
    """
    gribs = [d for p, d in parts if is_grib(p)]
    others = [(p, d) for p, d in parts if not is_grib(p)]
    try:
        base = gribs[0] if len(gribs) == 1 else xr.combine_by_coords(gribs, combine_attrs="drop_conflicts")
    except ValueError as exc:
        raise FieldsError(
            f"The GRIB files {where} cannot be joined by time ({str(exc).splitlines()[0]}); pass files of one grid "
            "and one set of variables, differing only in time."
        ) from None
    lat, lon = _horizontal_names(base)
    for path, d in others:
        olat, olon = _horizontal_names(d)
        if olat is None or olon is None:
            raise FieldsError(f"'{path}' has no latitude/longitude coordinates to match the GRIB grid; add them.")
        d = d.rename({k: v for k, v in ((olat, lat), (olon, lon)) if k != v})
        if base[lat].ndim == 1:
            try:
                d = d.sel({lat: base[lat].values, lon: base[lon].values}, method="nearest", tolerance=1e-6)
            except KeyError:
                raise FieldsError(
                    f"'{path}' is not on the grid of the GRIB file(s) {where}; regrid it to the same latitudes "
                    "and longitudes."
                ) from None
        tname = "time" if "time" in d.dims else None
        if tname is not None:
            missing = np.setdiff1d(base["time"].values, d["time"].values)
            if missing.size:
                raise FieldsError(
                    f"'{path}' lacks {missing.size} of the GRIB times (first {str(missing[0])[:16]}); supply the "
                    "same times in both."
                )
            d = d.sel(time=base["time"].values)
        base = base.merge(d[[v for v in d.data_vars if v not in base]], compat="override", join="left")
    return base
