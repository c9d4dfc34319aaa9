"""Pieces of the one-sentence messages every stage of budget.fields writes."""

from __future__ import annotations

import xarray as xr

from ..catalogue import role


def where(files: list[str]) -> str:
    """The input named for a message: one file, the first of several, or a dataset."""
    if not files:
        return "the input dataset"
    if len(files) == 1:
        return f"'{files[0]}'"
    return f"'{files[0]}' (and {len(files) - 1} more files)"


def var_hint(key: str) -> str:
    return f"--var {key}=NAME (var_map={{'{key}': 'NAME'}} in Python)"


#: Example units for the keys that are not roles (pressure levels, hybrid coefficients).
_EXAMPLE_UNIT = {"level": "hPa", "p0": "Pa", "ap": "Pa"}


def units_hint(key: str) -> str:
    try:
        ex = role(key).example_unit
    except KeyError:
        ex = _EXAMPLE_UNIT.get(key, "UNIT")
    return f"--units {key}={ex} (units={{'{key}': '{ex}'}} in Python)"


def contents(ds: xr.Dataset) -> str:
    """The data variables of ``ds`` with their standard names, for 'which holds: ...'."""
    items = []
    for n in ds.data_vars:
        std = ds[n].attrs.get("standard_name")
        items.append(f"{n} [{std}]" if std else str(n))
    return ", ".join(items) if items else "no data variables"


def short(exc: BaseException) -> str:
    """The first line of a library's exception, cut to 200 characters."""
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if "did not find a match in any of xarray" in text:  # xarray's wording for "no reader"
        return "its contents are not NetCDF, HDF5 or Zarr"
    return text[:200]


def describe_role(key: str) -> str:
    """'q (specific humidity)'."""
    return f"{key} ({role(key).long_name})"
