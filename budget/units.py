"""The one place where SI budget values become display and export units.

Inside the engine every area-mean rate is kg m-2 s-1 and every transport kg s-1.
For liquid water 1 kg m-2 is 1 mm (ρw = 1000 kg m-3, common practice), so
kg m-2 s-1 × 86400 s/day = mm/day; kg s-1 ÷ ρw = m3 s-1 (CHECKS.md, conversions).
"""

from __future__ import annotations

import numpy as np

from .constants import SECONDS_PER_DAY, WATER_DENSITY
from .errors import RequestError

#: Units a rate can be shown in, with the label used in CSV column names and axis titles.
RATE_UNITS = {
    "mm/day": "mm day-1",
    "kg/s": "kg s-1",
    "m3/s": "m3 s-1",
}


def convert(values, unit: str, area_m2: float):
    """Convert an area-mean rate in kg m-2 s-1 to mm/day, kg/s (over the area) or m3/s."""
    v = np.asarray(values, dtype=float)
    if unit == "mm/day":
        return v * SECONDS_PER_DAY
    if unit == "kg/s":
        return v * area_m2
    if unit == "m3/s":
        return v * area_m2 / WATER_DENSITY
    raise RequestError(f"Unknown rate unit {unit!r}; choose one of {', '.join(RATE_UNITS)}.")


def transport_to_rate(values_kg_s, area_m2: float):
    """A transport into the region (kg s-1) as an area-mean rate (kg m-2 s-1)."""
    return np.asarray(values_kg_s, dtype=float) / area_m2


#: Pa per hPa.
PA_PER_HPA = 100.0


def pa_s_to_hpa_day(values):
    """A pressure tendency in Pa s-1 (SI, inside the engine) as hPa/day for display."""
    return np.asarray(values, dtype=float) * SECONDS_PER_DAY / PA_PER_HPA


def kg_m2_to_mm(values):
    """Column water mass (kg m-2) as liquid-water depth (mm): 1 kg m-2 = 1 mm at ρw = 1000."""
    return np.asarray(values, dtype=float) * (1000.0 / WATER_DENSITY)
