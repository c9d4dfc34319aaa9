"""budget.fields on inputs as people download them: several files with their own units,
files that disagree, winds in knots, a variable mapped to the wrong role.

Each file is built from the analytic formulas of tests/test_fields.py, so the canonical values
are checked against those formulas (an analytic solution), whatever units the file used.
"""

from __future__ import annotations

import numpy as np
import pytest

from budget.errors import FieldsError
from budget.fields import open_fields
from tests.test_fields import check_levels_formula, make_levels, write


def _two_files(tmp_path, second: dict, first: dict | None = None):
    a = make_levels(ntime=4, **(first or {})).isel(time=slice(0, 2))
    b = make_levels(ntime=4, **second).isel(time=slice(2, 4))
    return [write(a, tmp_path, "a.nc"), write(b, tmp_path, "b.nc")]


def test_each_file_converted_by_its_own_humidity_unit(tmp_path):
    # the second file holds q in g/kg, correctly labelled: 1 g/kg = 1e-3 kg/kg (SI prefixes)
    paths = _two_files(tmp_path, {"q_units": "g/kg", "q_scale": 1000.0})
    f = open_fields(paths)
    check_levels_formula(f, q_tol=1e-12)
    assert any("b.nc" in w and "g/kg" in w for w in f.warnings)


def test_each_file_converted_by_its_own_pressure_unit(tmp_path):
    # 1 hPa = 100 Pa (SI brochure); the first file is in hPa, the second in Pa
    paths = _two_files(tmp_path, {"ps_units": "Pa"}, {"ps_units": "hPa", "ps_scale": 0.01})
    f = open_fields(paths)
    check_levels_formula(f)


def test_files_on_different_grids_are_refused_naming_both(tmp_path):
    a = make_levels(ntime=2)
    b = make_levels(ntime=4, lat=np.linspace(-50.0, 50.0, 9)).isel(time=slice(2, 4))
    paths = [write(a, tmp_path, "a.nc"), write(b, tmp_path, "b.nc")]
    with pytest.raises(FieldsError) as e:
        open_fields(paths)
    msg = str(e.value)
    assert "a.nc" in msg and "b.nc" in msg and "latitudes" in msg


def test_files_on_different_levels_are_refused_naming_both(tmp_path):
    a = make_levels(ntime=2)
    b = make_levels(ntime=4, lev=np.array([200.0, 500.0, 700.0, 850.0, 1000.0])).isel(time=slice(2, 4))
    paths = [write(a, tmp_path, "a.nc"), write(b, tmp_path, "b.nc")]
    with pytest.raises(FieldsError) as e:
        open_fields(paths)
    msg = str(e.value)
    assert "a.nc" in msg and "b.nc" in msg and "'plev'" in msg


def test_files_with_units_of_different_quantities_are_refused(tmp_path):
    paths = _two_files(tmp_path, {"ps_units": "kg kg-1"})
    with pytest.raises(FieldsError) as e:
        open_fields(paths)
    msg = str(e.value)
    assert "'ps'" in msg and "a.nc" in msg and "b.nc" in msg and "'kg kg-1'" in msg


def test_winds_in_knots_are_converted(tmp_path):
    # 1 kt = 1852/3600 m/s exactly (international nautical mile, 1929)
    ds = make_levels(wind_units="knots")
    for k in ("ua", "va"):
        ds[k] = ds[k] / (1852.0 / 3600.0)
        ds[k].attrs["units"] = "knots"
    f = open_fields(write(ds, tmp_path))
    check_levels_formula(f)
    assert f.ds["u"].attrs["source_units"] == "knots"


def test_units_override_accepts_knots(tmp_path):
    ds = make_levels(wind_units="m s-1")
    for k in ("ua", "va"):
        ds[k] = ds[k] / (1852.0 / 3600.0)
        ds[k].attrs["units"] = "m s-1"  # a wrong label, corrected by the override
    f = open_fields(write(ds, tmp_path), units={"ua": "knots", "va": "kt"})
    check_levels_formula(f)


def test_surface_pressure_mapped_as_humidity_is_named(tmp_path):
    with pytest.raises(FieldsError) as e:
        open_fields(write(make_levels(), tmp_path), var_map={"q": "ps"})
    msg = str(e.value)
    assert "'ps'" in msg and "cannot serve as q (specific humidity)" in msg
    assert "surface_air_pressure" in msg and "No variable found" not in msg


def test_wrong_role_told_by_units_when_no_standard_name(tmp_path):
    ds = make_levels(standard_names=False)
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path), var_map={"q": "ps"})
    assert "its units 'Pa' are a pressure" in str(e.value)


def test_files_with_different_calendars_are_refused_naming_both(tmp_path):
    import xarray as xr

    from tests.test_fields import make_column

    a = make_column(ntime=2)
    b = make_column(ntime=2).assign_coords(
        time=xr.date_range("2021-03-02", periods=2, freq="D", calendar="noleap", use_cftime=True))
    paths = [write(a, tmp_path, "a.nc"), write(b, tmp_path, "b.nc")]
    with pytest.raises(FieldsError) as e:
        open_fields(paths)
    msg = str(e.value)
    assert "a.nc" in msg and "b.nc" in msg and "calendars" in msg and "noleap" in msg
