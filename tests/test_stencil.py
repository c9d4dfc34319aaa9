"""Stencil pieces against general-purpose reference libraries and exact identities."""

import numpy as np
import pytest

from budget.errors import RegionError
from budget.region import region_from_bbox, region_from_vertices
from budget.stencil import Grid, compile_stencil, cover_weights, divergence_operator
from budget import testing as analytic

R = analytic.A


def test_divergence_matches_metpy_in_the_interior():
    # metpy.calc.divergence: centred differences on given dx, dy (MetPy docs). On the sphere
    # ∇·Q = ∂Qu/∂x + (1/cosφ) ∂(Qv cosφ)/∂y with dx = a cosφ Δλ, dy = a Δφ (CHECKS.md), so
    # MetPy is called on (Qu, 0) and (0, Qv cosφ) with per-row dx. Pinned behaviour: MetPy 1.7.
    mpcalc = pytest.importorskip("metpy.calc")
    from metpy.units import units

    lat = np.arange(20.0, 60.1, 1.0)
    lon = np.arange(-30.0, 30.1, 1.0)
    LON, LAT = np.meshgrid(lon, lat)
    qu, qv = analytic.flux(LON, LAT)
    cos = np.cos(np.radians(LAT))
    dx = (R * np.radians(1.0) * cos[:, :-1]) * units.m
    dy = np.full((lat.size - 1, lon.size), R * np.radians(1.0)) * units.m
    zero = np.zeros_like(qu)
    dux = mpcalc.divergence(qu * units("kg/m/s"), zero * units("kg/m/s"), dx=dx, dy=dy).magnitude
    dvy = mpcalc.divergence(zero * units("kg/m/s"), qv * cos * units("kg/m/s"), dx=dx, dy=dy).magnitude / cos
    ref = dux + dvy
    grid = Grid(lat, lon, periodic=False)
    du, dv = divergence_operator(grid, np.arange(qu.size))
    ours = (du @ qu.ravel() + dv @ qv.ravel()).reshape(qu.shape)
    inner = (slice(1, -1), slice(1, -1))  # MetPy is second-order one-sided at the edges, we are first order
    np.testing.assert_allclose(ours[inner], ref[inner], rtol=1e-9, atol=1e-12 * np.abs(ref).max())
    # and both approach the analytic divergence (second order in the spacing)
    exact = analytic.divergence(LON, LAT)
    assert np.max(np.abs(ours[inner] - exact[inner])) < 2e-3 * np.max(np.abs(exact))


def test_global_divergence_wraps_in_longitude():
    grid = Grid(np.arange(-89.5, 90, 1.0), np.arange(0.5, 360, 1.0), periodic=True)
    LON, LAT = np.meshgrid(grid.lon, grid.lat)
    qu, qv = analytic.flux(LON, LAT)
    du, dv = divergence_operator(grid, np.arange(qu.size))
    ours = (du @ qu.ravel() + dv @ qv.ravel()).reshape(qu.shape)
    exact = analytic.divergence(LON, LAT)
    band = np.abs(grid.lat) < 60
    # the seam column (lon 0.5 and 359.5) is as good as any other
    err = np.abs(ours - exact)[band]
    assert err.max() < 1e-3 * np.abs(exact[band]).max()


def test_cover_weights_sum_to_the_geodesic_area():
    # pyproj Geod on a sphere of the same radius (CHECKS.md, reference libraries): Geod joins
    # vertices by geodesics, so the lon-lat edges are densified before comparing.
    from pyproj import Geod

    lon = np.array([2.0, 14.0, 21.0, 17.5, 9.0, 4.5])
    lat = np.array([41.0, 38.5, 46.0, 52.0, 49.0, 53.5])
    region = region_from_vertices(lon, lat)
    grid = Grid(np.arange(30.25, 60, 0.5), np.arange(-10.25, 30, 0.5), periodic=False)
    idx, area = cover_weights(region, grid)
    t = np.linspace(0, 1, 2001)[:-1]
    dl = np.concatenate([lon[k] + t * (np.roll(lon, -1)[k] - lon[k]) for k in range(lon.size)])
    dp = np.concatenate([lat[k] + t * (np.roll(lat, -1)[k] - lat[k]) for k in range(lat.size)])
    geod_area, _ = Geod(a=R, f=0).polygon_area_perimeter(dl, dp)
    assert area.sum() == pytest.approx(abs(geod_area), rel=1e-6)
    # fractional cover: no cell holds more than its own area, interior cells hold all of it
    cells = grid.lat.size * grid.lon.size
    assert idx.max() < cells and (area > 0).all()


def test_bilinear_weights_reproduce_linear_fields_exactly():
    grid = Grid(np.arange(30.0, 61.0, 1.0), np.arange(-20.0, 41.0, 1.0), periodic=False)
    LON, LAT = np.meshgrid(grid.lon, grid.lat)
    f = (3.0 * LON - 2.0 * LAT + 7.0).ravel()
    plon = np.array([-19.3, 0.0, 12.25, 39.9])
    plat = np.array([30.1, 45.5, 59.99, 33.3])
    idx, w = grid.bilinear(plon, plat)
    np.testing.assert_allclose((f[idx] * w).sum(axis=1), 3.0 * plon - 2.0 * plat + 7.0, rtol=1e-12)
    np.testing.assert_allclose(w.sum(axis=1), 1.0)


def test_region_outside_the_grid_is_refused_with_the_extent():
    grid = Grid(np.arange(35.0, 55.1, 0.5), np.arange(-10.0, 20.1, 0.5), periodic=False)
    with pytest.raises(RegionError, match=r"outside the data grid|leaves the data grid") as exc:
        compile_stencil(region_from_bbox(15, 50, 30, 60), grid)
    assert "longitudes -10.25..20.25" in str(exc.value)


def test_region_smaller_than_a_cell_warns():
    grid = Grid(np.arange(35.0, 55.1, 1.0), np.arange(-10.0, 20.1, 1.0), periodic=False)
    st = compile_stencil(region_from_bbox(5.1, 45.1, 5.6, 45.5), grid)
    assert any("smaller than about one grid cell" in w for w in st.warnings)
    assert st.cover.sum() == pytest.approx(st.area, rel=1e-9)
