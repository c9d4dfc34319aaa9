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
    [(rotated_grid, grid_relative_by_3d_rotation), (lambert_grid, grid_relative_by_pyproj)],
    ids=["rotated", "lambert"],
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
