"""Humidity stage of budget.fields: specific humidity from another humidity form.

Runs on the canonical (SI, chunked) dataset: the form chosen by the roles stage (mixing
ratio; relative humidity with temperature; dew point; vapour pressure) becomes ``q`` with the
formulas of budget.humidity, at the pressure of each level (pressure levels, or the middle of
each hybrid layer: a + b·ps halfway between its interfaces).  The source variables are dropped
and the way q was obtained is kept in q's ``derivation`` attribute and in ``Fields.derived``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .. import humidity
from ..catalogue import role
from ..vertical import HybridLevels, PressureLevels


def level_pressure(ds: xr.Dataset, vertical) -> xr.DataArray:
    """Pressure (Pa) of each level, broadcastable against (time, level, lat, lon)."""
    if isinstance(vertical, PressureLevels):
        return xr.DataArray(np.asarray(vertical.p, float), dims=("level",))
    if isinstance(vertical, HybridLevels):
        a = np.asarray(vertical.a_interface_pa, float)
        b = np.asarray(vertical.b_interface, float)
        a_mid = xr.DataArray(0.5 * (a[1:] + a[:-1]), dims=("level",))
        b_mid = xr.DataArray(0.5 * (b[1:] + b[:-1]), dims=("level",))
        return a_mid + b_mid * ds["ps"]
    raise ValueError("level inputs need a pressure or hybrid vertical coordinate")


#: How each relative-humidity reference (budget.humidity.RH_REFERENCES) is stated in provenance.
_REFERENCE_TEXT = {
    "water": "with respect to water",
    "ice": "with respect to ice below 0 degC",
    "mixed": "with respect to the IFS mixed phase: water above 0 degC, ice below -23 degC, a quadratic blend between",
}
_SOURCE_TEXT = {
    "water": "Bolton (1980)",
    "ice": "Bolton (1980) and, over ice, Alduchov and Eskridge (1996)",
    "mixed": "the IFS Tetens forms (IFS Documentation CY47R3, Part IV: Physical Processes, chapter 12)",
}


def derive_q(ds: xr.Dataset, forms: dict, vertical, phase: str = "water") -> tuple[xr.Dataset, str]:
    """(dataset with q instead of the form's variables, how q was obtained)."""
    if "mr" in forms:
        q = humidity.q_from_mixing_ratio(ds["mr"])
        how = f"from the mixing ratio '{forms['mr']}' as r / (1 + r)"
    else:
        p = level_pressure(ds, vertical)
        if "rh" in forms:
            q = humidity.q_from_relative_humidity(ds["rh"], ds["t"], p, phase)
            how = (f"from relative humidity '{forms['rh']}' ({_REFERENCE_TEXT[phase]}) and air "
                   f"temperature '{forms['t']}', saturation vapour pressure after {_SOURCE_TEXT[phase]}")
        elif "td" in forms:
            q = humidity.q_from_dewpoint(ds["td"], p)
            how = (f"from the dew point '{forms['td']}', saturation vapour pressure over water "
                   "after Bolton (1980)")
        else:
            q = humidity.q_from_vapour_pressure(ds["vp"], p)
            how = f"from the water vapour pressure '{forms['vp']}'"
        how += ", q = eps e / (p - (1 - eps) e) at each level's pressure"
    r = role("q")
    q = q.transpose(*[d for d in ("time", "level", "lat", "lon", "y", "x") if d in q.dims])
    q.attrs = {"units": r.si_unit, "long_name": r.long_name, "standard_name": r.standard_names[0],
               "source_name": "+".join(forms.values()),
               "source_units": ", ".join(str(ds[k].attrs.get("source_units")) for k in forms),
               "derivation": how}
    out = ds.drop_vars([k for k in forms if k in ds])
    out["q"] = q
    return out, how
