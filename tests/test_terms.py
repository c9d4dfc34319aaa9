"""The output term catalogue (budget/terms.py) against outside references.

References: the CF standard-name table (v83; the names as listed in CHECKS.md, their canonical
units from memory), MetPy's pint unit registry for unit dimensions and conversions, and the
computed sample budget (every variable it carries must have a catalogue row).
"""

import numpy as np
import pytest
from metpy.units import units as ureg

import budget
from budget import terms
from budget.errors import RequestError

# CF standard-name table v83: canonical units of the names the catalogue uses (from memory;
# the names themselves are listed in CHECKS.md).
CF_CANONICAL = {
    "atmosphere_mass_content_of_water_vapor": "kg m-2",
    "tendency_of_atmosphere_mass_content_of_water_vapor": "kg m-2 s-1",
    "surface_downward_water_flux": "kg m-2 s-1",
    "precipitation_flux": "kg m-2 s-1",
    "water_evapotranspiration_flux": "kg m-2 s-1",
}

# How each display unit ends a CSV column name (a project convention, common practice: no source).
SUFFIX = {"mm": "_mm", "mm/day": "_mm_day", "kg/s": "_kg_s", "m3/s": "_m3_s", "m/s": "_m_s",
          "kg m-2": "_kg_m2", "kg m-2 s-1": "_kg_m2_s", "hPa/day": "_hpa_day", "kg m-1 s-1": "_kg_m_s"}

# Display unit keys in pint spelling (MetPy's registry).
PINT = {"mm/day": "mm/day", "kg/s": "kg/s", "m3/s": "m**3/s", "m/s": "m/s", "kg m-2": "kg m-2",
        "kg m-2 s-1": "kg m-2 s-1", "hPa/day": "hPa/day", "kg m-1 s-1": "kg m-1 s-1"}


def test_names_columns_and_standard_names_are_unique():
    assert len(terms.BY_NAME) == len(terms.TERMS)
    cols = [c.name for c, _ in terms.csv_columns()]
    assert len(cols) == len(set(cols))
    std = [t.standard_name for t in terms.TERMS if t.standard_name]
    assert len(std) == len(set(std))


@pytest.mark.parametrize("t", [t for t in terms.TERMS if t.standard_name], ids=lambda t: t.name)
def test_standard_names_are_cf_names_with_matching_units(t):
    # CF standard-name table v83 (canonical units from memory): the term's SI units must have
    # the dimension of the name's canonical units (MetPy/pint checks the dimension).
    assert t.standard_name in CF_CANONICAL
    assert ureg(t.units).dimensionality == ureg(CF_CANONICAL[t.standard_name]).dimensionality


@pytest.mark.parametrize("t", terms.TERMS, ids=lambda t: t.name)
def test_every_term_is_well_formed(t):
    assert t.family in terms.FAMILIES
    ureg(t.units)  # a unit string a UDUNITS-style parser (MetPy/pint) reads
    assert t.long_name and t.label
    a = t.attrs()
    assert a["units"] == t.units and a["long_name"] == t.long_name
    for c in t.columns:
        assert c.name.endswith(SUFFIX[c.unit]), c.name  # the display unit is in the column name
        # the display unit has a dimension the SI unit can reach: same dimension, or a rate
        # over an area / a volume of liquid water (conversions below)
        assert c.unit in terms.UNIT_LABELS


def test_display_conversions_match_pint():
    # CHECKS.md: kg m-2 s-1 x 86400 = mm/day of liquid water; kg s-1 / 1000 kg m-3 = m3 s-1.
    # Reference: MetPy's pint registry, with liquid-water density 1000 kg m-3 (common practice).
    rho = 1000 * ureg("kg m-3")
    area = 1.2302e12  # m2, the 10 x 10 degree box of CHECKS.md (any area works)
    rate = 2.5e-5 * ureg("kg m-2 s-1")
    pme = terms.term("p_minus_e")
    assert terms.to_display(pme, rate.m, "mm/day", area) == pytest.approx((rate / rho).to("mm/day").m, rel=1e-12)
    assert terms.to_display(pme, rate.m, "kg/s", area) == pytest.approx((rate * area * ureg("m2")).to("kg/s").m, rel=1e-12)
    assert terms.to_display(pme, rate.m, "m3/s", area) == pytest.approx((rate * area * ureg("m2") / rho).to("m**3/s").m, rel=1e-12)
    imp = terms.term("vapour_import")
    flux = 3.0e8  # kg s-1
    assert terms.to_display(imp, flux, "kg/s", area) == flux  # the transport itself, no round trip
    assert terms.to_display(imp, flux, "m3/s", area) == pytest.approx((flux * ureg("kg/s") / rho).to("m**3/s").m, rel=1e-12)
    assert terms.to_display(imp, flux, "mm/day", area) == pytest.approx(
        (flux * ureg("kg/s") / (area * ureg("m2")) / rho).to("mm/day").m, rel=1e-12)
    pw = terms.term("precipitable_water")
    assert terms.to_display(pw, 24.9, "mm") == pytest.approx((24.9 * ureg("kg m-2") / rho).to("mm").m, rel=1e-12)


def test_display_refuses_impossible_units():
    with pytest.raises(RequestError, match="cannot be shown"):
        terms.to_display("mass_correction_speed", [1.0], "mm/day", 1e12)
    with pytest.raises(RequestError, match="area"):
        terms.to_display("p_minus_e", [1.0], "kg/s")
    with pytest.raises(KeyError, match="catalogue"):
        terms.term("no_such_term")


def test_table_summary_and_axis_helpers():
    table = terms.table_terms()
    assert all(t.units == "kg m-2 s-1" for t in table)  # the table converts rates only
    assert [t.table for t in table] == sorted(t.table for t in table)
    assert terms.axis_title("p_minus_e", "m3/s") == "P − E (m³/s)"
    assert {t.name for t in terms.family("observed")} >= {"precipitation", "evaporation"}
    col, t = terms.column(terms.term("p_minus_e").columns[0].name)
    assert t.name == "p_minus_e" and col.unit == "mm/day" and col.summary


@pytest.fixture(scope="module")
def sample_budgets():
    from sample_fields import ensure_sample

    paths = ensure_sample()
    region = budget.load_region(path=paths.basin)
    return [budget.compute(budget.open_fields(p), region, profiles=True) for p in (paths.levels, paths.column)]


def test_every_variable_of_the_budget_is_catalogued(sample_budgets):
    # the engine's own Dataset (level and column inputs): every variable has a row, and the
    # row's units and dimensions are the variable's
    for ds in sample_budgets:
        for name, da in ds.data_vars.items():
            t = terms.term(name)
            assert da.attrs["units"] == t.units, name
            assert da.dims == t.dims, name


def test_csv_and_netcdf_read_the_catalogue(sample_budgets, tmp_path):
    from budget.export import to_frame, write_netcdf
    import xarray as xr

    ds = sample_budgets[0]
    df = to_frame(ds)
    area = ds.attrs["region_area_m2"]
    expect = [c.name for c, t in terms.csv_columns() if t.name in ds]
    assert list(df.columns) == ["time", *expect]
    # P - E in m3/s: kg m-2 s-1 x area / 1000 kg m-3 (CHECKS.md conversions)
    np.testing.assert_allclose(df[terms.term("p_minus_e").columns[-1].name], ds["p_minus_e"].values * area / 1000, rtol=1e-12)
    back = xr.open_dataset(write_netcdf(ds, tmp_path / "b.nc"))
    for t in terms.TERMS:
        if t.standard_name and t.name in back:
            assert back[t.name].attrs["standard_name"] == t.standard_name
