"""Tests of budget.catalogue: the role table is consistent and agrees with CF.

CF canonical units below are those of the CF standard-name table (v83), from memory.
"""

from __future__ import annotations

import pytest

from budget import catalogue
from budget.catalogue import ROLES, role

#: First CF standard name of a role → its canonical unit in the CF table (from memory).
CF_CANONICAL = {
    "eastward_wind": "m s-1", "northward_wind": "m s-1", "specific_humidity": "1",
    "surface_air_pressure": "Pa",
    "eastward_atmosphere_water_vapor_transport_across_unit_distance": "kg m-1 s-1",
    "northward_atmosphere_water_vapor_transport_across_unit_distance": "kg m-1 s-1",
    "atmosphere_mass_content_of_water_vapor": "kg m-2",
    "mass_fraction_of_cloud_liquid_water_in_air": "1", "mass_fraction_of_cloud_ice_in_air": "1",
    "atmosphere_mass_content_of_cloud_liquid_water": "kg m-2",
    "atmosphere_mass_content_of_cloud_ice": "kg m-2",
    "humidity_mixing_ratio": "1", "relative_humidity": "1", "dew_point_temperature": "K",
    "water_vapor_partial_pressure_in_air": "Pa", "air_temperature": "K",
    "precipitation_flux": "kg m-2 s-1", "water_evapotranspiration_flux": "kg m-2 s-1",
    "eastward_atmosphere_water_transport_across_unit_distance": "kg m-1 s-1",
    "northward_atmosphere_water_transport_across_unit_distance": "kg m-1 s-1",
}


def test_si_unit_is_the_cf_canonical_unit():
    from metpy.units import units as ureg  # pint, to compare "kg kg-1" with "1"

    def q(u):
        return ureg.Quantity(1.0, u.replace("-1", "**-1").replace("-2", "**-2").replace(" ", "*")
                             if u != "1" else "dimensionless")

    for r in ROLES:
        cf = CF_CANONICAL[r.standard_names[0]]
        assert q(r.si_unit).to(q(cf).units).magnitude == pytest.approx(1.0), r.key


def test_names_point_to_one_role_each():
    seen_std, seen_short = {}, {}
    for r in ROLES:
        for n in r.standard_names:
            assert seen_std.setdefault(n, r.key) == r.key, n
        for n in r.short_names:
            assert seen_short.setdefault(n, r.key) == r.key, n


def test_role_groups():
    assert catalogue.LEVEL_ROLES == ("u", "v", "q", "ps")
    assert catalogue.COLUMN_ROLES == ("qu", "qv", "w")
    assert set(catalogue.OPTIONAL_ROLES) == {"precip", "evap", "ql", "qi", "tu", "tv", "wl", "wi"}
    assert catalogue.roles_for("levels", required=False) == ("precip", "evap", "ql", "qi")
    help_text = catalogue.var_help()
    assert all(k in help_text for k in catalogue.ALL_ROLES)


def test_plausible_ranges():
    # common practice, no single source (issue 12 / CHECKS.md): humidity up to about
    # 0.04 kg/kg with a small negative tolerance, surface pressure 300-1100 hPa, winds below
    # about 150 m/s
    lo, hi = role("q").plausible
    assert -1e-3 < lo < 0 and hi == 0.04
    assert role("ps").plausible == (30000.0, 110000.0)
    assert role("u").plausible[1] == 150.0 and role("v").plausible[0] == -150.0
    for r in ROLES:
        if r.plausible is not None:
            assert r.plausible[0] < r.plausible[1], r.key
