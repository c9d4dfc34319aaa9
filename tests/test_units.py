"""Tests of budget.units: input unit tables against pint, knots, temperatures, display units."""

from __future__ import annotations

import numpy as np
import pytest

from budget import units
from budget.catalogue import ROLES
from budget.errors import RequestError

#: SI unit of each dimension, as pint spells it.
_SI = {
    "speed": "m/s", "mass_fraction": "kg/kg", "pressure": "Pa", "flux": "kg/m/s",
    "column_mass": "kg/m**2", "fraction": "dimensionless", "water_rate": "kg/m**2/s",
    "water_amount": "kg/m**2",
}
# pint needs the case of SI prefixes and a few spellings
_SPELLING = {"pa": "Pa", "hpa": "hPa", "kpa": "kPa", "n m-2": "N m-2", "kts": "knot",
             "kt": "knot", "pct": "percent", "0-1": "dimensionless", "fraction": "dimensionless"}
# lengths standing for liquid water (mm, m of water equivalent ...): 1000 kg m-3 (common
# practice, no source); 'mb' is the meteorological millibar, pint's millibarn (checked by
# hand: 1 mb = 1 hPa = 100 Pa, SI brochure)
_LIQUID = {"mm": "mm", "cm": "cm", "m": "m", "millimeter": "mm", "millimetre": "mm",
           "mm of water equivalent": "mm", "metre": "m", "meter": "m", "m of water equivalent": "m"}


def _expected(ureg, dim, unit):
    if dim in ("column_mass", "water_amount") and unit in _LIQUID:
        return ureg.Quantity(1.0, _LIQUID[unit]).to("m").magnitude * 1000.0
    if dim == "water_rate" and not unit.startswith("kg"):
        length, _, per = unit.replace(" of water equivalent", "").partition(" ")
        if not per:
            length, per = unit.split("/", 1)
            per = "/" + per
        else:
            per = "/" + per.replace("-1", "").replace("**", "")
        return ureg.Quantity(1.0, f"{_LIQUID.get(length, length)}{per}").to("m/s").magnitude * 1000.0
    return ureg.Quantity(1.0, _SPELLING.get(unit, unit)).to(_SI[dim]).magnitude


def test_input_tables_agree_with_pint():
    # Reference: pint's unit registry as shipped with MetPy (general-purpose library).
    from metpy.units import units as ureg

    checked = 0
    for dim, table in units.TABLES.items():
        if dim == "temperature":
            continue
        for unit, factor in table.items():
            if unit == "mb":
                assert factor == 100.0
                continue
            assert factor == pytest.approx(_expected(ureg, dim, unit), rel=1e-12), (dim, unit)
            checked += 1
    assert checked > 80


def test_knot_is_exact_and_accepted_for_winds():
    # 1 kt = 1852 m / 3600 s exactly (international nautical mile, 1929)
    assert units.KNOT == 1852.0 / 3600.0
    for spelling in ("knots", "knot", "kt", "kts", "Knots "):
        assert units.to_si(spelling, "speed").scale == 1852.0 / 3600.0
    # pint agrees (general-purpose library)
    from metpy.units import units as ureg

    assert ureg.Quantity(10.0, "knot").to("m/s").magnitude == pytest.approx(5.144444, rel=1e-6)


def test_temperatures_get_the_celsius_offset():
    # T/K = t/degC + 273.15 (SI brochure)
    assert units.to_si("K", "temperature").apply(np.array([250.0]))[0] == 250.0
    for spelling in ("degC", "degrees_Celsius", "deg C", "°C", "celsius"):
        conv = units.to_si(spelling, "temperature")
        assert conv.apply(np.array([-23.0]))[0] == pytest.approx(250.15, abs=1e-12)


def test_every_role_dimension_has_a_table_or_is_read_elsewhere():
    for r in ROLES:
        assert r.dimension in units.TABLES or r.key in ("precip", "evap"), r.key
        if r.dimension in units.TABLES:
            # the role's own SI unit is an accepted spelling, converting with factor 1
            conv = units.to_si(r.si_unit, r.dimension)
            assert conv is not None and conv.identity, r.key


def test_same_quantity_reconciles_two_files_units():
    assert units.same_quantity("kg/kg", "g kg-1") == ("mass_fraction", 1.0, 1e-3)
    assert units.same_quantity("Pa", "hPa") == ("pressure", 1.0, 100.0)
    assert units.same_quantity("Pa", "kg kg-1") is None
    assert units.same_quantity("K", "degC") is None  # an offset: not a plain rescale


def test_display_conversions():
    # 1 kg m-2 s-1 of liquid water = 86400 mm/day (ρw = 1000 kg m-3, common practice)
    assert units.convert([1.0], "mm/day", 1.0)[0] == 86400.0
    assert units.convert([2.0], "kg/s", 3.0)[0] == 6.0
    assert units.convert([1.0], "m3/s", 5.0e6)[0] == pytest.approx(5.0e3)
    assert units.kg_m2_to_mm([25.0])[0] == 25.0
    with pytest.raises(RequestError, match="Unknown rate unit"):
        units.convert([1.0], "in/h", 1.0)
