"""budget.fields with humidity in its other usual forms (issue 9).

Each file is built from the analytic specific humidity of tests/test_fields.py: the form in
the file is computed from q by inverting the formulas of budget.humidity exactly
(e = q p / (ε + (1 − ε) q); RH = e / es(T); Bolton's es inverted for the dew point;
r = q / (1 − q)), so the q that open_fields derives must equal the analytic q to round-off.
The budget from an RH + T file must equal the budget from the same fields given as q.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from budget import compute
from budget.constants import EPSILON
from budget.errors import FieldsError
from budget.fields import open_fields
from budget.humidity import saturation_vapour_pressure_water
from budget.region import region_from_bbox
from tests.test_fields import check_levels_formula, make_levels, write


def _target_rh(ds):
    # relative humidity the file will hold: 40 % aloft to 90 % near the ground
    return (0.4 + 0.5 * ds["plev"] / 1000.0).broadcast_like(ds["hus"])


def _dewpoint_of(e):
    x = np.log(e / 611.2)  # Bolton (1980) eq. 10 inverted for the temperature
    return 273.15 + 243.5 * x / (17.67 - x)


def _temperature(ds: xr.Dataset) -> xr.DataArray:
    # the temperature at which the analytic q has the target relative humidity
    return _dewpoint_of(_vapour_pressure(ds) / _target_rh(ds)).transpose(*ds["hus"].dims)


def _vapour_pressure(ds):
    p = (ds["plev"] * 100.0).broadcast_like(ds["hus"])
    q = ds["hus"]
    return q * p / (EPSILON + (1.0 - EPSILON) * q)


def _new(da: xr.DataArray, **attrs) -> xr.DataArray:
    """The values of ``da`` with only the given attributes (arithmetic may keep hus's)."""
    out = da.copy()
    out.attrs = dict(attrs)
    return out


def as_form(form: str, ds: xr.Dataset | None = None, rh_units="%") -> xr.Dataset:
    ds = make_levels(ntime=3) if ds is None else ds
    e = _vapour_pressure(ds)
    t = _temperature(ds)
    out = ds.drop_vars("hus")
    if form == "rh":
        scale = 100.0 if rh_units == "%" else 1.0
        out["r"] = _new(e / saturation_vapour_pressure_water(t) * scale,
                        units=rh_units, standard_name="relative_humidity")
        out["t"] = _new(t, units="K", standard_name="air_temperature")
    elif form == "td":
        out["dpt"] = _new(_dewpoint_of(e), units="K")
    elif form == "mr":
        out["mixr"] = _new(ds["hus"] / (1.0 - ds["hus"]) * 1000.0, units="g/kg")
    elif form == "vp":
        out["vap"] = _new(e / 100.0, units="hPa")
    return out


@pytest.mark.parametrize("form,source", [("rh", "r+t"), ("td", "dpt"), ("mr", "mixr"), ("vp", "vap")])
def test_each_form_gives_the_analytic_q(tmp_path, form, source):
    f = open_fields(write(as_form(form), tmp_path))
    check_levels_formula(f, q_tol=1e-9)
    assert f.roles["q"] == source
    assert "q" in f.derived and f.ds["q"].attrs["derivation"] == f.derived["q"]
    assert set(f.ds.data_vars) == {"u", "v", "q", "ps"}
    if form in ("rh", "td"):
        assert "Bolton (1980)" in f.derived["q"]


def test_rh_and_t_budget_equals_q_budget(tmp_path):
    base = make_levels(ntime=3)
    with_q = open_fields(write(base, tmp_path, "q.nc"))
    with_rh = open_fields(write(as_form("rh", base), tmp_path, "rh.nc"))
    region = region_from_bbox(20.0, -20.0, 100.0, 30.0)
    a, b = compute(with_q, region), compute(with_rh, region)
    for name in ("precipitable_water", "vapour_import", "boundary_convergence"):
        np.testing.assert_allclose(b[name].values, a[name].values, rtol=1e-9, err_msg=name)


def test_rh_without_temperature_is_refused(tmp_path):
    ds = as_form("rh").drop_vars("t")
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    msg = str(e.value)
    assert "'r'" in msg and "in.nc" in msg and "temperature" in msg and "--var t=" in msg


def test_rh_fraction_labelled_percent_is_refused(tmp_path):
    ds = as_form("rh", rh_units="1")
    ds["r"].attrs["units"] = "%"
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "looks like a fraction" in str(e.value) and "'r'" in str(e.value)


def test_rh_percent_labelled_fraction_is_refused(tmp_path):
    ds = as_form("rh")
    ds["r"].attrs["units"] = "1"
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "looks like percent" in str(e.value) and "--units rh=%" in str(e.value)


def test_dew_point_above_temperature_is_refused(tmp_path):
    ds = as_form("td")
    ds["t"] = _new(_temperature(make_levels(ntime=3)) - 40.0, units="K")
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    msg = str(e.value)
    assert "'dpt'" in msg and "'t'" in msg and "above the air temperature" in msg


def test_temperature_in_celsius_is_converted(tmp_path):
    ds = as_form("rh")
    ds["t"] = _new(ds["t"] - 273.15, units="degC")
    f = open_fields(write(ds, tmp_path))
    check_levels_formula(f, q_tol=1e-9)


def test_rh_on_hybrid_levels_uses_each_layers_pressure(tmp_path):
    # CF appendix D: p = a p0 + b ps; here at the middle of each layer (interface means)
    from tests.test_fields import P0, make_hybrid

    ds, ps = make_hybrid(form="a")
    p = ds["a"] * P0 + ds["b"] * ds["PS"]
    e = ds["hus"] * p / (EPSILON + (1.0 - EPSILON) * ds["hus"])
    t = _dewpoint_of(e / 0.5).transpose(*ds["hus"].dims)
    out = ds.drop_vars("hus")
    out["r"] = _new(xr.full_like(ds["hus"], 50.0), units="%", standard_name="relative_humidity")
    out["t"] = _new(t, units="K", standard_name="air_temperature")
    f = open_fields(write(out, tmp_path))
    np.testing.assert_allclose(f.ds["q"].values, ds["hus"].values[:, ::-1], rtol=1e-9)


def test_relative_humidity_mapped_as_q_points_to_rh(tmp_path):
    with pytest.raises(FieldsError) as e:
        open_fields(write(as_form("rh"), tmp_path), var_map={"q": "r"})
    assert "--var rh=r" in str(e.value)


def test_rh_against_the_ifs_mixed_phase_gives_the_analytic_q(tmp_path):
    # RH written against the IFS mixed-phase saturation (IFS Documentation CY47R3, Part IV,
    # chapter 12; formula written out in tests/test_humidity.py), at temperatures from -40 to
    # +20 degC so that ice, blend and water all occur; rh_reference="mixed" must invert it.
    from tests.test_humidity import ifs_mixed

    ds = make_levels(ntime=3)
    e = _vapour_pressure(ds)
    t = (233.15 + 60.0 * ds["plev"] / 1000.0).broadcast_like(ds["hus"]).transpose(*ds["hus"].dims)
    es = np.vectorize(ifs_mixed)(t.values)
    out = ds.drop_vars("hus")
    out["r"] = _new(e / es * 100.0, units="%", standard_name="relative_humidity")
    out["t"] = _new(t, units="K", standard_name="air_temperature")
    path = write(out, tmp_path)
    f = open_fields(path, rh_reference="mixed")
    check_levels_formula(f, q_tol=1e-9)
    assert "IFS mixed phase" in f.derived["q"] and "IFS Documentation CY47R3" in f.derived["q"]
    # read over water instead (the default), the cold levels' q comes out larger: es_w > es_mixed
    water = open_fields(path)
    assert "with respect to water" in water.derived["q"]
    ratio = water.ds["q"].values / f.ds["q"].values
    assert ratio.max() > 1.1 and ratio.min() > 0.999  # never smaller: es_w >= es_mixed (to 0.1 %)


def test_unknown_rh_reference_is_one_sentence(tmp_path):
    from budget.errors import RequestError

    with pytest.raises(RequestError) as e:
        open_fields(write(as_form("rh"), tmp_path), rh_reference="liquid")
    assert "water, ice, mixed" in str(e.value) and "--rh-reference" in str(e.value)
