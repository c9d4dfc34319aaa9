"""Roles stage of budget.fields: which variable of the raw dataset plays which role.

Detection reads the role catalogue (budget.catalogue): an explicit ``var_map`` first, then
CF standard names, then the common short names.  Level inputs need u, v, q and ps, column
inputs qu, qv and w.  When a level input has no specific humidity, one of the humidity forms
(mixing ratio; relative humidity with temperature; dew point; vapour pressure) stands in for
it and budget.fields.humidity derives q later.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import xarray as xr

from ..catalogue import ALL_ROLES, COLUMN_ROLES, HUMIDITY_FORMS, LEVEL_ROLES, ROLES, role, roles_for
from ..errors import FieldsError
from ..units import TABLES, dimension_of, to_si
from .grid import GridDims
from .hints import contents, describe_role, var_hint
from .levels import hybrid_surface_pressure


@dataclass
class RoleChoice:
    """The roles stage's result.

    kind:        "levels" or "column"
    found:       {role: variable} of the required roles of ``kind`` (q may be absent when
                 ``humidity`` names its sources)
    humidity:    {form: variable} standing in for q (e.g. {"rh": "r", "t": "t"}), else {}
    column:      {role: variable} of all column roles when a level input also holds them
    vdim:        the vertical dimension of level inputs (raw name), else None
    """

    kind: str
    found: dict
    humidity: dict = field(default_factory=dict)
    column: dict = field(default_factory=dict)
    vdim: str | None = None


def spatial_extra_dims(var: xr.DataArray, hdims: set[str]) -> list[str]:
    return [d for d in var.dims if d not in hdims and var.sizes[d] > 1]


def _fits(key: str, var: xr.DataArray, g: GridDims) -> bool:
    if g.lat_dim not in var.dims or g.lon_dim not in var.dims:
        return False
    extra = spatial_extra_dims(var, g.hdims)
    return len(extra) == 1 if role(key).on_levels else len(extra) == 0


def detect(ds: xr.Dataset, keys, var_map: dict, g: GridDims, taken=()) -> dict[str, str]:
    """{role: variable} for the roles in ``keys``: mapped, then standard name, then short name."""
    found: dict[str, str] = {}
    names = list(ds.data_vars)
    used: set[str] = set(taken)
    for key in keys:
        if key in var_map:
            found[key] = var_map[key]
            used.add(var_map[key])
    for key in keys:
        if key in found:
            continue
        for n in names:
            std = ds[n].attrs.get("standard_name")
            if n not in used and std in role(key).standard_names and _fits(key, ds[n], g):
                found[key] = n
                used.add(n)
                break
    for key in keys:
        if key in found:
            continue
        for n in role(key).short_names:
            if n in ds.data_vars and n not in used and _fits(key, ds[n], g):
                found[key] = n
                used.add(n)
                break
    return found


def check_mapping(raw: xr.Dataset, var_map: dict, units: dict, where: str) -> None:
    """Refuse unknown roles, mapped variables the input does not hold, and mapped variables
    whose standard name or units show they are another quantity (--var q=ps)."""
    bad = [r for r in var_map if r not in ALL_ROLES]
    if bad:
        raise FieldsError(
            f"Unknown role '{bad[0]}' in the variable mapping; roles are "
            f"{', '.join(ALL_ROLES)} (e.g. --var q=hus)."
        )
    for key, name in var_map.items():
        if name not in raw.variables or name in raw.dims:
            raise FieldsError(
                f"The variable '{name}' given for {describe_role(key)} is not in "
                f"{where}, which holds: {contents(raw)}; correct {var_hint(key)}."
            )
        _refuse_other_quantity(raw[name], key, name, units, where)


def _refuse_other_quantity(var: xr.DataArray, key: str, name: str, units: dict, where: str):
    """A mapped variable whose CF standard name or units belong to another role only."""
    me = role(key)
    std = var.attrs.get("standard_name")
    clue = None
    if std and std not in me.standard_names:
        other = [r for r in ROLES if std in r.standard_names]
        if other:
            clue = f"its standard name '{std}' marks it as {other[0].long_name}"
            if key == "q" and other[0].key in HUMIDITY_FORMS:
                clue += f" (give it as --var {other[0].key}={name}, and q is derived from it)"
    raw_units = var.attrs.get("units")
    if (clue is None and raw_units is not None and key not in units and name not in units
            and me.dimension in TABLES and to_si(raw_units, me.dimension) is None):
        dims = [d for d in dimension_of(raw_units)]
        if dims:
            clue = f"its units '{raw_units}' are a {dims[0].replace('_', ' ')}, not a {me.dimension.replace('_', ' ')}"
    if clue:
        raise FieldsError(
            f"Variable '{name}' in {where} cannot serve as {describe_role(key)}: {clue}; "
            f"name the right variable with {var_hint(key)}."
        )


def _kind(level_found, column_found, var_map, raw, where, humidity) -> str:
    n_level = len(level_found) + (1 if humidity and "q" not in level_found else 0)
    mapped_level = any(r in var_map for r in LEVEL_ROLES + HUMIDITY_FORMS + ("t",))
    mapped_column = any(r in var_map for r in COLUMN_ROLES)
    if mapped_column and not mapped_level:
        return "column"
    if mapped_level and not mapped_column:
        return "levels"
    if n_level == len(LEVEL_ROLES):
        return "levels"
    if len(column_found) == len(COLUMN_ROLES):
        return "column"
    if level_found and (len(level_found) >= len(column_found) or not column_found):
        return "levels"
    if column_found:
        return "column"
    raise FieldsError(
        f"Found none of the variables Fluxfence needs in {where}, which holds: "
        f"{contents(raw)}; level inputs need u, v, q, ps and column inputs need qu, qv, w "
        "(name them with --var role=NAME, e.g. --var q=hus)."
    )


def _humidity_form(raw, var_map, g, taken) -> dict:
    """{form: variable[, "t": temperature]} of the first humidity form present, else {}."""
    forms = detect(raw, HUMIDITY_FORMS, var_map, g, taken)
    for form in HUMIDITY_FORMS:
        if form in forms:
            out = {form: forms[form]}
            if form in ("rh", "td"):  # temperature: needed for rh, a check for td
                out.update(detect(raw, ("t",), var_map, g, set(taken) | {forms[form]}))
            return out
    return {}


def choose_roles(raw: xr.Dataset, g: GridDims, var_map: dict, units: dict, where: str) -> RoleChoice:
    """The roles stage: the kind of input and the variable behind each role."""
    check_mapping(raw, var_map, units, where)
    level_found = detect(raw, LEVEL_ROLES, var_map, g)
    column_found = detect(raw, COLUMN_ROLES, var_map, g)
    humidity = {}
    if "q" not in level_found and "u" in level_found:
        humidity = _humidity_form(raw, var_map, g, set(level_found.values()))
    kind = _kind(level_found, column_found, var_map, raw, where, humidity)
    found = level_found if kind == "levels" else column_found
    vdim = None
    if kind == "levels":
        for key in ("u", "v", "q"):
            if key in found:
                ex = spatial_extra_dims(raw[found[key]], g.hdims)
                if len(ex) == 1:
                    vdim = ex[0]
                    break
        psn = hybrid_surface_pressure(raw, vdim) if "ps" not in var_map else None
        if psn:  # hybrid coordinates name their own surface pressure
            found["ps"] = psn
    choice = RoleChoice(kind, found, humidity if kind == "levels" else {}, {}, vdim)
    _refuse_missing(choice, raw, where)
    if kind == "levels" and len(column_found) == len(COLUMN_ROLES):
        choice.column = column_found
    for key, name in {**found, **choice.humidity}.items():
        check_dims(key, name, raw, g, where, g.time_dim)
    if kind == "levels":
        _same_levels(choice, raw, g, where)
    return choice


def _refuse_missing(choice: RoleChoice, raw, where) -> None:
    needed = LEVEL_ROLES if choice.kind == "levels" else COLUMN_ROLES
    missing = [r for r in needed if r not in choice.found]
    if "q" in missing and choice.humidity:
        missing.remove("q")
        if "rh" in choice.humidity and "t" not in choice.humidity:
            raise FieldsError(
                f"Relative humidity '{choice.humidity['rh']}' in {where} needs the air "
                f"temperature on the same levels to give specific humidity, and {where} holds "
                f"none; add it to the inputs or name it with {var_hint('t')}."
            )
    if missing:
        names = ", ".join(describe_role(r) for r in missing)
        other = (" (or give relative humidity with temperature, the dew point, the mixing ratio "
                 "or the vapour pressure, e.g. --var rh=NAME --var t=NAME)") if missing[0] == "q" else ""
        raise FieldsError(
            f"No variable found for {names} in {where}, which holds: {contents(raw)}; "
            f"name it with {var_hint(missing[0])}{other}."
        )


def _same_levels(choice: RoleChoice, raw, g: GridDims, where) -> None:
    on_levels = [k for k in ("u", "v", "q") if k in choice.found] + list(choice.humidity)
    first = choice.found["u"]
    for key in on_levels:
        name = choice.found.get(key, choice.humidity.get(key))
        ex = spatial_extra_dims(raw[name], g.hdims)
        if ex[0] != choice.vdim:
            raise FieldsError(
                f"Variables '{first}' and '{name}' in {where} lie on different "
                f"vertical coordinates ('{choice.vdim}' and '{ex[0]}'); u, v and q must share "
                "one set of levels."
            )


def check_dims(key, name, raw, g: GridDims, where, time_dim=None):
    """Refuse a variable whose dims do not suit its role, naming variable, role and file."""
    var = raw[name]
    what = describe_role(key)
    if time_dim is not None and time_dim not in var.dims:
        raise FieldsError(
            f"Variable '{name}' chosen for {what} in {where} has no "
            f"'{time_dim}' dimension while the file has one; give it the time dimension or name "
            f"another variable with {var_hint(key)}."
        )
    if g.lat_dim not in var.dims or g.lon_dim not in var.dims:
        raise FieldsError(
            f"Variable '{name}' chosen for {what} in {where} is not "
            f"on the latitude-longitude grid (its dims are {', '.join(map(str, var.dims))}); "
            f"name another variable with {var_hint(key)}."
        )
    extra = spatial_extra_dims(var, g.hdims)
    if role(key).on_levels and len(extra) != 1:
        if not extra:
            raise FieldsError(
                f"Variable '{name}' chosen for {what} in {where} has "
                f"no vertical dimension; level inputs need {key} on pressure or hybrid levels "
                f"(name another variable with {var_hint(key)}, or give column inputs qu, qv, w)."
            )
        raise FieldsError(
            f"Variable '{name}' in {where} has more than one dimension besides time, latitude "
            f"and longitude ({', '.join(extra)}); select one member or level set first."
        )
    if not role(key).on_levels and extra:
        raise FieldsError(
            f"Variable '{name}' chosen for {what} in {where} has an "
            f"extra dimension '{extra[0]}' of size {var.sizes[extra[0]]}; it must be a 2-D "
            f"field in time (name another variable with {var_hint(key)})."
        )


def optional_roles(raw, choice: RoleChoice, var_map, g: GridDims, where, notes, check_units):
    """{role: variable} of the optional roles present and usable; detected ones that do not fit
    are left out with a note, mapped ones (var_map) that do not fit raise FieldsError.
    ``check_units(key, name)`` raises FieldsError when a unit cannot be converted."""
    keys = roles_for(choice.kind, required=False)
    taken = set(choice.found.values()) | set(choice.humidity.values())
    cand = detect(raw, keys, {r: n for r, n in var_map.items() if r in keys}, g, taken)
    out = {}
    for key, src in cand.items():
        try:
            check_dims(key, src, raw, g, where)
            if role(key).on_levels:
                ex = spatial_extra_dims(raw[src], g.hdims)
                if ex[0] != choice.vdim:
                    raise FieldsError(
                        f"Variable '{src}' ({role(key).long_name}) in {where} lies on '{ex[0]}', "
                        f"not on the levels '{choice.vdim}' of the winds; give it on the same levels."
                    )
            check_units(key, src)
        except FieldsError as exc:
            if key in var_map:
                raise
            notes.append(f"'{src}' was not used as {role(key).long_name}: {exc}")
            continue
        out[key] = src
    return out
