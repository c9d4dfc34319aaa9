"""Gridded column fields for maps (budget.maps.column_snapshot).

References: the analytic fields of budget.testing (Q = ∇χ + k×∇ψ, ∇·Q = ∇²χ in closed form,
CHECKS.md) for the convergence, which the centred-difference divergence on the sphere matches
to second order in the grid spacing; IVT magnitude is |Q| by definition (CHECKS.md, column
integrals); the level case is checked against the budget's own area mean of W, which uses the
same column integral (so the map and the budget cannot disagree).
"""

from __future__ import annotations

import numpy as np
import pytest

from budget import testing
from budget.fields import open_fields
from budget.maps import column_snapshot


def test_convergence_matches_the_analytic_divergence():
    fields = open_fields(testing.column_dataset(1.0, ntime=2))
    snap = column_snapshot(fields, 1)
    LON, LAT = np.meshgrid(snap["lon"].values, snap["lat"].values)
    exact = -testing.divergence(LON, LAT) * 1.1  # the flux grows by 10 % per step
    inner = np.abs(LAT) < 80  # away from the poles, where 1/cos φ amplifies the differences
    err = np.abs(snap["convergence"].values - exact)[inner].max() / np.abs(exact[inner]).max()
    assert err < 1e-3  # second-order centred differences on a 1° grid
    np.testing.assert_allclose(snap["ivt"].values, np.hypot(snap["ivt_u"].values, snap["ivt_v"].values))
    ds = fields.ds.isel(time=1)
    np.testing.assert_allclose(snap["precipitable_water"].values, ds["w"].values)
    assert snap["convergence"].attrs["units"] == "kg m-2 s-1"


def test_level_fields_integrate_like_the_budget():
    import budget
    from budget.region import region_from_bbox

    fields = open_fields(testing.level_dataset(nt=2))
    snap = column_snapshot(fields, 0)
    # uniform fields: every cell holds the same column W; the budget's area mean is that W
    w = snap["precipitable_water"].values
    assert np.ptp(w) < 1e-12 * w.max()
    ds = budget.compute(fields, region_from_bbox(5, 35, 15, 45))
    np.testing.assert_allclose(ds["precipitable_water"].values[0], w[0, 0], rtol=1e-12)
    # IVT of a uniform wind (10, 2) m/s over W: |Q| = W |V| (q V integrates as q times V)
    np.testing.assert_allclose(snap["ivt"].values, w * np.hypot(10.0, 2.0), rtol=1e-12)


def test_lonlat_view_of_a_rotated_grid_is_the_field_at_each_display_point():
    """Display regrid of a rotated-pole snapshot: a smooth field known in closed form at every
    longitude-latitude (the analytic flux of budget.testing) must come back at the display
    points within bilinear interpolation error on a 1° grid; NaN beyond the grid."""
    import xarray as xr

    from budget.gridmap import GridMapping, ProjectedGrid
    from budget.maps import lonlat_view

    cf = {"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": 39.25,
          "grid_north_pole_longitude": -162.0}
    grid = ProjectedGrid(GridMapping.from_cf(cf), np.arange(-20.0, 20.01, 1.0), np.arange(-15.0, 15.01, 1.0))
    qu, qv = testing.flux(grid.lon, grid.lat)
    dims = ("y", "x")
    snap = xr.Dataset(
        {"ivt_u": (dims, qu, {"units": "kg m-1 s-1"}), "ivt_v": (dims, qv, {"units": "kg m-1 s-1"})},
        coords={"lat": (dims, grid.lat), "lon": (dims, grid.lon)},
    )
    view = lonlat_view(snap, grid)
    assert view["ivt_u"].dims == ("lat", "lon") and view["ivt_u"].attrs["units"] == "kg m-1 s-1"
    # the view spans the grid's own longitudes and latitudes
    assert float(view.lon.min()) == pytest.approx(grid.lon.min()) and float(view.lat.min()) == pytest.approx(grid.lat.min())
    assert float(view.lon.max()) <= grid.lon.max() + 1.0 and float(view.lat.max()) <= grid.lat.max() + 1.0
    LON, LAT = np.meshgrid(view.lon.values, view.lat.values)
    exact_u, _ = testing.flux(LON, LAT)
    got = view["ivt_u"].values
    inside = np.isfinite(got)
    assert 0.4 < inside.mean() < 1.0  # a rotated rectangle fills part of its lon-lat box
    # bilinear interpolation error on a 1° grid (second order) between the cell centres; in
    # the outer half cell the edge value is held (as the stencil does), a first-order error
    px, py = grid.to_native(LON, LAT)
    centres = (px >= grid.x[0]) & (px <= grid.x[-1]) & (py >= grid.y[0]) & (py <= grid.y[-1])
    err = np.abs(got - exact_u)[centres].max() / np.ptp(qu)
    assert err < 5e-3
    assert np.abs(got - exact_u)[inside].max() / np.ptp(qu) < 3e-2
    # a point far outside the grid (the box's corner at its south-west) is NaN, not extrapolated
    assert not inside[0, 0]
    # longitude-latitude snapshots are returned as they are
    ll = column_snapshot(open_fields(testing.column_dataset(5.0, ntime=1)), 0)
    assert lonlat_view(ll, None) is ll
