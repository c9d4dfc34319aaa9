"""Checks stage of budget.fields: cheap plausibility checks on a thinned sample of the first
time step, to catch a wrong units label before anything is computed.

The every-block checks on every value the budget reads belong to the engine (budget.blocks
or the ledger); the ranges come from the role catalogue (budget.catalogue: common practice,
no single source).
"""

from __future__ import annotations

import warnings as _warnings

import numpy as np
import xarray as xr

from ..catalogue import role
from ..errors import FieldsError
from ..units import to_si
from .hints import units_hint


def sample(da: xr.DataArray) -> np.ndarray:
    """A few hundred values of the first time step (all levels), read cheaply."""
    sub = da.isel(time=0)
    sl = {}
    for d in [d for d in ("lat", "lon", "y", "x") if d in sub.dims]:
        n = sub.sizes[d]
        sl[d] = slice(None, None, max(1, n // 24))
    sub = sub.isel(sl)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        return np.asarray(sub.values, dtype=float)


def plausible(ds: xr.Dataset, found: dict, where: str) -> None:
    """Refuse specific humidity or surface pressure whose sample shows a wrong unit label."""
    if "q" in ds:
        _check_q(ds["q"], found["q"], where)
    if "ps" in ds:
        vals = sample(ds["ps"])
        lo_ok, hi_ok = role("ps").plausible
        if np.isfinite(vals).any():
            lo, hi = np.nanmin(vals), np.nanmax(vals)
            if lo < lo_ok or hi > hi_ok:
                src_units = ds["ps"].attrs.get("source_units")
                raise FieldsError(
                    f"Surface pressure '{found['ps']}' in {where} spans {lo:.6g} to {hi:.6g} Pa "
                    f"after conversion from '{src_units}', outside the plausible "
                    f"{lo_ok:.0f}-{hi_ok:.0f} Pa, so its unit looks wrong "
                    f"(hPa labelled Pa?); declare the real unit with {units_hint('ps')}."
                )


def _check_q(q: xr.DataArray, name: str, where: str) -> None:
    q_max = role("q").plausible[1]
    vals = sample(q)
    qmax = np.nanmax(vals) if np.isfinite(vals).any() else 0.0
    if qmax > 1000 * q_max:
        raise FieldsError(
            f"Specific humidity '{name}' in {where} holds values up to {qmax:.3g}, far "
            "above any humidity even in g/kg, which looks like missing values that are not "
            "marked; give the variable a _FillValue (or missing_value) attribute."
        )
    if qmax > q_max:
        src_units = q.attrs.get("source_units")
        raise FieldsError(
            f"Specific humidity '{name}' in {where} reaches "
            f"{qmax:.3g} kg kg-1 after conversion from '{src_units}', above "
            f"the physical limit of about {q_max} kg kg-1, so it looks like g/kg labelled "
            f"kg/kg; declare the real unit with {units_hint('q')}."
        )


def humidity_forms(ds: xr.Dataset, forms: dict, where: str) -> None:
    """Refuse relative humidity in the wrong scale and a dew point above the temperature."""
    if "rh" in forms:
        vals = sample(ds["rh"])
        top = np.nanmax(vals) if np.isfinite(vals).any() else 0.0
        src_units = str(ds["rh"].attrs.get("source_units"))
        name = forms["rh"]
        if top > 1.5:  # as a fraction after conversion: the label was a fraction, values in %
            raise FieldsError(
                f"Relative humidity '{name}' in {where} is labelled '{src_units}' (a fraction) "
                f"but reaches {top:.3g}, which looks like percent; declare it with "
                f"--units rh=% (units={{'rh': '%'}} in Python)."
            )
        conv = to_si(src_units, "fraction")
        if top <= 0.015 and conv is not None and conv.scale != 1.0:  # labelled percent
            raise FieldsError(
                f"Relative humidity '{name}' in {where} is labelled '%' but never exceeds "
                f"{100 * top:.3g} %, which looks like a fraction (0-1) labelled percent; "
                f"declare it with --units rh=1 (units={{'rh': '1'}} in Python)."
            )
    if "td" in forms and "t" in forms:
        td, t = sample(ds["td"]), sample(ds["t"])
        excess = td - t
        if np.isfinite(excess).any() and np.nanmax(excess) > 0.5:
            k = int(np.nanargmax(excess))
            raise FieldsError(
                f"The dew point '{forms['td']}' in {where} lies above the air temperature "
                f"'{forms['t']}' by up to {np.nanmax(excess):.3g} K (dew point "
                f"{td.ravel()[k]:.5g} K, temperature {t.ravel()[k]:.5g} K), which cannot "
                "happen; check that the two variables and their units are the right ones."
            )
