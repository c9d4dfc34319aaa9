"""GRIB input on real operational files (tests/data/grib/README.md: NCEP GFS 2.5° and NAM
grid 211, public domain), checked against the files' own GRIB keys and against independent
computations."""

from pathlib import Path

import numpy as np
import pytest

from budget import grib
from budget.errors import FieldsError
from budget.gridmap import GridMapping, ProjectedGrid

DATA = Path(__file__).parent / "data" / "grib"
GFS = DATA / "gfs.t12z.pgrbf120.2p5deg.cut.grib2"
NAM = DATA / "nam.t00z.awp21100.tm00.cut.grib2"


@pytest.fixture(scope="module")
def gfs():
    return grib.open_grib(GFS)


@pytest.fixture(scope="module")
def nam():
    return grib.open_grib(NAM)


def test_gfs_levels_are_intersected_and_the_dropped_level_named(gfs):
    ds = gfs.ds
    # the file holds u, v, t on 26 isobaric levels and r on 25 (none at 20 hPa): counted with
    # ecCodes when the sample was cut (tests/data/grib/README.md)
    assert ds.sizes["level"] == 25 and 20.0 not in ds["level"].values
    assert ds["level"].attrs["units"] == "hPa"
    assert any("20 hPa" in w and "'r'" in w for w in gfs.warnings)
    assert set(ds.data_vars) >= {"u", "v", "t", "r", "sp", "pwat"}
    # the valid time: the 120-hour forecast from 2011-01-10 12Z (file name: t12z, f120)
    assert ds["time"].values[0] == np.datetime64("2011-01-15T12:00")
    # a regular longitude-latitude grid: winds earth-relative as GRIB code table 3.3 says
    assert ds["u"].attrs["standard_name"] == "eastward_wind"
    assert ds["v"].attrs["standard_name"] == "northward_wind"
    assert "crs" not in ds


def test_gfs_provenance_names_the_messages(gfs):
    text = " ".join(gfs.notes)
    assert "shortName=r paramId=157 typeOfLevel=isobaricInhPa on 25 levels" in text
    assert "shortName=sp" in text and "typeOfLevel=surface" in text
    assert gfs.ds["pwat"].attrs["source_message"].startswith("GRIB messages shortName=pwat")


def test_nam_lambert_grid_matches_the_files_own_grid_keys(nam):
    ds = nam.ds
    gm = ds["crs"].attrs
    assert gm["grid_mapping_name"] == "lambert_conformal_conic"
    # NCEP grid 211: LoV 265°, tangent at 25° N, sphere of radius 6 371 229 m (GRIB keys of
    # the file; shapeOfTheEarth 6 per WMO GRIB2 code table 3.2)
    assert gm["longitude_of_central_meridian"] == 265.0
    assert tuple(gm["standard_parallel"]) == (25.0, 25.0)
    assert gm["earth_radius"] == 6371229.0
    mapping = GridMapping.from_cf(gm)
    grid, flip_y, flip_x = ProjectedGrid.from_latlon(mapping, ds["longitude"].values, ds["latitude"].values)
    assert not flip_y and not flip_x
    # the spacing found from the 2-D latitude/longitude equals the file's DxInMetres/DyInMetres
    assert grid.dx == pytest.approx(81271.0, abs=0.5)
    assert grid.dy == pytest.approx(81271.0, abs=0.5)
    assert grid.shape == (65, 93)
    # winds along the grid axes, as uvRelativeToGrid = 1 says
    assert ds["u"].attrs["standard_name"] == "grid_eastward_wind"
    assert ds["v"].attrs["standard_name"] == "grid_northward_wind"


# -- bad input --------------------------------------------------------------------------------
def test_missing_eccodes_is_one_sentence(monkeypatch):
    import builtins

    real = builtins.__import__

    def no_eccodes(name, *a, **k):
        if name == "eccodes":
            raise ImportError("No module named 'eccodes'")
        return real(name, *a, **k)

    monkeypatch.setattr(builtins, "__import__", no_eccodes)
    with pytest.raises(FieldsError, match=r"GRIB file '.*gfs.*' needs cfgrib with the ecCodes library.*pip install cfgrib eccodes"):
        grib.open_grib(GFS)


def _tampered(monkeypatch, **attrs):
    import cfgrib

    real = cfgrib.open_datasets

    def fake(*a, **k):
        out = real(*a, **k)
        for d in out:
            for v in d.data_vars.values():
                for key, val in attrs.items():
                    if val is None:
                        v.attrs.pop(key, None)
                    else:
                        v.attrs[key] = val
        return out

    monkeypatch.setattr(cfgrib, "open_datasets", fake)


def test_winds_of_unknown_orientation_are_refused(monkeypatch):
    # neither the uvRelativeToGrid key nor the component flags it is read from
    _tampered(monkeypatch, GRIB_uvRelativeToGrid=None, GRIB_resolutionAndComponentFlags=None)
    with pytest.raises(FieldsError, match=r"orientation of the wind 'u' in the GRIB file .*nam.* cannot be told"):
        grib.open_grib(NAM)


def test_unsupported_grib_grid_is_refused(monkeypatch):
    _tampered(monkeypatch, GRIB_gridType="mercator")
    with pytest.raises(FieldsError, match=r"grid of '.' in the GRIB file .* is of type mercator"):
        grib.open_grib(NAM)


def test_not_grib_is_not_claimed(tmp_path):
    p = tmp_path / "x.nc"
    p.write_bytes(b"\x89HDF\r\n\x1a\n")
    assert not grib.is_grib(str(p))
    assert grib.is_grib(str(GFS))


# -- the GFS budget against an independent computation ---------------------------------------------
BOX = (-101.25, 28.75, -78.75, 46.25)  # whole 2.5° cells: centres 100..80 W, 30..45 N


def _cfgrib_field(short, level_type):
    """One variable read straight through cfgrib (not through Fluxfence's reader)."""
    import xarray as xr

    kw = {"filter_by_keys": {"typeOfLevel": level_type, "shortName": short}, "indexpath": ""}
    return xr.open_dataset(GFS, engine="cfgrib", backend_kwargs=kw)[short]


@pytest.fixture(scope="module")
def metpy_reference():
    """Box means on the file's own fields read straight through cfgrib: q from MetPy's
    mixing_ratio_from_relative_humidity, W and the flux by the trapezoid rule in pressure to the
    surface pressure (as metpy.calc.precipitable_water integrates), and the convergence by
    metpy.calc.divergence (centred differences) over the box's cells."""
    mpcalc = pytest.importorskip("metpy.calc")
    from metpy.units import units

    box = dict(latitude=slice(47.5, 27.5), longitude=slice(257.5, 282.5))  # one cell of padding
    t = _cfgrib_field("t", "isobaricInhPa").sel(box)
    rh = _cfgrib_field("r", "isobaricInhPa").sel(box)
    u, v = (_cfgrib_field(c, "isobaricInhPa").sel(box) for c in ("u", "v"))
    t, u, v = (a.sel(isobaricInhPa=rh["isobaricInhPa"]) for a in (t, u, v))
    ps = _cfgrib_field("sp", "surface").sel(box).values
    p = rh["isobaricInhPa"].values * 100.0
    P = p[:, None, None] * np.ones(t.shape) * units.Pa
    T, RH = t.values * units.K, rh.values * units.percent
    q = mpcalc.specific_humidity_from_mixing_ratio(mpcalc.mixing_ratio_from_relative_humidity(P, T, RH)).magnitude
    g = 9.80665  # standard gravity (CHECKS.md)
    order = np.argsort(p)
    ny, nx = ps.shape
    W, QU, QV = (np.zeros((ny, nx)) for _ in range(3))
    for j in range(ny):
        for i in range(nx):
            m = p[order] <= ps[j, i]
            pp = np.append(p[order][m], ps[j, i])
            for out, x in ((W, q), (QU, q * u.values), (QV, q * v.values)):
                prof = x[order, j, i][m]
                out[j, i] = np.trapezoid(np.append(prof, prof[-1]), pp) / g
    lat = rh["latitude"].values
    a = 6371008.7714  # the engine's sphere (CHECKS.md constants)
    dx = (a * np.radians(2.5) * np.cos(np.radians(lat)))[:, None] * np.ones((1, nx - 1)) * units.m
    dy = np.full((ny - 1, nx), -a * np.radians(2.5)) * units.m  # latitudes descend
    cos = np.cos(np.radians(lat))[:, None]
    flux = units("kg/m/s")
    zero = np.zeros_like(QU) * flux
    div = (mpcalc.divergence(QU * flux, zero, dx=dx, dy=dy).magnitude
           + mpcalc.divergence(zero, QV * cos * flux, dx=dx, dy=dy).magnitude / cos)
    inner = (slice(1, -1), slice(1, -1))
    wts = np.cos(np.radians(lat))[1:-1, None] * np.ones((1, nx - 2))  # cell areas ∝ cos φ
    mean = lambda x: float((x[inner] * wts).sum() / wts.sum())  # noqa: E731
    pwat = _cfgrib_field("pwat", "atmosphereSingleLayer").sel(box).values
    return {"w": mean(W), "conv_mm_day": -mean(div) * 86400.0, "file_pw": mean(pwat)}


@pytest.fixture(scope="module")
def gfs_budget():
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    fields = open_fields(str(GFS))
    return fields, compute(fields, region_from_bbox(*BOX), mass_correction=False)


def test_gfs_precipitable_water_against_metpy_and_the_file(gfs_budget, metpy_reference):
    fields, ds = gfs_budget
    w = float(ds["precipitable_water"].values[0])
    # the trapezoid against the engine's beta factor: far less than 1 % apart here
    # (CHECKS.md: 12.03 mm measured from RH and T with Bolton)
    assert w == pytest.approx(metpy_reference["w"], rel=1e-2)
    assert w == pytest.approx(12.03, abs=0.05)
    # the file's own precipitable water (the model integrates on its native levels):
    # 11.50 mm, about 5 % lower (CHECKS.md, measured); allow 6 %
    assert metpy_reference["file_pw"] == pytest.approx(11.50, abs=0.01)
    assert abs(w / metpy_reference["file_pw"] - 1.0) < 0.06
    # provenance: how q was obtained, and that 20 hPa was dropped
    assert "20 hPa" in " ".join(fields.warnings)


def test_gfs_convergence_against_metpy_divergence(gfs_budget, metpy_reference):
    _, ds = gfs_budget
    ref = metpy_reference["conv_mm_day"]
    area = float(ds["area_convergence"].values[0]) * 86400.0
    boundary = float(ds["boundary_convergence"].values[0]) * 86400.0
    # CHECKS.md (measured): 3.43 mm/day by the boundary integral against 3.53 by centred
    # differences. Here the column schemes also differ (beta factor against the trapezoid
    # rule); measured 0.6 % (boundary) and 4.3 % (area) apart: allow 5 %
    assert boundary == pytest.approx(ref, rel=5e-2)
    assert area == pytest.approx(ref, rel=5e-2)
    assert 3.0 < boundary < 4.0


# -- the NAM budget on its Lambert grid against an independent computation ------------------------
def _nam_field(short, level_type):
    import xarray as xr

    kw = {"filter_by_keys": {"typeOfLevel": level_type, "shortName": short}, "indexpath": ""}
    return xr.open_dataset(NAM, engine="cfgrib", backend_kwargs=kw)[short]


@pytest.fixture(scope="module")
def nam_reference():
    """The box's edge imports and mean W computed without the engine: q from MetPy
    (mixing_ratio_from_relative_humidity), winds turned earth-relative by the usual NCEP
    Lambert formula θ = n (λ − LoV), n = sin 25° (from memory; the same angle pyproj's
    meridian convergence gives, tests/test_gridmap.py), columns by the trapezoid rule to the
    surface pressure, the boundary flux from scipy's Delaunay-linear interpolation in
    longitude-latitude (not the engine's native-plane bilinear), midpoint rule on 0.05° pieces."""
    mpcalc = pytest.importorskip("metpy.calc")
    from metpy.units import units
    from scipy.interpolate import griddata

    t, rh, u, v = (_nam_field(s, "isobaricInhPa") for s in ("t", "r", "u", "v"))
    ps = _nam_field("sp", "surface").values
    lat, lon = t["latitude"].values, (t["longitude"].values + 180.0) % 360.0 - 180.0
    p = t["isobaricInhPa"].values * 100.0
    order = np.argsort(p)
    p = p[order]
    P = p[:, None, None] * np.ones(t.shape) * units.Pa
    q = mpcalc.specific_humidity_from_mixing_ratio(
        mpcalc.mixing_ratio_from_relative_humidity(P, t.values[order] * units.K, rh.values[order] * units.percent)).magnitude
    theta = np.sin(np.radians(25.0)) * np.radians(lon + 95.0)  # LoV 265° = 95° W
    ug, vg = u.values[order], v.values[order]
    ue, ve = np.cos(theta) * ug + np.sin(theta) * vg, -np.sin(theta) * ug + np.cos(theta) * vg
    near = (lat > 24) & (lat < 51) & (lon > -106) & (lon < -74)

    def column(x):
        out = np.full(ps.shape, np.nan)
        for j, i in zip(*np.nonzero(near)):
            m = p <= ps[j, i]
            prof = x[m, j, i]
            out[j, i] = np.trapezoid(np.append(prof, prof[-1]), np.append(p[m], ps[j, i])) / 9.80665
        return out

    W, QU, QV = column(q), column(q * ue), column(q * ve)
    pts = np.column_stack([lon[near], lat[near]])
    w0, s0, e0, n0 = BOX
    n = 400
    rlon = np.concatenate([np.linspace(w0, e0, n, endpoint=False), np.full(n, e0), np.linspace(e0, w0, n, endpoint=False), np.full(n, w0)])
    rlat = np.concatenate([np.full(n, s0), np.linspace(s0, n0, n, endpoint=False), np.full(n, n0), np.linspace(n0, s0, n, endpoint=False)])
    l1, p1 = np.roll(rlon, -1), np.roll(rlat, -1)
    ml, mp = 0.5 * (rlon + l1), 0.5 * (rlat + p1)
    qu, qv = griddata(pts, QU[near], (ml, mp)), griddata(pts, QV[near], (ml, mp))
    a = 6371008.7714  # the engine's sphere (CHECKS.md constants)
    # outward flux a (Qu dφ − Qv cos φ dλ) on a counter-clockwise ring (CHECKS.md)
    out = a * (qu * np.radians(p1 - rlat) - qv * np.cos(np.radians(mp)) * np.radians(l1 - rlon))
    gl, gp = np.meshgrid(np.arange(w0 + 0.05, e0, 0.1), np.arange(s0 + 0.05, n0, 0.1))
    wts = np.cos(np.radians(gp))
    return {"edges": -out.reshape(4, n).sum(axis=1), "gross": np.abs(out).sum(),
            "w": float((griddata(pts, W[near], (gl, gp)) * wts).sum() / wts.sum())}


def test_nam_lambert_budget_against_an_independent_computation(nam_reference):
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    fields = open_fields(str(NAM))
    assert fields.native_grid is not None
    assert any("along the grid axes" in w for w in fields.warnings)
    ds = compute(fields, region_from_bbox(*BOX), mass_correction=False)
    assert list(ds["edge"].values) == ["S", "E", "N", "W"]
    ref = nam_reference
    # W: the column schemes (beta factor vs trapezoid) and interpolations differ; 1 %
    assert float(ds["precipitable_water"].values[0]) == pytest.approx(ref["w"], rel=1e-2)
    # each edge's import within 3 % of the reference (measured: 0.2-2.7 %), the net import
    # within 2 % of the gross flux through the boundary (common practice, no source)
    np.testing.assert_allclose(ds["edge_import"].values[0], ref["edges"], rtol=3e-2)
    assert abs(float(ds["vapour_import"].values[0]) - ref["edges"].sum()) < 2e-2 * ref["gross"]


def test_command_line_runs_on_the_gfs_grib_file(tmp_path):
    """`fluxfence run gfs.grib2 --bbox -101.25,28.75,-78.75,46.25 --out box.csv` as a user types it."""
    import csv
    import subprocess
    import sys

    out = tmp_path / "box.csv"
    r = subprocess.run(
        [sys.executable, "-m", "app.cli", "run", str(GFS), "--bbox", "-101.25,28.75,-78.75,46.25", "--out", str(out)],
        capture_output=True, text=True, timeout=600,
    )
    assert r.returncode == 0, r.stderr
    rows = list(csv.DictReader(line for line in out.open() if not line.startswith("#")))
    assert len(rows) == 1
    # the same W as the API above (CHECKS.md: 12.03 mm)
    assert float(rows[0]["precipitable_water_mm"]) == pytest.approx(12.03, abs=0.05)


def test_grib_levels_with_a_netcdf_of_surface_pressure(tmp_path, gfs_budget):
    """Mixed inputs: the GFS levels from GRIB without sp, sp from a NetCDF file on ascending
    latitudes named lat/lon, give the same budget as the GRIB file alone."""
    import eccodes

    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    levels = tmp_path / "levels.grib2"
    with open(GFS, "rb") as f, open(levels, "wb") as out:
        while (h := eccodes.codes_grib_new_from_file(f)) is not None:
            if eccodes.codes_get(h, "shortName") != "sp":
                out.write(eccodes.codes_get_message(h))
            eccodes.codes_release(h)
    sp = grib.open_grib(GFS).ds[["sp"]].rename(sp="ps", latitude="lat", longitude="lon").sortby("lat")
    sp["ps"].attrs = {"units": "Pa", "standard_name": "surface_air_pressure"}
    sp.to_netcdf(tmp_path / "ps.nc")
    fields = open_fields([str(levels), str(tmp_path / "ps.nc")])
    assert fields.roles["ps"] == "ps"
    ds = compute(fields, region_from_bbox(*BOX), mass_correction=False)
    ref = gfs_budget[1]
    np.testing.assert_allclose(ds["precipitable_water"].values, ref["precipitable_water"].values, rtol=1e-12)
    np.testing.assert_allclose(ds["vapour_import"].values, ref["vapour_import"].values, rtol=1e-12)


def test_dashboard_data_folder_lists_grib_files_by_the_format_tables_endings(tmp_path):
    """--data-dir finds GRIB files as the format table names them (budget/fields/opening.py)."""
    import shutil

    from app.server import resolve_sources
    from budget.fields.opening import FIELD_SUFFIXES

    assert {".grib2", ".grb", ".nc", ".zarr"} <= set(FIELD_SUFFIXES)
    shutil.copy(NAM, tmp_path / "nam.grib2")
    shutil.copy(GFS, tmp_path / "gfs.GRB2")
    (tmp_path / "notes.txt").write_text("not fields")
    labels = [s["label"] for s in resolve_sources(data_dir=tmp_path)]
    assert labels == ["gfs.GRB2", "nam.grib2"]


def test_command_line_rh_reference_mixed_is_used_and_stated(tmp_path):
    """--rh-reference mixed on the GFS file (RH and T): the budget's provenance names the IFS
    mixed phase, and W is below the over-water reading of the same RH (CHECKS.md: 12.03 mm),
    since the mixed-phase saturation pressure is below water's under 0 degC (IFS Documentation
    CY47R3 Part IV ch. 12; tests/test_humidity.py) while the warm low levels hold most vapour."""
    import json
    import subprocess
    import sys

    import xarray as xr

    out = tmp_path / "box.nc"
    r = subprocess.run(
        [sys.executable, "-m", "app.cli", "run", str(GFS), "--bbox", "-101.25,28.75,-78.75,46.25",
         "--rh-reference", "mixed", "--out", str(out), "--quiet"],
        capture_output=True, text=True, timeout=600,
    )
    assert r.returncode == 0, r.stderr
    with xr.open_dataset(out) as ds:
        how = json.loads(ds.attrs["derived_roles"])["q"]
        w = float(ds["precipitable_water"].values[0])
    assert "IFS mixed phase" in how
    assert 10.0 < w < 12.03


# -- GRIB written here with ecCodes: GRIB1, hybrid model levels, projected grid keys --------------
# The values are invented smooth fields (not real weather); the NetCDF path that the GRIB budget is
# compared with is itself checked against analytic answers (tests/test_budget_analytic.py,
# tests/test_vertical.py). GRIB packs values at 24 bits here, so agreement is to about 1e-6.
from tests.grib_writing import grid_lonlat, lonlat_keys, message, write_grib  # noqa: E402

WLON = np.arange(0.0, 30.01, 1.5)
WLAT = np.arange(30.0, 60.01, 1.5)
WBOX = (6.0, 36.0, 24.0, 54.0)


def _smooth(nlev: int, hours=(0, 6)):
    """u, v, q on (time, level, lat, lon) with q decreasing upward, and ps, all invented."""
    LON, LAT = np.meshgrid(np.radians(WLON), np.radians(WLAT))
    t = np.arange(len(hours))[:, None, None, None]
    k = np.arange(nlev)[None, :, None, None] / max(nlev - 1, 1)  # 0 at the top, 1 at the bottom
    u = 8.0 + 12.0 * np.sin(2 * LON) * np.cos(LAT) * (1 + 0.1 * t) + 5.0 * k
    v = 4.0 * np.cos(3 * LON + LAT) * (1 - 0.3 * k) + 0.5 * t
    q = 0.012 * (0.05 + k**3) * (1 + 0.2 * np.sin(LON + 2 * LAT)) * (1 + 0.05 * t)
    ps = (99000.0 + 1500.0 * np.cos(LON - LAT)) * (1 + 0.002 * t[:, 0])
    return u, v, q, ps


def _budget(path_or_ds):
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    return compute(open_fields(path_or_ds), region_from_bbox(*WBOX), mass_correction=False)


def _agree(a, b, rtol=2e-5):
    for name in ("precipitable_water", "vapour_import", "boundary_convergence", "area_convergence", "p_minus_e"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=rtol, err_msg=name)


def test_grib1_pressure_levels_give_the_netcdf_budget(tmp_path):
    """GRIB edition 1 (ecCodes sample regular_ll_pl_grib1) read like the same fields in NetCDF."""
    import eccodes
    import xarray as xr

    plev = np.array([300, 500, 700, 850, 925, 1000])
    u, v, q, ps = _smooth(plev.size)
    msgs = [message(n, "isobaricInhPa", p, a[ti, k, ::-1], 6 * ti)
            for ti in range(2) for n, a in (("u", u), ("v", v), ("q", q)) for k, p in enumerate(plev)]
    msgs += [message("sp", "surface", 0, ps[ti, ::-1], 6 * ti) for ti in range(2)]
    path = tmp_path / "levels.grib1"
    write_grib(path, "regular_ll_pl_grib1", lonlat_keys(WLON, WLAT), msgs)
    with open(path, "rb") as f:  # it really is edition 1
        h = eccodes.codes_grib_new_from_file(f)
        assert eccodes.codes_get(h, "edition") == 1
        eccodes.codes_release(h)
    gi = grib.open_grib(path)
    assert gi.ds["u"].attrs["standard_name"] == "eastward_wind" and gi.ds.sizes["level"] == plev.size
    d4, d3 = ("time", "plev", "lat", "lon"), ("time", "lat", "lon")
    nc = xr.Dataset(
        {"ua": (d4, u, {"units": "m s-1", "standard_name": "eastward_wind"}),
         "va": (d4, v, {"units": "m s-1", "standard_name": "northward_wind"}),
         "hus": (d4, q, {"units": "kg kg-1", "standard_name": "specific_humidity"}),
         "ps": (d3, ps, {"units": "Pa", "standard_name": "surface_air_pressure"})},
        coords={"time": np.array(["2031-03-01T00", "2031-03-01T06"], dtype="datetime64[ns]"),
                "plev": ("plev", plev.astype(float), {"units": "hPa", "standard_name": "air_pressure"}),
                "lat": ("lat", WLAT, {"units": "degrees_north"}), "lon": ("lon", WLON, {"units": "degrees_east"})},
    )
    _agree(_budget(str(path)), _budget(nc))


PV_A = np.array([0.0, 2000.0, 5000.0, 8000.0, 6000.0, 2000.0, 0.0])  # Pa, interfaces top first
PV_B = np.array([0.0, 0.0, 0.0625, 0.25, 0.5, 0.75, 1.0])  # exact in the pv array's 32-bit floats


def _hybrid_grib(tmp_path, lnsp=True):
    u, v, q, ps = _smooth(PV_A.size - 1)
    levels = range(1, PV_A.size)
    msgs = [message(n, "hybrid", lev, a[ti, lev - 1, ::-1], 6 * ti)
            for ti in range(2) for n, a in (("u", u), ("v", v), ("q", q)) for lev in levels]
    if lnsp:  # ECMWF's way: the log of surface pressure on model level 1
        msgs += [message("lnsp", "hybrid", 1, np.log(ps[ti, ::-1]), 6 * ti) for ti in range(2)]
    else:
        msgs += [message("sp", "surface", 0, ps[ti, ::-1], 6 * ti) for ti in range(2)]
    path = tmp_path / ("model_levels.grib2" if lnsp else "model_levels_sp.grib2")
    write_grib(path, "regular_ll_pl_grib2", lonlat_keys(WLON, WLAT), msgs, pv=np.concatenate([PV_A, PV_B]))
    return path, (u, v, q, ps)


@pytest.mark.parametrize("lnsp", [True, False], ids=["lnsp", "sp"])
def test_grib_hybrid_model_levels_give_the_netcdf_budget(tmp_path, lnsp):
    """typeOfLevel hybrid with the a/b coefficients in the pv array, and lnsp or sp, read like
    the same fields in a CF NetCDF on hybrid levels (CF appendix D, `ap: ap b: b ps: ps` with
    bounds)."""
    import xarray as xr

    from budget.fields import open_fields

    path, (u, v, q, ps) = _hybrid_grib(tmp_path, lnsp)
    fields = open_fields(str(path))
    assert type(fields.vertical).__name__ == "HybridLevels"
    np.testing.assert_array_equal(fields.vertical.a_interface_pa, PV_A)
    np.testing.assert_array_equal(fields.vertical.b_interface, PV_B)
    # CF appendix D: the layers of a hybrid column add up to ps − p_top exactly (CHECKS.md)
    ps0 = fields.ds["ps"].isel(time=0).values
    np.testing.assert_allclose(fields.vertical.thickness(ps0).sum(axis=0), ps0 - PV_A[0], rtol=1e-12)
    if lnsp:  # provenance says where ps came from
        assert fields.ds["ps"].attrs["source_message"].startswith("exp of the GRIB messages shortName=lnsp")
    d4, d3 = ("time", "lev", "lat", "lon"), ("time", "lat", "lon")
    a_b = np.stack([PV_A[:-1], PV_A[1:]], axis=1)
    b_b = np.stack([PV_B[:-1], PV_B[1:]], axis=1)
    nc = xr.Dataset(
        {"ua": (d4, u, {"units": "m s-1", "standard_name": "eastward_wind"}),
         "va": (d4, v, {"units": "m s-1", "standard_name": "northward_wind"}),
         "hus": (d4, q, {"units": "kg kg-1", "standard_name": "specific_humidity"}),
         "ps": (d3, ps, {"units": "Pa", "standard_name": "surface_air_pressure"}),
         "ap": ("lev", a_b.mean(axis=1), {"units": "Pa"}), "b": ("lev", b_b.mean(axis=1)),
         "ap_bnds": (("lev", "nb"), a_b, {"units": "Pa"}), "b_bnds": (("lev", "nb"), b_b),
         "lev_bnds": (("lev", "nb"), np.stack([np.arange(6) + 0.5, np.arange(6) + 1.5], axis=1),
                      {"formula_terms": "ap: ap_bnds b: b_bnds ps: ps"})},
        coords={"time": np.array(["2031-03-01T00", "2031-03-01T06"], dtype="datetime64[ns]"),
                "lev": ("lev", np.arange(1.0, 7.0), {"standard_name": "atmosphere_hybrid_sigma_pressure_coordinate",
                                                     "formula_terms": "ap: ap b: b ps: ps", "bounds": "lev_bnds"}),
                "lat": ("lat", WLAT, {"units": "degrees_north"}), "lon": ("lon", WLON, {"units": "degrees_east"})},
    )
    _agree(_budget(str(path)), _budget(nc))


def test_grib_model_levels_without_coefficients_are_refused(tmp_path):
    u, v, q, ps = _smooth(3)
    msgs = [message(n, "hybrid", lev, a[0, lev - 1, ::-1]) for n, a in (("u", u), ("v", v), ("q", q)) for lev in (1, 2, 3)]
    path = tmp_path / "no_pv.grib2"
    write_grib(path, "regular_ll_pl_grib2", lonlat_keys(WLON, WLAT), msgs)
    with pytest.raises(FieldsError) as e:
        grib.open_grib(path)
    text = str(e.value)
    assert "no_pv.grib2" in text and "pv array" in text and "PVPresent" in text and "\n" not in text


def _uniform_messages(shape, levels=(500, 850)):
    ones = np.ones(shape)
    msgs = [message(n, "isobaricInhPa", p, ones * (0.005 if n == "q" else 10.0)) for n in ("u", "v", "q") for p in levels]
    return msgs + [message("sp", "surface", 0, ones * 1.0e5)]


def _transform(proj: str):
    import pyproj

    return pyproj.Transformer.from_crs("+proj=longlat +R=6371229 +no_defs", proj, always_xy=True)


def test_grib_polar_stereographic_grid_keys_against_pyproj(tmp_path):
    """GRIB2 template 3.20 (ecCodes sample polar_stereographic_pl_grib2): the CF mapping decoded
    from the grid keys projects like PROJ's stere written by hand from the same keys (north pole,
    true scale at LaD = 60° N, LoV = 255° E, sphere of 6 371 229 m: shapeOfTheEarth 6), and the
    points ecCodes computes form a 100 km grid in that plane."""
    from budget.fields import open_fields
    from budget.gridmap import GridMapping

    keys = {"Nx": 40, "Ny": 35, "latitudeOfFirstGridPointInDegrees": 30.0, "longitudeOfFirstGridPointInDegrees": 225.0,
            "LaDInDegrees": 60.0, "orientationOfTheGridInDegrees": 255.0, "DxInMetres": 100000.0,
            "DyInMetres": 100000.0, "jScansPositively": 1}
    path = tmp_path / "polar.grib2"
    # bit 5 of the component flags (value 8): winds along the grid axes (GRIB2 flag table 3.3)
    write_grib(path, "polar_stereographic_pl_grib2", keys, _uniform_messages((35, 40)),
               extra={"resolutionAndComponentFlags": 8})
    gi = grib.open_grib(path)
    assert gi.ds["u"].attrs["standard_name"] == "grid_eastward_wind"
    lon, lat = grid_lonlat(path)  # ecCodes' own geometry of the keys
    x, y = _transform("+proj=stere +lat_0=90 +lat_ts=60 +lon_0=-105 +R=6371229 +units=m +no_defs").transform(lon, lat)
    np.testing.assert_allclose(np.diff(x, axis=1), 100000.0, rtol=1e-9)
    np.testing.assert_allclose(np.diff(y, axis=0), 100000.0, rtol=1e-9)
    mx, my = GridMapping.from_cf(dict(gi.ds["crs"].attrs)).to_native(lon, lat)
    np.testing.assert_allclose(mx, x, atol=1e-3)
    np.testing.assert_allclose(my, y, atol=1e-3)
    fields = open_fields(str(path))
    assert fields.native_grid.dx == pytest.approx(100000.0, rel=1e-9)
    assert any("along the grid axes" in w for w in fields.warnings)


def test_grib_rotated_pole_grid_keys_against_pyproj(tmp_path):
    """GRIB2 template 3.1 (ecCodes sample rotated_ll_pl_grib2), southern pole at 39.25° S, 18° E
    (grid north pole 39.25° N, 162° W): the decoded CF mapping rotates like PROJ's ob_tran written
    by hand from the southern pole (o_lat_p = −latitude, lon_0 = longitude of the southern pole),
    and ecCodes' points land on the 1° rotated grid the keys give."""
    from budget.fields import open_fields
    from budget.gridmap import GridMapping

    keys = {"Ni": 41, "Nj": 31, "latitudeOfFirstGridPointInDegrees": 15.0, "longitudeOfFirstGridPointInDegrees": -20.0,
            "latitudeOfLastGridPointInDegrees": -15.0, "longitudeOfLastGridPointInDegrees": 20.0,
            "iDirectionIncrementInDegrees": 1.0, "jDirectionIncrementInDegrees": 1.0,
            "latitudeOfSouthernPoleInDegrees": -39.25, "longitudeOfSouthernPoleInDegrees": 18.0,
            "angleOfRotationInDegrees": 0.0}
    path = tmp_path / "rotated.grib2"
    write_grib(path, "rotated_ll_pl_grib2", keys, _uniform_messages((31, 41)))
    gi = grib.open_grib(path)
    gm = gi.ds["crs"].attrs
    assert gm["grid_north_pole_latitude"] == 39.25 and gm["grid_north_pole_longitude"] == -162.0
    lon, lat = grid_lonlat(path)
    x, y = _transform("+proj=ob_tran +o_proj=longlat +o_lat_p=39.25 +o_lon_p=0 +lon_0=18 +R=6371229 +no_defs").transform(lon, lat)
    rx, ry = np.meshgrid(np.arange(-20.0, 20.5, 1.0), np.arange(15.0, -15.5, -1.0))
    np.testing.assert_allclose(x, rx, atol=1e-5)  # ecCodes' points in PROJ's rotated frame
    np.testing.assert_allclose(y, ry, atol=1e-5)
    mx, my = GridMapping.from_cf(dict(gm)).to_native(lon, lat)
    np.testing.assert_allclose(mx, x, atol=1e-9)
    np.testing.assert_allclose(my, y, atol=1e-9)
    fields = open_fields(str(path))
    assert fields.native_grid.dx == pytest.approx(1.0, rel=1e-6)
    assert fields.ds["u"].attrs["standard_name"] == "eastward_wind"  # uvRelativeToGrid 0 in the sample


def test_report_map_of_the_lambert_nam_file_is_drawn_in_lonlat(tmp_path):
    """`fluxfence figure` on NCEP grid 211 (2-D latitude/longitude): the map is drawn from the
    display view (budget.maps.display_snapshot), whose extent is the file's own coordinates."""
    import subprocess
    import sys

    from budget.fields import open_fields
    from budget.maps import display_snapshot

    fields = open_fields(str(NAM))
    view = display_snapshot(fields, 0)
    assert view["ivt"].dims == ("lat", "lon")
    assert float(view["lat"].min()) == pytest.approx(float(np.min(fields.lat)))
    assert float(view["lon"].min()) == pytest.approx(float(np.min((np.asarray(fields.lon) + 180) % 360 - 180)), abs=1e-6)
    import shutil

    inputs = tmp_path / "in"
    inputs.mkdir()
    nam = inputs / NAM.name
    shutil.copy(NAM, nam)
    out = tmp_path / "nam_map.png"
    r = subprocess.run(
        [sys.executable, "-m", "app.cli", "figure", str(nam), "--bbox", "-105,35,-90,45", "--layout", "map", "--out", str(out)],
        capture_output=True, text=True, timeout=600,
    )
    assert r.returncode == 0, r.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # nothing written beside the input (cfgrib's index goes to a private temporary folder)
    assert [p.name for p in inputs.iterdir()] == [NAM.name]
