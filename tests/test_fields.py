"""Tests of budget.fields.open_fields: detection, orientation, units, vertical coordinates.

Every input is a small synthetic file written to tmp_path.  Its values come from analytic
formulas of (time, pressure, latitude, longitude), so the canonical result can be checked
against the formula at the canonical coordinates, whatever the file's layout.
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest
import xarray as xr

from budget.errors import FieldsError, RequestError
from budget.fields import Fields, open_fields
from budget.vertical import HybridLevels, PressureLevels

T0 = np.datetime64("2021-03-01T00:00", "ns")
STEP = np.timedelta64(6, "h")


# ---------------------------------------------------------------------------------------
# analytic fields (frame-independent in longitude: only cos/sin of lon appear)


def f_u(ti, p, lat, lon):
    return 5.0 + ti + p / 1.0e4 + 0.1 * lat + 3.0 * np.cos(np.deg2rad(lon))


def f_v(ti, p, lat, lon):
    return -2.0 + 0.5 * ti + p / 2.0e4 + 2.0 * np.sin(np.deg2rad(lon)) * np.cos(np.deg2rad(lat))


def f_q(ti, p, lat, lon):  # kg/kg, at most 0.012
    return 0.002 + 0.01 * (p / 1.0e5) ** 3 * np.cos(np.deg2rad(lat)) ** 2 + 1e-5 * ti


def f_ps(ti, lat, lon):  # Pa, 95 000 .. 102 000
    return 100000.0 + 1000.0 * np.cos(np.deg2rad(lon)) + 2000.0 * np.sin(np.deg2rad(lat)) ** 2 - 50 * ti


def f_qu(ti, lat, lon):
    return 100.0 + 50.0 * np.cos(np.deg2rad(lon)) + ti


def f_qv(ti, lat, lon):
    return -20.0 + 30.0 * np.sin(np.deg2rad(lon)) * np.cos(np.deg2rad(lat)) + ti


def f_w(ti, lat, lon):
    return 10.0 + 20.0 * np.cos(np.deg2rad(lat)) + ti


LAT = np.linspace(-60.0, 60.0, 9)
LON = np.arange(0.0, 360.0, 30.0)
P_HPA = np.array([250.0, 500.0, 700.0, 850.0, 1000.0])


def grid(ntime, p_pa, lat, lon):
    ti = np.arange(ntime, dtype=float)[:, None, None, None]
    p = np.asarray(p_pa, float)[None, :, None, None]
    la = np.asarray(lat, float)[None, None, :, None]
    lo = np.asarray(lon, float)[None, None, None, :]
    return ti, p, la, lo


def make_levels(
    *,
    ntime=4,
    lat=LAT,
    lon=LON,
    lev=P_HPA,
    lev_units="hPa",
    names=("ua", "va", "hus", "ps"),
    standard_names=True,
    dims=("time", "plev", "lat", "lon"),
    q_units="kg kg-1",
    q_scale=1.0,
    ps_units="Pa",
    ps_scale=1.0,
    wind_units="m s-1",
    lev_attrs=None,
):
    """A level dataset whose values follow the formulas (q scaled by q_scale, ps by ps_scale)."""
    tdim, ldim, ydim, xdim = dims
    fac = {"hpa": 100.0, "pa": 1.0, "millibar": 100.0, "mbar": 100.0, "mb": 100.0}
    p_pa = np.asarray(lev, float) * fac.get(str(lev_units).lower(), 1.0)
    ti, p, la, lo = grid(ntime, p_pa, lat, lon)
    shape = (ntime, len(lev), len(lat), len(lon))
    u = np.broadcast_to(f_u(ti, p, la, lo), shape).astype("f8")
    v = np.broadcast_to(f_v(ti, p, la, lo), shape).astype("f8")
    q = np.broadcast_to(f_q(ti, p, la, lo), shape).astype("f8") * q_scale
    ps = np.broadcast_to(f_ps(ti[:, 0], la[:, 0], lo[:, 0]), (ntime, len(lat), len(lon))) * ps_scale
    std = ["eastward_wind", "northward_wind", "specific_humidity", "surface_air_pressure"]
    unit = [wind_units, wind_units, q_units, ps_units]
    data = {}
    for i, (name, arr) in enumerate(zip(names, (u, v, q, ps))):
        attrs = {}
        if unit[i] is not None:
            attrs["units"] = unit[i]
        if standard_names:
            attrs["standard_name"] = std[i]
        d = (tdim, ldim, ydim, xdim) if i < 3 else (tdim, ydim, xdim)
        data[name] = (d, np.ascontiguousarray(arr), attrs)
    la_attrs = {"units": "degrees_north"}
    lo_attrs = {"units": "degrees_east"}
    levattrs = {} if lev_units is None else {"units": lev_units}
    levattrs.update(lev_attrs or {})
    coords = {
        tdim: (tdim, T0 + STEP * np.arange(ntime)),
        ldim: (ldim, np.asarray(lev, float), levattrs),
        ydim: (ydim, np.asarray(lat, float), la_attrs),
        xdim: (xdim, np.asarray(lon, float), lo_attrs),
    }
    return xr.Dataset(data, coords=coords)


def make_column(*, ntime=4, lat=LAT, lon=LON, names=("qu", "qv", "w"), standard_names=True,
                units=("kg m-1 s-1", "kg m-1 s-1", "kg m-2"), dims=("time", "lat", "lon")):
    ti = np.arange(ntime, dtype=float)[:, None, None]
    la = np.asarray(lat, float)[None, :, None]
    lo = np.asarray(lon, float)[None, None, :]
    shape = (ntime, len(lat), len(lon))
    std = [
        "eastward_atmosphere_water_vapor_transport_across_unit_distance",
        "northward_atmosphere_water_vapor_transport_across_unit_distance",
        "atmosphere_mass_content_of_water_vapor",
    ]
    data = {}
    for i, (name, fn) in enumerate(zip(names, (f_qu, f_qv, f_w))):
        attrs = {}
        if units[i] is not None:
            attrs["units"] = units[i]
        if standard_names:
            attrs["standard_name"] = std[i]
        data[name] = (dims, np.broadcast_to(fn(ti, la, lo), shape).copy(), attrs)
    coords = {
        dims[0]: (dims[0], T0 + STEP * np.arange(ntime)),
        dims[1]: (dims[1], np.asarray(lat, float), {"units": "degrees_north"}),
        dims[2]: (dims[2], np.asarray(lon, float), {"units": "degrees_east"}),
    }
    return xr.Dataset(data, coords=coords)


def write(ds: xr.Dataset, tmp_path, name="in.nc") -> str:
    path = tmp_path / name
    ds.to_netcdf(path)
    return str(path)


def check_levels_formula(f: Fields, q_tol=1e-12):
    """The canonical data equal the formulas evaluated at the canonical coordinates."""
    ds = f.ds
    ti = ((f.times - T0) / STEP).astype(float)
    t, p, la, lo = grid(0, ds["level"].values, ds["lat"].values, ds["lon"].values)
    t = ti[:, None, None, None]
    np.testing.assert_allclose(ds["u"].values, np.broadcast_to(f_u(t, p, la, lo), ds["u"].shape), rtol=1e-12)
    np.testing.assert_allclose(ds["v"].values, np.broadcast_to(f_v(t, p, la, lo), ds["v"].shape), rtol=1e-12)
    np.testing.assert_allclose(ds["q"].values, np.broadcast_to(f_q(t, p, la, lo), ds["q"].shape), rtol=q_tol)
    np.testing.assert_allclose(
        ds["ps"].values, np.broadcast_to(f_ps(t[:, 0], la[:, 0], lo[:, 0]), ds["ps"].shape), rtol=1e-12
    )


def canonical_checks(f: Fields):
    ds = f.ds
    assert np.all(np.diff(ds["lat"].values) > 0)
    assert np.all(np.diff(ds["lon"].values) > 0)
    assert ds["time"].dtype == np.dtype("datetime64[ns]")
    for name, var in ds.data_vars.items():
        assert var.attrs["units"]
        assert var.attrs["long_name"]
        assert var.attrs["source_name"] == f.roles[name]
    if f.kind == "levels":
        assert ds["u"].dims == ("time", "level", "lat", "lon")
        assert ds["ps"].dims == ("time", "lat", "lon")
        assert ds["u"].attrs["units"] == "m s-1"
        assert ds["q"].attrs["units"] == "kg kg-1"
        assert ds["ps"].attrs["units"] == "Pa"
    else:
        assert ds["qu"].dims == ("time", "lat", "lon")
        assert ds["qu"].attrs["units"] == "kg m-1 s-1"
        assert ds["w"].attrs["units"] == "kg m-2"


# ---------------------------------------------------------------------------------------
# detection routes


def test_standard_names_find_unusual_variable_names(tmp_path):
    ds = make_levels(names=("zonal", "meridional", "humid", "surf"))
    f = open_fields(write(ds, tmp_path))
    assert f.kind == "levels"
    assert f.roles == {"u": "zonal", "v": "meridional", "q": "humid", "ps": "surf"}
    assert isinstance(f.vertical, PressureLevels)
    canonical_checks(f)
    check_levels_formula(f)
    assert f.files == [str(tmp_path / "in.nc")]


def test_standard_name_beats_short_name(tmp_path):
    # 'u' is a short name, but 'zonal' carries the standard_name: standard_name wins
    ds = make_levels(names=("zonal", "va", "hus", "ps"))
    ds["u"] = ds["zonal"] * 0 + 99.0
    ds["u"].attrs = {"units": "m s-1"}
    f = open_fields(ds)
    assert f.roles["u"] == "zonal"
    check_levels_formula(f)


def test_short_names_ncep_style(tmp_path):
    # NCEP-style names without standard_name, levels in millibar, dim "level"
    ds = make_levels(
        names=("uwnd", "vwnd", "shum", "pres"), standard_names=False,
        dims=("time", "level", "lat", "lon"), lev_units="millibar",
    )
    f = open_fields(write(ds, tmp_path))
    assert f.roles == {"u": "uwnd", "v": "vwnd", "q": "shum", "ps": "pres"}
    canonical_checks(f)
    check_levels_formula(f)


def test_short_names_era5_style_with_size_one_member_dim(tmp_path):
    ds = make_levels(
        names=("u", "v", "q", "sp"), standard_names=False,
        dims=("valid_time", "pressure_level", "latitude", "longitude"),
    )
    ds = ds.expand_dims(number=[0])  # a size-1 ensemble dimension, as some downloads carry
    f = open_fields(write(ds, tmp_path))
    assert f.roles == {"u": "u", "v": "v", "q": "q", "ps": "sp"}
    canonical_checks(f)
    check_levels_formula(f)


def test_short_names_column_era5_and_merra(tmp_path):
    era = make_column(names=("viwve", "viwvn", "tcwv"), standard_names=False,
                      units=("kg m**-1 s**-1", "kg m**-1 s**-1", "kg m**-2"))
    f = open_fields(write(era, tmp_path, "era.nc"))
    assert f.kind == "column" and f.vertical is None
    assert f.roles == {"qu": "viwve", "qv": "viwvn", "w": "tcwv"}
    canonical_checks(f)
    merra = make_column(names=("UFLXQV", "VFLXQV", "TQV"), standard_names=False,
                        units=("kg m-1 s-1", "kg m-1 s-1", "kg m-2"))
    f2 = open_fields(write(merra, tmp_path, "merra.nc"))
    assert f2.roles == {"qu": "UFLXQV", "qv": "VFLXQV", "w": "TQV"}
    np.testing.assert_allclose(f2.ds["w"].values, f.ds["w"].values)


def test_column_standard_names_and_mm(tmp_path):
    ds = make_column(names=("east", "north", "pw"), units=("kg/m/s", "kg/m/s", "mm"))
    f = open_fields(write(ds, tmp_path))
    assert f.roles == {"qu": "east", "qv": "north", "w": "pw"}
    ti = np.arange(4.0)[:, None, None]
    la = f.lat[None, :, None]
    lo = f.lon[None, None, :]
    # 1 mm of precipitable water is 1 kg m-2 (liquid water density 1000 kg m-3, common practice)
    np.testing.assert_allclose(f.ds["w"].values, np.broadcast_to(f_w(ti, la, lo), f.ds["w"].shape))
    np.testing.assert_allclose(f.ds["qv"].values, np.broadcast_to(f_qv(ti, la, lo), f.ds["qv"].shape))


def test_var_map_overrides_detection(tmp_path):
    ds = make_levels()
    ds["u_alt"] = ds["ua"] + 1.0
    ds["u_alt"].attrs = {"units": "m s-1"}
    ds["wetness"] = ds["hus"] * 1000.0
    ds["wetness"].attrs = {"units": "g kg-1"}
    ds["hus"] = ds["hus"] * 0 + 0.5  # implausible on purpose: must not be used
    ds["hus"].attrs = {"units": "kg kg-1", "standard_name": "specific_humidity"}
    f = open_fields(write(ds, tmp_path), var_map={"u": "u_alt", "q": "wetness"})
    assert f.roles["u"] == "u_alt" and f.roles["q"] == "wetness"
    ti = np.arange(4.0)[:, None, None, None]
    _, p, la, lo = grid(0, f.ds["level"].values, f.lat, f.lon)
    np.testing.assert_allclose(f.ds["u"].values, np.broadcast_to(f_u(ti, p, la, lo) + 1.0, f.ds["u"].shape))
    np.testing.assert_allclose(f.ds["q"].values, np.broadcast_to(f_q(ti, p, la, lo), f.ds["q"].shape), rtol=1e-12)


def test_levels_preferred_and_column_kept(tmp_path):
    ds = make_levels().merge(make_column(names=("viwve", "viwvn", "tcwv")))
    f = open_fields(write(ds, tmp_path))
    assert f.kind == "levels"
    assert f.column_ds is not None
    assert set(f.column_ds.data_vars) == {"qu", "qv", "w"}
    assert f.column_roles == {"qu": "viwve", "qv": "viwvn", "w": "tcwv"}
    np.testing.assert_array_equal(f.column_ds["lat"].values, f.lat)
    # mapping a column role chooses the column input
    g = open_fields(write(ds, tmp_path, "b.nc"), var_map={"w": "tcwv"})
    assert g.kind == "column" and set(g.ds.data_vars) == {"qu", "qv", "w"}


# ---------------------------------------------------------------------------------------
# vertical: pressure levels


def test_pa_and_hpa_levels_in_both_orders_give_identical_data(tmp_path):
    variants = {
        "hpa_up": dict(lev=P_HPA, lev_units="hPa"),
        "hpa_down": dict(lev=P_HPA[::-1], lev_units="hPa"),
        "pa_up": dict(lev=P_HPA * 100.0, lev_units="Pa"),
        "pa_down": dict(lev=P_HPA[::-1] * 100.0, lev_units="Pa"),
        "mbar_down": dict(lev=P_HPA[::-1], lev_units="mbar"),
    }
    opened = {k: open_fields(write(make_levels(**kw), tmp_path, f"{k}.nc")) for k, kw in variants.items()}
    ref = opened["hpa_up"]
    np.testing.assert_array_equal(ref.ds["level"].values, P_HPA * 100.0)  # 1 hPa = 100 Pa (SI)
    np.testing.assert_array_equal(ref.vertical.p, P_HPA * 100.0)
    for k, f in opened.items():
        assert f.ds["level"].attrs["units"] == "Pa"
        np.testing.assert_array_equal(f.vertical.p, ref.vertical.p)
        for name in ("u", "v", "q", "ps"):
            xr.testing.assert_equal(f.ds[name].reset_coords(drop=True), ref.ds[name].reset_coords(drop=True))
    check_levels_formula(ref)


def test_repeated_levels_rejected(tmp_path):
    ds = make_levels(lev=np.array([250.0, 500.0, 500.0, 850.0, 1000.0]))
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    msg = str(e.value)
    assert "plev" in msg and "repeat" in msg and "500" in msg and "in.nc" in msg


def test_levels_without_units_need_override(tmp_path):
    ds = make_levels(lev_units=None)
    path = write(ds, tmp_path)
    with pytest.raises(FieldsError) as e:
        open_fields(path)
    assert "plev" in str(e.value) and "--units level=hPa" in str(e.value) and "in.nc" in str(e.value)
    f = open_fields(path, units={"level": "hPa"})
    np.testing.assert_array_equal(f.vertical.p, P_HPA * 100.0)


def test_hpa_values_labelled_pa_rejected(tmp_path):
    ds = make_levels(lev_units="hPa")
    ds["plev"].attrs["units"] = "Pa"
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "hPa labelled Pa" in str(e.value) and "--units level=hPa" in str(e.value)


def test_vertical_coordinate_that_is_not_pressure(tmp_path):
    ds = make_levels(lev=np.array([10000.0, 5000.0, 3000.0, 1500.0, 100.0]), lev_units="m")
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "plev" in str(e.value) and "neither pressure nor CF hybrid" in str(e.value)


# ---------------------------------------------------------------------------------------
# vertical: hybrid sigma-pressure (CF conventions appendix D:
#   p(n,k,j,i) = a(k)*p0 + b(k)*ps(n,j,i)   or   p(n,k,j,i) = ap(k) + b(k)*ps(n,j,i))

A_INT = np.array([0.01, 0.05, 0.12, 0.08, 0.03, 0.0])  # interfaces, top first (a, of p0)
B_INT = np.array([0.0, 0.0, 0.1, 0.4, 0.75, 1.0])
P0 = 100000.0


def make_hybrid(form="a", bounds=True, bounds_on="coordinate", ap_units="Pa"):
    """Hybrid level dataset stored bottom first, bounds in (lower, upper) order."""
    nl = A_INT.size - 1
    a_mid = 0.5 * (A_INT[1:] + A_INT[:-1])
    b_mid = 0.5 * (B_INT[1:] + B_INT[:-1])
    rev = slice(None, None, -1)  # the file stores the bottom level first
    a_b = np.stack([A_INT[1:], A_INT[:-1]], axis=1)[rev]  # (lower, upper): reverse order too
    b_b = np.stack([B_INT[1:], B_INT[:-1]], axis=1)[rev]
    ntime = 2
    lev_vals = (a_mid + b_mid)[rev]
    p_ref = (a_mid * P0 + b_mid * 1.0e5)[rev]  # only to make level-dependent test data
    ti, p, la, lo = grid(ntime, p_ref, LAT, LON)
    shape = (ntime, nl, LAT.size, LON.size)
    ps = np.broadcast_to(f_ps(ti[:, 0], la[:, 0], lo[:, 0]), (ntime, LAT.size, LON.size))
    data = {
        "ua": (("time", "lev", "lat", "lon"), np.broadcast_to(f_u(ti, p, la, lo), shape).copy(),
               {"units": "m s-1", "standard_name": "eastward_wind"}),
        "va": (("time", "lev", "lat", "lon"), np.broadcast_to(f_v(ti, p, la, lo), shape).copy(),
               {"units": "m s-1", "standard_name": "northward_wind"}),
        "hus": (("time", "lev", "lat", "lon"), np.broadcast_to(f_q(ti, p, la, lo), shape).copy(),
                {"units": "1", "standard_name": "specific_humidity"}),
        "PS": (("time", "lat", "lon"), ps.copy(), {"units": "Pa"}),  # named only by formula_terms
        "b": ("lev", b_mid[rev]),
    }
    lev_attrs = {"standard_name": "atmosphere_hybrid_sigma_pressure_coordinate", "positive": "down"}
    if form == "a":
        data["a"] = ("lev", a_mid[rev])
        data["p0"] = ((), P0, {"units": "Pa"})
        lev_attrs["formula_terms"] = "a: a b: b ps: PS p0: p0"
        bterms = "a: a_bnds b: b_bnds ps: PS p0: p0"
        data["a_bnds"] = (("lev", "nb"), a_b)
    else:
        scale = 100.0 if ap_units == "hPa" else 1.0
        data["ap"] = ("lev", a_mid[rev] * P0 / scale, {"units": ap_units})
        lev_attrs["formula_terms"] = "ap: ap b: b ps: PS"
        bterms = "ap: ap_bnds b: b_bnds ps: PS"
        data["ap_bnds"] = (("lev", "nb"), a_b * P0 / scale, {"units": ap_units})
    data["b_bnds"] = (("lev", "nb"), b_b)
    if bounds and bounds_on == "coordinate":
        lev_attrs["bounds"] = "lev_bnds"
        data["lev_bnds"] = (("lev", "nb"), (a_b + b_b), {"formula_terms": bterms})
    elif bounds and bounds_on == "coefficients":  # as CMIP files carry them
        coef = "a" if form == "a" else "ap"
        dims_, values, *rest = data[coef]
        attrs = dict(rest[0] if rest else {}, bounds=f"{coef}_bnds")
        data[coef] = (dims_, values, attrs)
        data["b"] = ("lev", b_mid[rev], {"bounds": "b_bnds"})
    if not bounds:
        data.pop("b_bnds")
        data.pop("a_bnds", None)
        data.pop("ap_bnds", None)
    coords = {
        "time": ("time", T0 + STEP * np.arange(ntime)),
        "lev": ("lev", lev_vals, lev_attrs),
        "lat": ("lat", LAT, {"units": "degrees_north"}),
        "lon": ("lon", LON, {"units": "degrees_east"}),
    }
    return xr.Dataset(data, coords=coords), ps


@pytest.mark.parametrize(
    "form,bounds_on,ap_units",
    [("a", "coordinate", "Pa"), ("ap", "coordinate", "Pa"), ("ap", "coordinate", "hPa"),
     ("a", "coefficients", "Pa"), ("ap", "coefficients", "Pa")],
)
def test_hybrid_levels_from_bounds(tmp_path, form, bounds_on, ap_units):
    ds, ps = make_hybrid(form=form, bounds_on=bounds_on, ap_units=ap_units)
    f = open_fields(write(ds, tmp_path))
    assert f.kind == "levels" and isinstance(f.vertical, HybridLevels)
    assert f.roles["ps"] == "PS"
    assert f.warnings == []
    # interfaces top first, a in Pa: a*p0 (CF appendix D)
    np.testing.assert_allclose(f.vertical.a_interface_pa, A_INT * P0, rtol=1e-12)
    np.testing.assert_allclose(f.vertical.b_interface, B_INT, rtol=0, atol=1e-15)
    # levels reordered top first, data reordered with them
    np.testing.assert_allclose(f.ds["u"].values, ds["ua"].values[:, ::-1, :, :], rtol=0)
    np.testing.assert_allclose(f.ds["level"].values, ds["lev"].values[::-1])
    # sum of layer thickness = ps - p_top exactly (CHECKS.md; CF appendix D interface pressure)
    psv = f.ds["ps"].values
    dp = f.vertical.thickness(psv)
    p_top = A_INT[0] * P0 + B_INT[0] * psv
    np.testing.assert_allclose(dp.sum(axis=0), psv - p_top, rtol=1e-13)
    assert np.all(dp > 0)
    assert "5 hybrid sigma-pressure levels, top interface 10 hPa + 0 ps" in f.describe()


@pytest.mark.parametrize("form", ["a", "ap"])
def test_hybrid_levels_without_bounds_interpolate_and_warn(tmp_path, form):
    ds, ps = make_hybrid(form=form, bounds=False)
    f = open_fields(write(ds, tmp_path))
    assert isinstance(f.vertical, HybridLevels)
    assert any("no bounds" in w for w in f.warnings)
    a_mid = 0.5 * (A_INT[1:] + A_INT[:-1]) * P0
    b_mid = 0.5 * (B_INT[1:] + B_INT[:-1])
    a_int = np.asarray(f.vertical.a_interface_pa)
    b_int = np.asarray(f.vertical.b_interface)
    assert a_int.size == a_mid.size + 1
    # inner interfaces midway between the (top-first) level coefficients
    np.testing.assert_allclose(a_int[1:-1], 0.5 * (a_mid[1:] + a_mid[:-1]), rtol=1e-12)
    np.testing.assert_allclose(b_int[1:-1], 0.5 * (b_mid[1:] + b_mid[:-1]), rtol=1e-12)
    assert np.all(np.diff(a_int + b_int * 1.0e5) > 0)
    psv = f.ds["ps"].values
    dp = f.vertical.thickness(psv)
    np.testing.assert_allclose(dp.sum(axis=0), (a_int[-1] + b_int[-1] * psv) - (a_int[0] + b_int[0] * psv), rtol=1e-13)


def test_hybrid_without_formula_terms_rejected(tmp_path):
    ds, _ = make_hybrid()
    del ds["lev"].attrs["formula_terms"]
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "lev" in str(e.value) and "formula_terms" in str(e.value)


# ---------------------------------------------------------------------------------------
# horizontal orientation


def test_descending_latitude_made_ascending(tmp_path):
    up = open_fields(write(make_levels(lat=LAT), tmp_path, "up.nc"))
    down = open_fields(write(make_levels(lat=LAT[::-1]), tmp_path, "down.nc"))
    np.testing.assert_array_equal(down.lat, LAT)
    check_levels_formula(down)
    xr.testing.assert_equal(up.ds["q"], down.ds["q"])
    # label slices now work (a descending axis would return nothing)
    assert down.ds["q"].sel(lat=slice(-30, 30)).sizes["lat"] == 5


def test_longitude_frames_kept_and_made_ascending(tmp_path):
    east = open_fields(write(make_levels(lon=np.arange(0.0, 360.0, 30.0)), tmp_path, "e.nc"))
    west = open_fields(write(make_levels(lon=np.arange(-180.0, 180.0, 30.0)), tmp_path, "w.nc"))
    desc = open_fields(write(make_levels(lon=np.arange(330.0, -1.0, -30.0)), tmp_path, "d.nc"))
    rolled = open_fields(write(make_levels(lon=np.r_[np.arange(180.0, 360.0, 30.0), np.arange(0.0, 180.0, 30.0)]), tmp_path, "r.nc"))
    np.testing.assert_array_equal(east.lon, np.arange(0.0, 360.0, 30.0))
    np.testing.assert_array_equal(west.lon, np.arange(-180.0, 180.0, 30.0))
    np.testing.assert_array_equal(desc.lon, np.arange(0.0, 360.0, 30.0))
    np.testing.assert_array_equal(rolled.lon, np.arange(0.0, 360.0, 30.0))
    for f in (east, west, desc, rolled):
        assert f.periodic
        check_levels_formula(f)
    np.testing.assert_allclose(east.ds["u"].sel(lon=210.0).values, west.ds["u"].sel(lon=-150.0).values)


@pytest.mark.parametrize("lon", [np.arange(0.0, 360.1, 30.0), np.arange(180.0, -180.1, -30.0)])
def test_repeated_cyclic_longitude_dropped(tmp_path, lon):
    f = open_fields(write(make_levels(lon=lon), tmp_path))
    assert f.lon.size == 12 and f.periodic
    assert any("cyclic" in w for w in f.warnings)
    check_levels_formula(f)


def test_regional_grid_across_antimeridian_unwrapped(tmp_path):
    lon = np.array([170.0, 175.0, 180.0, -175.0, -170.0])
    f = open_fields(write(make_levels(lon=lon), tmp_path))
    np.testing.assert_array_equal(f.lon, [170.0, 175.0, 180.0, 185.0, 190.0])
    assert not f.periodic
    check_levels_formula(f)


@pytest.mark.parametrize("lon,periodic", [
    (np.arange(0.0, 360.0, 2.5), True),
    (np.arange(-180.0, 180.0, 2.5), True),
    (np.arange(0.0, 357.5, 2.5), False),  # one cell short of the globe
    (np.arange(-10.0, 20.01, 0.5), False),
])
def test_periodic_flag(lon, periodic):
    ds = make_column(lon=lon, ntime=1)
    assert open_fields(ds).periodic is periodic


# ---------------------------------------------------------------------------------------
# units


def test_g_per_kg_converted_lazily(tmp_path):
    ds = make_levels(q_units="g/kg", q_scale=1000.0)
    f = open_fields(write(ds, tmp_path))
    assert f.ds["q"].attrs["units"] == "kg kg-1"
    assert f.ds["q"].attrs["source_units"] == "g/kg"
    import dask.array as da

    assert isinstance(f.ds["q"].data, da.Array)
    check_levels_formula(f, q_tol=1e-12)


def test_hpa_surface_pressure_converted(tmp_path):
    ds = make_levels(ps_units="hPa", ps_scale=0.01)
    f = open_fields(write(ds, tmp_path))
    check_levels_formula(f)


def test_units_override_for_missing_or_wrong_attribute(tmp_path):
    missing = make_levels(q_units=None, q_scale=1000.0)
    f = open_fields(write(missing, tmp_path, "m.nc"), units={"q": "g/kg"})
    check_levels_formula(f)
    wrong = make_levels(q_units="kg/kg", q_scale=1000.0)
    g = open_fields(write(wrong, tmp_path, "w.nc"), units={"hus": "g kg-1"})  # by source name
    check_levels_formula(g)


def test_wind_unit_spellings(tmp_path):
    for i, spelling in enumerate(["m s-1", "m/s", "m s**-1", "m.s-1", "meters/second", "m s^-1"]):
        f = open_fields(make_levels(wind_units=spelling, ntime=1))
        check_levels_formula(f)


# ---------------------------------------------------------------------------------------
# times


def test_start_end_window_inclusive(tmp_path):
    path = write(make_levels(ntime=8), tmp_path)
    f = open_fields(path, start="2021-03-01T06:00", end="2021-03-02T00:00")
    np.testing.assert_array_equal(f.times, T0 + STEP * np.arange(1, 5))
    check_levels_formula(f)
    g = open_fields(path, start="2021-03-01T12:00Z")  # UTC designator accepted
    assert g.times[0] == T0 + 2 * STEP and g.times.size == 6
    h = open_fields(path, end="2021-03-01")
    assert h.times.size == 1


def test_no_time_dimension_reads_a_scalar_or_attribute_time_else_refuses(tmp_path):
    g = open_fields(make_column(ntime=1).isel(time=0))  # a scalar time coordinate survives
    assert g.times[0] == T0 and g.ds["w"].dims == ("time", "lat", "lon")
    ds = make_column(ntime=1).isel(time=0, drop=True)
    ds.attrs["valid_time"] = "2021-03-01T06:00Z"  # ISO 8601, UTC designator
    f = open_fields(write(ds, tmp_path, "attr.nc"))
    assert f.ds.sizes["time"] == 1 and f.times[0] == T0 + STEP
    assert any("valid_time" in w for w in f.warnings)
    bare = make_column(ntime=1).isel(time=0, drop=True)
    raises(["bare.nc", "no time dimension", "time attribute"], write(bare, tmp_path, "bare.nc"))


def test_noleap_calendar_converted_with_warning(tmp_path):
    ds = make_column(ntime=3)
    ds = ds.assign_coords(time=xr.date_range("2001-02-27", periods=3, freq="D", calendar="noleap", use_cftime=True))
    f = open_fields(write(ds, tmp_path))
    np.testing.assert_array_equal(f.times, np.array(["2001-02-27", "2001-02-28", "2001-03-01"], "datetime64[ns]"))
    assert any("noleap" in w for w in f.warnings)


def test_360_day_calendar_with_impossible_dates_rejected(tmp_path):
    ds = make_column(ntime=3)
    ds = ds.assign_coords(time=xr.date_range("2001-02-29", periods=3, freq="D", calendar="360_day", use_cftime=True))
    with pytest.raises(FieldsError) as e:
        open_fields(write(ds, tmp_path))
    assert "360_day" in str(e.value) and "in.nc" in str(e.value) and "convert_calendar" in str(e.value)


# ---------------------------------------------------------------------------------------
# several files, Zarr, laziness


def test_multiple_files_glob_and_list(tmp_path):
    full = make_levels(ntime=6)
    single = open_fields(write(full, tmp_path, "all.nc.single"))
    (tmp_path / "parts").mkdir()
    paths = []
    for i, sl in enumerate((slice(0, 3), slice(3, 6))):
        p = tmp_path / "parts" / f"part{i}.nc"
        full.isel(time=sl).to_netcdf(p)
        paths.append(str(p))
    by_glob = open_fields(str(tmp_path / "parts" / "*.nc"))
    by_list = open_fields(paths[::-1])  # order does not matter: combined by coordinates
    for f in (by_glob, by_list):
        assert sorted(f.files) == paths
        assert f.ds["u"].data.chunks[0] == (3, 3)  # one time chunk per file, lazily
        for name in ("u", "v", "q", "ps"):
            xr.testing.assert_equal(f.ds[name], single.ds[name])


def test_variables_in_separate_files_are_merged(tmp_path):
    full = make_levels(ntime=2)
    full[["ua", "va", "hus"]].to_netcdf(tmp_path / "upper.nc")
    full[["ps"]].to_netcdf(tmp_path / "surface.nc")
    f = open_fields([tmp_path / "upper.nc", tmp_path / "surface.nc"])
    check_levels_formula(f)


def test_zarr_store(tmp_path):
    if importlib.util.find_spec("zarr") is None:  # zarr is a declared dependency
        raise AssertionError("zarr is listed in pyproject.toml and must be installed")
    store = tmp_path / "fields.zarr"
    make_levels(lat=LAT[::-1]).to_zarr(store, consolidated=False)
    f = open_fields(str(store))
    import dask.array as da

    assert isinstance(f.ds["u"].data, da.Array)
    assert f.files == [str(store)]
    check_levels_formula(f)


def test_open_is_lazy(tmp_path):
    import dask.array as da

    f = open_fields(write(make_levels(lat=LAT[::-1], lev=P_HPA[::-1], q_units="g/kg", q_scale=1000.0), tmp_path))
    for name in f.ds.data_vars:
        assert isinstance(f.ds[name].data, da.Array), name
    c = open_fields(write(make_column(), tmp_path, "c.nc"), chunks={"time": 1})
    assert c.ds["qu"].data.chunks[0] == (1, 1, 1, 1)


def test_describe_summarises(tmp_path):
    f = open_fields(write(make_levels(), tmp_path))
    text = f.describe()
    assert "u=ua" in text and "5 pressure levels, 250 to 1000 hPa" in text
    assert "global, periodic" in text and "2021-03-01T00:00:00" in text
    assert "4 steps" in text and "step 6 h" in text


# ---------------------------------------------------------------------------------------
# error messages: one sentence naming the problem and the fix


def raises(match_all, *args, exc=FieldsError, **kwargs):
    with pytest.raises(exc) as e:
        open_fields(*args, **kwargs)
    msg = str(e.value)
    for piece in match_all:
        assert piece in msg, (piece, msg)
    return msg


def test_error_missing_file(tmp_path):
    raises([str(tmp_path / "nope.nc"), "does not exist"], str(tmp_path / "nope.nc"))


def test_error_glob_matches_nothing(tmp_path):
    raises([str(tmp_path / "*.nc"), "matches no files"], str(tmp_path / "*.nc"))


def test_error_unreadable_file(tmp_path):
    bad = tmp_path / "broken.nc"
    bad.write_bytes(b"this is not a NetCDF file\n" * 10)
    raises([str(bad), "Cannot read"], str(bad))
    good = write(make_levels(), tmp_path, "good.nc")
    raises([str(bad)], [good, str(bad)])  # among several files, the bad one is named


def test_error_directory_not_zarr(tmp_path):
    raises([str(tmp_path), "not a Zarr store", "*.nc"], str(tmp_path))


def test_error_missing_role_lists_contents_and_fix(tmp_path):
    ds = make_levels().drop_vars("hus")
    ds["temperature"] = ds["ua"] * 0 + 280.0
    msg = raises(["q (specific humidity)", "in.nc", "ua", "temperature", "--var q=NAME"], write(ds, tmp_path))
    assert msg.count(".") >= 1


def test_error_nothing_recognised(tmp_path):
    ds = xr.Dataset({"t2m": (("lat", "lon"), np.zeros((3, 4)))}, coords={"lat": [0.0, 1, 2], "lon": [0.0, 1, 2, 3]})
    raises(["t2m", "u, v, q, ps", "qu, qv, w", "--var"], write(ds, tmp_path))


def test_error_var_map_names_absent_variable(tmp_path):
    raises(["'hus2'", "q (specific humidity)", "in.nc", "ua", "--var q=NAME"], write(make_levels(), tmp_path), var_map={"q": "hus2"})


def test_error_var_map_unknown_role(tmp_path):
    raises(["'temp'", "u, v, q, ps, qu, qv, w"], make_levels(), var_map={"temp": "ua"})


def test_error_var_map_without_levels(tmp_path):
    ds = make_levels()
    ds["u10"] = ds["ps"] * 0 + 3.0
    ds["u10"].attrs = {"units": "m s-1"}
    raises(["'u10'", "no vertical dimension", "--var u=NAME"], write(ds, tmp_path), var_map={"u": "u10"})


def test_error_missing_units_names_variable_file_and_fix(tmp_path):
    ds = make_levels(q_units=None)
    raises(["'hus'", "specific humidity", "in.nc", "no units attribute", "--units q=g/kg"], write(ds, tmp_path))


def test_error_unknown_unit(tmp_path):
    ds = make_levels(wind_units="furlongs/fortnight")
    raises(["'ua'", "in.nc", "'furlongs/fortnight'", "m s-1", "--units u=m/s"], write(ds, tmp_path))


def test_error_q_in_g_per_kg_labelled_kg_per_kg(tmp_path):
    ds = make_levels(q_units="kg kg-1", q_scale=1000.0)
    raises(["'hus'", "in.nc", "g/kg labelled kg/kg", "--units q=g/kg"], write(ds, tmp_path))


def test_error_ps_in_hpa_labelled_pa(tmp_path):
    ds = make_levels(ps_units="Pa", ps_scale=0.01)
    raises(["'ps'", "in.nc", "hPa labelled Pa", "--units ps=hPa"], write(ds, tmp_path))


def test_error_empty_time_window_gives_range(tmp_path):
    raises(["2030-01-01", "in.nc", "2021-03-01T00:00:00", "2021-03-01T18:00:00", "window"],
           write(make_levels(), tmp_path), start="2030-01-01")


def test_error_unparsable_time_is_a_request_error(tmp_path):
    raises(["'yesterday'", "ISO 8601"], make_levels(), start="yesterday", exc=RequestError)


def test_error_curvilinear_grid(tmp_path):
    ds = make_column(ntime=1)
    ds = ds.rename({"lat": "y", "lon": "x"})
    ds = ds.assign_coords(
        lat2d=(("y", "x"), np.broadcast_to(LAT[:, None], (LAT.size, LON.size)), {"standard_name": "latitude", "units": "degrees_north"}),
    )
    raises(["lat2d", "curvilinear", "regrid"], write(ds, tmp_path))


def test_error_unmarked_fill_values_in_q(tmp_path):
    ds = make_levels()
    ds["hus"][:, -1] = 9.99e20  # below-ground fill value without a _FillValue attribute
    raises(["'hus'", "in.nc", "_FillValue"], write(ds, tmp_path))


def test_error_role_without_time_dimension(tmp_path):
    ds = make_levels()
    ds["ps"] = ds["ps"].isel(time=0, drop=True)
    raises(["'ps'", "surface air pressure", "no 'time' dimension", "--var ps=NAME"], write(ds, tmp_path))


def test_error_times_outside_datetime64_range(tmp_path):
    ds = make_column(ntime=2)
    ds = ds.assign_coords(time=xr.date_range("3000-01-01", periods=2, freq="D", calendar="standard", use_cftime=True))
    raises(["in.nc", "3000-01-01", "1678-2261"], write(ds, tmp_path))


class _RecordingArray:
    """An array-like that records every read, wrapped by dask.array.from_array."""

    def __init__(self, values, name, log):
        self.values, self.name, self.log = values, name, log
        self.shape, self.dtype, self.ndim = values.shape, values.dtype, values.ndim

    def __getitem__(self, key):
        out = self.values[key]
        if out.size:
            self.log.append((self.name, key))
        return out


def test_open_reads_only_a_sample_of_the_first_time_step():
    # Every read of the source arrays is recorded: opening may touch only the first time step
    # of q and ps (the plausibility sample), never the winds nor later steps.
    import dask.array as da

    src = make_levels(ntime=8, lat=LAT[::-1], q_units="g/kg", q_scale=1000.0)
    log = []
    for name in src.data_vars:
        arr = src[name].values
        chunks = (1,) + arr.shape[1:]
        src[name] = (src[name].dims, da.from_array(_RecordingArray(arr, name, log), chunks=chunks), src[name].attrs)
    log.clear()
    f = open_fields(src)
    assert isinstance(f.ds["q"].data, da.Array) and f.ds["q"].data.numblocks[0] == 8
    assert {name for name, _ in log} == {"hus", "ps"}
    for _, key in log:
        t = key[0]
        assert (t.start or 0) == 0 and t.stop == 1, key
    check_levels_formula(f)


def test_error_hybrid_repeated_level(tmp_path):
    ds, _ = make_hybrid(bounds=False)
    ds["a"][1] = ds["a"].values[0]
    ds["b"][1] = ds["b"].values[0]
    raises(["'lev'", "repeat", "in.nc"], write(ds, tmp_path))


def test_error_hybrid_bounds_with_gap(tmp_path):
    ds, _ = make_hybrid()
    ds["b_bnds"][2, 0] = ds["b_bnds"].values[2, 0] + 0.05
    raises(["'lev'", "gaps or overlaps", "in.nc"], write(ds, tmp_path))


def test_error_hybrid_p0_without_units(tmp_path):
    ds, _ = make_hybrid()
    del ds["p0"].attrs["units"]
    path = write(ds, tmp_path)
    raises(["'p0'", "no units attribute", "--units p0=Pa"], path)
    f = open_fields(path, units={"p0": "Pa"})
    np.testing.assert_allclose(f.vertical.a_interface_pa, A_INT * P0, rtol=1e-12)
