"""The one place for units: every input unit parse and conversion, and every display conversion.

Input side: a unit attribute is normalised (`normalise`), looked up in the table of its
*dimension* (`TABLES`, keyed by the dimension of a budget.catalogue row) and turned into a
`Conversion` to SI (scale, and an offset for temperatures).  Spellings are UDUNITS / CF ones
as files carry them; "ms-1" is deliberately not accepted (strictly it reads "per
millisecond"), and "mb" is the meteorological millibar (not the millibarn of strict unit
parsers).  A knot is 1852/3600 m s-1 exactly (the international nautical mile of 1929).

Display side: inside the engine every area-mean rate is kg m-2 s-1 and every transport
kg s-1.  For liquid water 1 kg m-2 is 1 mm (ρw = 1000 kg m-3, common practice; the constant
is budget.constants.WATER_DENSITY), so kg m-2 s-1 × 86400 s/day = mm/day and
kg s-1 ÷ ρw = m3 s-1 (CHECKS.md, conversions).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import SECONDS_PER_DAY, WATER_DENSITY
from .errors import RequestError

# --------------------------------------------------------------------------------------
# liquid water: the one statement of "1 kg m-2 = 1 mm"

#: Mass per area (kg m-2) of a 1 mm layer of liquid water: ρw × 0.001 m (= 1 at 1000 kg m-3).
KG_M2_PER_MM = WATER_DENSITY / 1000.0
#: Mass per area (kg m-2) of a 1 m layer of liquid water.
KG_M2_PER_M = WATER_DENSITY

#: A knot in m s-1, exactly: one international nautical mile (1852 m, 1929) per hour.
KNOT = 1852.0 / 3600.0


def normalise(unit) -> str:
    """A unit attribute as the tables spell it: stripped, spaces collapsed, lower case."""
    return " ".join(str(unit).strip().split()).lower()


@dataclass(frozen=True)
class Conversion:
    """value_SI = value × scale + offset."""

    scale: float
    offset: float = 0.0

    def apply(self, values):
        out = values * self.scale if self.scale != 1.0 else values
        return out + self.offset if self.offset != 0.0 else out

    @property
    def identity(self) -> bool:
        return self.scale == 1.0 and self.offset == 0.0


# --------------------------------------------------------------------------------------
# input tables: accepted spellings (normalised) → factor to the dimension's SI unit

SPEED = {
    "m s-1": 1.0, "m/s": 1.0, "m s**-1": 1.0, "m.s-1": 1.0, "meters/second": 1.0,
    "metres/second": 1.0, "meter/second": 1.0, "metre/second": 1.0, "m s^-1": 1.0,
    "m/sec": 1.0, "m sec-1": 1.0, "meters second-1": 1.0,
    "knots": KNOT, "knot": KNOT, "kt": KNOT, "kts": KNOT,
    "km/h": 1000.0 / 3600.0, "km h-1": 1000.0 / 3600.0,
}
MASS_FRACTION = {
    "kg kg-1": 1.0, "kg/kg": 1.0, "kg kg**-1": 1.0, "1": 1.0, "kg kg^-1": 1.0,
    "kg.kg-1": 1.0,
    "g kg-1": 1e-3, "g/kg": 1e-3, "g kg**-1": 1e-3, "g kg^-1": 1e-3, "g.kg-1": 1e-3,
}
PRESSURE = {
    "pa": 1.0, "hpa": 100.0, "mbar": 100.0, "millibar": 100.0, "millibars": 100.0,
    "mb": 100.0, "kpa": 1000.0, "n m-2": 1.0, "pascal": 1.0, "pascals": 1.0,
    "hectopascal": 100.0, "hectopascals": 100.0,
}
FLUX = {
    "kg m-1 s-1": 1.0, "kg/m/s": 1.0, "kg m**-1 s**-1": 1.0, "kg m^-1 s^-1": 1.0,
    "kg.m-1.s-1": 1.0, "kg/(m s)": 1.0, "kg m-1s-1": 1.0,
}
COLUMN_MASS = {
    "kg m-2": 1.0, "kg/m2": 1.0, "kg/m^2": 1.0, "kg m**-2": 1.0, "kg m^-2": 1.0,
    "kg.m-2": 1.0, "kg/m**2": 1.0,
    "mm": KG_M2_PER_MM, "cm": 10 * KG_M2_PER_MM, "m": KG_M2_PER_M,
}
#: Relative humidity: a fraction (1) or percent.
FRACTION = {"1": 1.0, "fraction": 1.0, "0-1": 1.0, "%": 0.01, "percent": 0.01, "pct": 0.01}
#: Temperatures: scale 1, offsets in TEMPERATURE_OFFSETS.
TEMPERATURE = {
    "k": 1.0, "kelvin": 1.0, "degk": 1.0, "deg k": 1.0, "degrees k": 1.0,
    "degc": 1.0, "deg c": 1.0, "°c": 1.0, "celsius": 1.0, "degrees_celsius": 1.0,
    "degree_celsius": 1.0, "degrees c": 1.0,
}
#: Celsius spellings: add 273.15 K (the kelvin-Celsius offset, SI brochure).
TEMPERATURE_OFFSETS = {u: 273.15 for u in TEMPERATURE if "c" in u}

#: Amounts of liquid water (precipitation, evaporation) → kg m-2.
WATER_AMOUNT = {
    **{k: v for k, v in COLUMN_MASS.items()},
    "millimeter": KG_M2_PER_MM, "millimetre": KG_M2_PER_MM, "mm of water equivalent": KG_M2_PER_MM,
    "metre": KG_M2_PER_M, "meter": KG_M2_PER_M, "m of water equivalent": KG_M2_PER_M,
}
_H, _D = 3600.0, SECONDS_PER_DAY
#: Rates of liquid water → kg m-2 s-1.
WATER_RATE = {
    "kg m-2 s-1": 1.0, "kg/m2/s": 1.0, "kg m**-2 s**-1": 1.0, "kg m^-2 s^-1": 1.0,
    "kg.m-2.s-1": 1.0, "kg/(m2 s)": 1.0, "kg m-2s-1": 1.0,
    "mm s-1": KG_M2_PER_MM, "mm/s": KG_M2_PER_MM, "mm s**-1": KG_M2_PER_MM,
    "mm h-1": KG_M2_PER_MM / _H, "mm/h": KG_M2_PER_MM / _H, "mm hr-1": KG_M2_PER_MM / _H,
    "mm/hr": KG_M2_PER_MM / _H, "mm/hour": KG_M2_PER_MM / _H,
    "mm day-1": KG_M2_PER_MM / _D, "mm/day": KG_M2_PER_MM / _D, "mm d-1": KG_M2_PER_MM / _D,
    "mm/d": KG_M2_PER_MM / _D, "mm day**-1": KG_M2_PER_MM / _D,
    "m s-1": KG_M2_PER_M, "m/s": KG_M2_PER_M, "m s**-1": KG_M2_PER_M,
    "m of water equivalent s-1": KG_M2_PER_M,
    "m h-1": KG_M2_PER_M / _H, "m/h": KG_M2_PER_M / _H, "m day-1": KG_M2_PER_M / _D,
    "m/day": KG_M2_PER_M / _D,
}

#: Dimension (budget.catalogue.Role.dimension) → accepted spellings and factors to SI.
TABLES = {
    "speed": SPEED,
    "mass_fraction": MASS_FRACTION,
    "pressure": PRESSURE,
    "flux": FLUX,
    "column_mass": COLUMN_MASS,
    "fraction": FRACTION,
    "temperature": TEMPERATURE,
    "water_amount": WATER_AMOUNT,
    "water_rate": WATER_RATE,
}


def to_si(unit, dimension: str) -> Conversion | None:
    """The conversion of ``unit`` to the SI unit of ``dimension``; None if not accepted."""
    table = TABLES[dimension]
    key = normalise(unit)
    if key not in table:
        return None
    offset = TEMPERATURE_OFFSETS.get(key, 0.0) if dimension == "temperature" else 0.0
    return Conversion(table[key], offset)


def accepted(dimension: str) -> str:
    """The accepted spellings of ``dimension``, for messages."""
    return ", ".join(dict.fromkeys(TABLES[dimension]))


def dimension_of(unit) -> list[str]:
    """Every dimension whose table accepts ``unit`` (several for 'm s-1' or '1')."""
    key = normalise(unit)
    return [d for d, table in TABLES.items() if key in table]


def same_quantity(unit_a, unit_b) -> tuple[str, float, float] | None:
    """(dimension, scale of a, scale of b) when both units belong to one dimension with no
    offset between them, else None.  Used to put two files' copies of a variable into one unit."""
    ka, kb = normalise(unit_a), normalise(unit_b)
    for dim, table in TABLES.items():
        if ka in table and kb in table:
            ca, cb = to_si(ka, dim), to_si(kb, dim)
            if ca.offset == cb.offset:
                return dim, ca.scale, cb.scale
    return None


# --------------------------------------------------------------------------------------
# display side

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
        return v * SECONDS_PER_DAY / KG_M2_PER_MM
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
    return np.asarray(values, dtype=float) / KG_M2_PER_MM
