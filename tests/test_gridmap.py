"""Rotated-pole and Lambert conformal grids against closed forms, pyproj and analytic budgets.

References: spherical rotation of coordinates (closed form, any text on spherical
trigonometry); pyproj (PROJ) scale factors and meridian convergence for Lambert conformal
conic; the divergence theorem on the sphere with Q = ∇χ + k×∇ψ (CHECKS.md, budget/testing.py),
whose area integral is done by Gauss quadrature independently of the engine.
"""

import numpy as np
import pytest
import shapely

from budget.errors import FieldsError, RegionError
from budget.gridmap import GridMapping, ProjectedGrid, earth_relative, grid_relative
from budget.region import region_from_bbox, region_from_vertices
from budget.stencil import Grid, compile_stencil
from budget import testing as analytic

R = analytic.A
POLE_LAT, POLE_LON = 39.25, -162.0  # grid north pole of the common European regional ensembles
POLY = ([2.0, 14.0, 21.0, 17.5, 9.0, 4.5], [41.0, 38.5, 46.0, 52.0, 49.0, 53.5])
ROTATED = {"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": POLE_LAT, "grid_north_pole_longitude": POLE_LON}
LAMBERT = {
    "grid_mapping_name": "lambert_conformal_conic",
    "standard_parallel": 45.0,
    "longitude_of_central_meridian": 10.0,
    "latitude_of_projection_origin": 45.0,
    "earth_radius": R,
}


def unit(lon, lat):
    lam, phi = np.radians(lon), np.radians(lat)
    return np.stack([np.cos(phi) * np.cos(lam), np.cos(phi) * np.sin(lam), np.sin(phi)], axis=-1)


def east_north(X, pole):
    """Unit east and north vectors at points X (…, 3) about the given pole vector."""
    e = np.cross(pole, X)
    e /= np.linalg.norm(e, axis=-1, keepdims=True)
    return e, np.cross(X, e)


def rotated_grid():
    # 1° in rotated coordinates, like the lon-lat reference grid at 1°
    mapping = GridMapping.from_cf(ROTATED)
    return ProjectedGrid(mapping, np.arange(-25.0, 25.01, 1.0), np.arange(-20.0, 25.01, 1.0))


def lambert_grid():
    # about 1° (111 km) spacing in the plane of a tangent cone at 45° N
    mapping = GridMapping.from_cf(LAMBERT)
    x = np.arange(-2200e3, 2200.1e3, 111e3)
    return ProjectedGrid(mapping, x, np.arange(-1000e3, 1500.1e3, 111e3))


POLAR = {
    "grid_mapping_name": "polar_stereographic",
    "straight_vertical_longitude_from_pole": 10.0,
    "latitude_of_projection_origin": 90.0,
    "standard_parallel": 60.0,
    "earth_radius": R,
}


def polar_grid():
    # about 1° (111 km at 60° N; the scale grows to 1.07 at 35° N) in the north polar plane
    mapping = GridMapping.from_cf(POLAR)
    return ProjectedGrid(mapping, np.arange(-1700e3, 2300.1e3, 100e3), np.arange(-6600e3, -2800.1e3, 100e3))


def grid_relative_by_3d_rotation(grid, qu, qv):
    """Rotated-pole grid-relative components without the engine's metric: project the 3-D
    vector on the rotated frame's east and north (closed form)."""
    X = unit(grid.lon, grid.lat)
    e, n = east_north(X, np.array([0.0, 0.0, 1.0]))
    er, nr = east_north(X, unit(POLE_LON, POLE_LAT))
    Q = qu[..., None] * e + qv[..., None] * n
    return (Q * er).sum(-1), (Q * nr).sum(-1)


def grid_relative_by_pyproj(grid, qu, qv):
    """Lambert grid-relative components from pyproj's meridian convergence γ (degrees between
    true north and grid north); the x axis then lies at −γ from east."""
    import pyproj

    f = pyproj.Proj(grid.mapping.crs).get_factors(grid.lon, grid.lat)
    return grid_relative(qu, qv, -np.radians(np.asarray(f.meridian_convergence)))


def budget_from_grid_relative(grid, qx, qy, region):
    """What the fields stage does (winds to earth-relative), then the stencil's sums."""
    alpha = grid.metric().alpha
    qu, qv = earth_relative(qx, qy, alpha)
    st = compile_stencil(region, grid)
    fu, fv = qu.ravel()[st.touched], qv.ravel()[st.touched]
    boundary_import = -(st.bu @ fu + st.bv @ fv).sum()
    area_import = -(st.div_u @ fu + st.div_v @ fv) * st.area
    return boundary_import, area_import, st


def exact_import(geom):
    return -analytic.area_integral_of_divergence(geom)


def lonlat_import(region):
    g = Grid(np.arange(20.0, 70.1, 1.0), np.arange(-20.0, 40.1, 1.0), periodic=False)
    st = compile_stencil(region, g)
    LON, LAT = np.meshgrid(g.lon, g.lat)
    qu, qv = analytic.flux(LON, LAT)
    return -(st.bu @ qu.ravel()[st.touched] + st.bv @ qv.ravel()[st.touched]).sum()


# -- the mappings ----------------------------------------------------------------------------
def test_rotated_pole_mapping_matches_the_spherical_rotation():
    m = GridMapping.from_cf(ROTATED)
    lon = np.array([-10.0, 5.0, 18.0, 30.0, 2.0])
    lat = np.array([35.0, 60.0, 50.75, 45.0, 41.0])
    x, y = m.to_native(lon, lat)
    # rotated latitude: sin φ' = X · P, P the grid north pole (closed form)
    sin_rot = (unit(lon, lat) * unit(POLE_LON, POLE_LAT)).sum(-1)
    np.testing.assert_allclose(np.sin(np.radians(y)), sin_rot, atol=1e-12)
    # the rotated origin lies at (λp + 180°, 90° − φp) = (18° E, 50.75° N) (closed form)
    assert x[2] == pytest.approx(0.0, abs=1e-9) and y[2] == pytest.approx(0.0, abs=1e-9)
    back = m.to_lonlat(x, y)
    np.testing.assert_allclose(back[0], lon, atol=1e-9)
    np.testing.assert_allclose(back[1], lat, atol=1e-9)


def test_lambert_metric_matches_pyproj_scale_factor_and_convergence():
    import pyproj

    grid = lambert_grid()
    m = grid.metric()
    f = pyproj.Proj(grid.mapping.crs).get_factors(grid.lon, grid.lat)
    # hx = hy = 1/k: ground metres per map metre (pyproj parallel/meridian scale)
    np.testing.assert_allclose(m.hx, 1.0 / np.asarray(f.parallel_scale), rtol=1e-7)
    np.testing.assert_allclose(m.hy, 1.0 / np.asarray(f.meridional_scale), rtol=1e-7)
    np.testing.assert_allclose(np.degrees(m.alpha), -np.asarray(f.meridian_convergence), atol=1e-6)
    # the tangent cone's rotation angle n (λ − λ0), n = sin 45° (the usual NCEP/WRF wind
    # rotation for Lambert grids; formula from memory, checked here against pyproj above)
    theta = np.sin(np.radians(45.0)) * np.radians(grid.lon - 10.0)
    np.testing.assert_allclose(m.alpha, -theta, atol=1e-9)
    assert np.abs(m.skew).max() < 1e-8  # conformal: axes at right angles on the sphere


def test_rotated_pole_metric_is_the_spherical_one():
    grid = rotated_grid()
    m = grid.metric()
    deg = R * np.pi / 180.0
    # in rotated coordinates hx = a cos φ' per degree, hy = a per degree (closed form)
    np.testing.assert_allclose(m.hx, deg * np.cos(np.radians(grid.y))[:, None] * np.ones(grid.shape), rtol=1e-7)
    np.testing.assert_allclose(m.hy, deg, rtol=1e-7)


def test_polar_stereographic_metric_matches_pyproj():
    import pyproj

    grid = polar_grid()
    m = grid.metric()
    f = pyproj.Proj(grid.mapping.crs).get_factors(grid.lon, grid.lat)
    np.testing.assert_allclose(m.hx, 1.0 / np.asarray(f.parallel_scale), rtol=1e-7)
    np.testing.assert_allclose(np.degrees(m.alpha), -np.asarray(f.meridian_convergence), atol=1e-6)
    # north polar stereographic: grid north turns with longitude, α = −(λ − λ0) (closed form)
    np.testing.assert_allclose(np.angle(np.exp(1j * (m.alpha + np.radians(grid.lon - 10.0)))), 0.0, atol=1e-9)


def test_winds_round_trip_and_preserve_speed():
    rng = np.random.default_rng(1)
    u, v, a = rng.normal(size=(3, 50))
    x, y = grid_relative(u, v, a)
    np.testing.assert_allclose(np.hypot(x, y), np.hypot(u, v), rtol=1e-12)
    np.testing.assert_allclose(earth_relative(x, y, a), (u, v), atol=1e-12)


# -- cover, divergence and budgets -------------------------------------------------------------
@pytest.mark.parametrize("make", [rotated_grid, lambert_grid], ids=["rotated", "lambert"])
def test_cover_is_the_regions_spherical_area(make):
    from pyproj import Geod

    grid = make()
    region = region_from_vertices(*POLY)
    st = compile_stencil(region, grid)
    # pyproj Geod on the same sphere (CHECKS.md reference libraries), lon-lat edges densified
    lon, lat = POLY
    t = np.linspace(0, 1, 2001)[:-1]
    dl = np.concatenate([lon[k] + t * (np.roll(lon, -1)[k] - lon[k]) for k in range(len(lon))])
    dp = np.concatenate([lat[k] + t * (np.roll(lat, -1)[k] - lat[k]) for k in range(len(lat))])
    geod_area, _ = Geod(a=R, f=0).polygon_area_perimeter(dl, dp)
    assert st.cover.sum() == pytest.approx(abs(geod_area), rel=1e-5)


@pytest.mark.parametrize("make", [rotated_grid, lambert_grid], ids=["rotated", "lambert"])
def test_gridded_divergence_approaches_the_analytic_one(make):
    grid = make()
    qu, qv = analytic.flux(grid.lon, grid.lat)
    inner = np.zeros(grid.shape, bool)
    inner[2:-2, 2:-2] = True
    cells = np.flatnonzero(inner)
    du, dv = grid.divergence(cells)
    ours = du @ qu.ravel() + dv @ qv.ravel()
    exact = analytic.divergence(grid.lon, grid.lat).ravel()[cells]
    # the lon-lat operator's bound at 1° (tests/test_stencil.py)
    assert np.max(np.abs(ours - exact)) < 2e-3 * np.max(np.abs(exact))


@pytest.mark.parametrize(
    "make,relative",
    [(rotated_grid, grid_relative_by_3d_rotation), (lambert_grid, grid_relative_by_pyproj),
     (polar_grid, grid_relative_by_pyproj)],
    ids=["rotated", "lambert", "polar"],
)
@pytest.mark.parametrize(
    "region,geom",
    [
        (lambda: region_from_bbox(5, 43, 17, 49), shapely.box(5, 43, 17, 49)),
        (lambda: region_from_vertices(*POLY), shapely.Polygon(list(zip(*POLY)))),
    ],
    ids=["box", "irregular"],
)
def test_budget_with_grid_relative_winds_equals_the_lonlat_answer(make, relative, region, geom):
    grid = make()
    qu, qv = analytic.flux(grid.lon, grid.lat)
    qx, qy = relative(grid, qu, qv)
    got, area_got, _ = budget_from_grid_relative(grid, qx, qy, region())
    exact = exact_import(geom)
    # the tolerances of the lon-lat analytic test at 1° (tests/test_budget_analytic.py)
    assert got == pytest.approx(exact, rel=5e-3)
    assert area_got == pytest.approx(exact, rel=2e-2)
    assert got == pytest.approx(lonlat_import(region()), rel=5e-3)


def test_rotational_flux_contributes_nothing_on_a_lambert_grid():
    # CHECKS.md: k×∇ψ contributes nothing to a closed boundary integral
    grid = lambert_grid()
    region = region_from_vertices(*POLY)
    out = []
    for rot in (True, False):
        qu, qv = analytic.flux(grid.lon, grid.lat, rotational=rot)
        out.append(budget_from_grid_relative(grid, *grid_relative_by_pyproj(grid, qu, qv), region))
    scale = np.abs(out[0][2].bu @ analytic.flux(grid.lon, grid.lat)[0].ravel()[out[0][2].touched]).sum()
    assert abs(out[0][0] - out[1][0]) < 2e-3 * scale


# -- bad input ------------------------------------------------------------------------------------
def test_unsupported_mapping_is_refused_in_one_sentence():
    with pytest.raises(FieldsError, match=r"'transverse_mercator' in cf.nc is not supported.*regrid") as exc:
        GridMapping.from_cf({"grid_mapping_name": "transverse_mercator"}, where="cf.nc")
    assert str(exc.value).count(". ") == 0


def test_region_outside_a_lambert_grid_names_the_extent():
    with pytest.raises(RegionError, match=r"lambert_conformal_conic grid over longitudes"):
        compile_stencil(region_from_bbox(100, 10, 120, 30), lambert_grid())


def test_irregular_2d_coordinates_are_refused():
    grid = lambert_grid()
    lat = grid.lat.copy()
    lat[3, 4] += 2.0
    with pytest.raises(FieldsError, match="do not form a regular grid"):
        ProjectedGrid.from_latlon(grid.mapping, grid.lon, lat, where="wrf.nc")
    again, flip_y, flip_x = ProjectedGrid.from_latlon(grid.mapping, grid.lon[::-1], grid.lat[::-1])
    assert flip_y and not flip_x
    np.testing.assert_allclose(again.y, grid.y, atol=1e-3)


# -- through open_fields and compute: a CF NetCDF on each grid ----------------------------------------
G0 = 9.80665  # standard gravity (CHECKS.md constants)


def cf_file(tmp_path, grid, relative, name):
    """A CF NetCDF on a projected grid: winds along the grid axes (grid_eastward_wind), q and
    ps uniform, two pressure levels; the column flux (1/g)·q·u·Δp is the analytic Q."""
    import xarray as xr

    qu, qv = analytic.flux(grid.lon, grid.lat)
    qx, qy = relative(grid, qu, qv)
    q, dp = 0.01, 50000.0  # levels 500 and 1000 hPa, ps = 1000 hPa: Σ Δp = ps − p_top
    scale = G0 / (q * dp)
    lev = np.array([500.0, 1000.0])
    cube = lambda a: np.broadcast_to(a * scale, (1, 2) + a.shape)[:, :, ::-1]  # noqa: E731 y stored descending
    xdim, ydim = ("rlon", "rlat") if grid.mapping.name.startswith("rotated") else ("x", "y")
    dims = ("time", "plev", ydim, xdim)
    wind = lambda a, std: xr.Variable(dims, cube(a), {"units": "m s-1", "standard_name": std, "grid_mapping": "crs"})  # noqa: E731
    ds = xr.Dataset(
        {
            "ua": wind(qx, "grid_eastward_wind"),
            "va": wind(qy, "grid_northward_wind"),
            "hus": xr.Variable(dims, np.full((1, 2) + grid.shape, q), {"units": "kg kg-1", "grid_mapping": "crs"}),
            "ps": xr.Variable(("time", ydim, xdim), np.full((1,) + grid.shape, 100000.0), {"units": "Pa", "grid_mapping": "crs"}),
            "crs": xr.Variable((), 0, grid.mapping.cf),
        },
        coords={
            "time": ("time", np.array(["2031-03-01T00"], dtype="datetime64[ns]")),
            "plev": ("plev", lev, {"units": "hPa", "standard_name": "air_pressure"}),
            ydim: (ydim, grid.y[::-1], {"units": grid.mapping.native_units}),
            xdim: (xdim, grid.x, {"units": grid.mapping.native_units}),
            "lat": ((ydim, xdim), grid.lat[::-1], {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ((ydim, xdim), grid.lon[::-1], {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    path = tmp_path / f"{name}.nc"
    ds.to_netcdf(path)
    return path


@pytest.mark.parametrize(
    "make,relative", [(rotated_grid, grid_relative_by_3d_rotation), (lambert_grid, grid_relative_by_pyproj)], ids=["rotated", "lambert"]
)
def test_cf_netcdf_on_a_projected_grid_gives_the_lonlat_answer(tmp_path, make, relative):
    from budget.fields import open_fields
    from budget.ledger import compute

    grid = make()
    fields = open_fields(str(cf_file(tmp_path, grid, relative, make.__name__)))
    assert fields.native_grid is not None and fields.ds["u"].dims[-2:] == ("y", "x")
    assert any("along the grid axes" in w for w in fields.warnings)
    # uniform q: the vapour flux is the air flux times q, so the dry-air mass correction
    # would take the divergence away; the analytic check needs the winds as given
    ds = compute(fields, region_from_vertices(*POLY), mass_correction=False)
    exact = exact_import(shapely.Polygon(list(zip(*POLY))))
    # the tolerances of the lon-lat analytic test at 1° (tests/test_budget_analytic.py)
    assert float(ds["vapour_import"].values[0]) == pytest.approx(exact, rel=5e-3)
    assert float(ds["area_convergence"].values[0]) * ds.attrs["region_area_m2"] == pytest.approx(exact, rel=2e-2)
    # uniform q and ps: W = q Δp / g (CHECKS.md column integrals), up to the cover's
    # densified cell edges (the summed cover is the region's area within 1e-5)
    assert float(ds["precipitable_water"].values[0]) == pytest.approx(0.01 * 50000.0 / G0, rel=1e-5)


def test_projected_winds_of_unknown_orientation_are_refused(tmp_path):
    import xarray as xr

    from budget.fields import open_fields

    path = cf_file(tmp_path, lambert_grid(), grid_relative_by_pyproj, "lcc")
    ds = xr.open_dataset(path).load()
    for k in ("ua", "va"):
        del ds[k].attrs["standard_name"]
    bad = tmp_path / "unknown.nc"
    ds.to_netcdf(bad)
    with pytest.raises(FieldsError, match=r"orientation of the wind 'ua' in .*unknown.nc' cannot be told"):
        open_fields(str(bad))
