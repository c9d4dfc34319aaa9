"""Units stage of budget.fields: the canonical variables, renamed, transposed and in SI.

Each role's unit is read from its variable's own attribute (or the user's override) and
converted with budget.units; nothing is guessed.  Precipitation and evaporation keep their
units here (budget.observed tells rates from accumulated amounts).  When the input was opened
without dask (one file), the conversions are deferred until the data is chunked
(`apply_deferred`), because arithmetic on a plain lazy array would load it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..catalogue import COLUMN_ROLES, LEVEL_ROLES, role
from ..errors import FieldsError
from ..units import Conversion, accepted, to_si
from .grid import GridDims
from .hints import units_hint

#: Optional roles whose units are read (not converted) here: budget.observed converts them.
RAW_UNITS = {"precip", "evap"}
CANONICAL_ORDER = ("time", "level", "lat", "lon", "y", "x")


def conversion(key: str, src: str, da: xr.DataArray, units: dict, where: str) -> tuple[Conversion, str]:
    """The conversion of variable ``src`` (role ``key``) to SI and the unit it was read in."""
    r = role(key)
    given = units.get(key, units.get(src))
    raw = given if given is not None else da.attrs.get("units")
    if raw is None or str(raw).strip() == "":
        raise FieldsError(
            f"Variable '{src}' ({r.long_name}) in {where} has no units attribute; "
            f"state its unit with {units_hint(key)}."
        )
    conv = to_si(raw, r.dimension)
    if conv is None:
        raise FieldsError(
            f"Variable '{src}' ({r.long_name}) in {where} has units '{raw}', which "
            f"Fluxfence cannot convert to {r.si_unit} (accepted: {accepted(r.dimension)}); if the "
            f"attribute is wrong, override it with {units_hint(key)}."
        )
    return conv, str(raw)


@dataclass
class Canonical:
    """The units stage's result: canonical datasets and the conversions still to apply."""

    ds: xr.Dataset
    column_ds: xr.Dataset | None = None
    column_roles: dict = field(default_factory=dict)
    extra_roles: dict = field(default_factory=dict)
    deferred: dict = field(default_factory=dict)  # {role: Conversion} applied once chunked
    notes: list = field(default_factory=list)


@dataclass(frozen=True)
class _Builder:
    raw: xr.Dataset
    g: GridDims
    vdim: str | None
    units: dict
    where: str
    defer: bool

    def rename(self) -> dict:
        out = {self.g.lat_dim: self.g.canon[0], self.g.lon_dim: self.g.canon[1]}
        if self.g.time_dim is not None:
            out[self.g.time_dim] = "time"
        if self.vdim is not None:
            out[self.vdim] = "level"
        return out

    def variable(self, key: str, src: str, deferred: dict) -> xr.DataArray:
        da = self.raw[src]
        for d in list(da.dims):
            if d not in self.g.hdims and d != self.vdim:  # size-1 extra dims (checked before)
                da = da.isel({d: 0})
        da = da.reset_coords(drop=True)
        da = da.drop_vars([c for c in da.coords], errors="ignore")
        da = da.rename({k: v for k, v in self.rename().items() if k in da.dims and k != v})
        da = da.transpose(*[d for d in CANONICAL_ORDER if d in da.dims])
        if key in RAW_UNITS:  # precipitation / evaporation: budget.observed reads units
            meta = {k: v for k, v in self.raw[src].attrs.items()
                    if isinstance(v, (str, int, float, np.integer, np.floating))}
            given = self.units.get(key, self.units.get(src))
            if given is not None:
                meta["source_units"], meta["units"] = meta.get("units", ""), str(given)
            da.attrs = {**meta, "source_name": src}
            da.name = key
            return da
        conv, raw_units = conversion(key, src, da, self.units, self.where)
        if not conv.identity:
            if self.defer:
                deferred[key] = conv  # applied once chunked (arithmetic would load the data)
            else:
                da = conv.apply(da)
        r = role(key)
        da.attrs = {"units": r.si_unit, "long_name": r.long_name, "source_name": src,
                    "source_units": raw_units}
        if "source_message" in self.raw[src].attrs:  # which GRIB messages served (budget.grib)
            da.attrs["source_message"] = self.raw[src].attrs["source_message"]
        if r.standard_names:
            da.attrs["standard_name"] = r.standard_names[0]
        da.name = key
        return da


def canonical(raw, g: GridDims, choice, extra_roles: dict, units: dict, where: str,
              defer: bool) -> Canonical:
    """The units stage: every chosen role as a canonical SI variable (lazy)."""
    b = _Builder(raw, g, choice.vdim, units, where, defer)
    deferred: dict = {}
    needed = LEVEL_ROLES if choice.kind == "levels" else COLUMN_ROLES
    chosen = {r: choice.found[r] for r in needed if r in choice.found}
    chosen.update(choice.humidity)
    ds = xr.Dataset({r: b.variable(r, src, deferred) for r, src in chosen.items()})
    for r, src in extra_roles.items():
        ds[r] = b.variable(r, src, deferred)
    out = Canonical(ds, extra_roles=dict(extra_roles), deferred=deferred)
    if choice.column:
        try:
            out.column_ds = xr.Dataset({r: b.variable(r, choice.column[r], deferred)
                                        for r in COLUMN_ROLES})
            out.column_roles = dict(choice.column)
        except FieldsError as exc:
            out.notes.append(f"column fields were ignored: {exc}")
    return out


def apply_deferred(d: xr.Dataset | None, chunks: dict, deferred: dict) -> xr.Dataset | None:
    """Dask-chunk a lazily opened canonical dataset and apply the deferred conversions."""
    if d is None:
        return None
    attrs = {r: dict(d[r].attrs) for r in d.data_vars}
    d = d.chunk({k: v for k, v in chunks.items() if k in d.dims} or {})
    for r, conv in deferred.items():
        if r in d:
            d[r] = conv.apply(d[r])
            d[r].attrs = attrs[r]
    return d
