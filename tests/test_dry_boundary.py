"""Dry air along the boundary: the import through each edge, per unit length, and by height.

References:
* the divergence theorem on the sphere (CHECKS.md): net import = −∮ F·n dl = −∬ ∇·F dA, with
  F = ∇χ + k × ∇ψ of budget.testing (χ spherical harmonics, ∇²Y_l^m = −l(l+1) Y_l^m / a²);
  the area integral by Gauss quadrature (budget.testing), independent of the engine's stencil;
* the import through one edge of a lon-lat box in closed form as a line integral of the
  analytic flux, a·∫ F·(−n) dl along the edge (CHECKS.md: outward flux through an element
  (dλ, dφ) is a (Fu dφ − Fv cosφ dλ)), evaluated by Gauss-Legendre quadrature;
* the dry-air column flux F = (1/g) ∫ (1 − q) V dp (budget.mass; Trenberth 1991): with q = 0
  and V the same at every level it is V (ps − p_top) / g, the layers tiling the column from
  the top level to the surface (CHECKS.md, column integrals: Σ Δp = ps − p_top).
"""

import numpy as np
import pytest
import xarray as xr

from budget import compute
from budget import testing as analytic
from budget.constants import STANDARD_GRAVITY
from budget.fields import open_fields
from budget.region import region_from_bbox
from budget.stencil import Grid, compile_stencil

LON = np.arange(0.0, 40.0 + 0.5, 1.0)
LAT = np.arange(10.0, 50.0 + 0.5, 1.0)
BOX = (10.0, 20.0, 30.0, 40.0)  # W, S, E, N: edges on grid lines
P = np.array([10000.0, 20000, 30000, 50000, 70000, 85000, 92500, 100000])  # Pa, top first
PS = 100000.0
COLUMN = PS - P[0]  # Pa of air above ground between the top level and the surface
TIMES = np.array(["2031-05-01T00", "2031-05-01T06", "2031-05-01T12"], dtype="datetime64[ns]")
GROW = np.array([1.0, 1.2, 0.9])  # the flux changes in time; each step stands on its own


def dry_divergent_fields():
    """Invented level fields (not weather): no vapour (q = 0), surface pressure 1000 hPa, and a
    wind the same at every level chosen so that the dry-air column flux is the analytic
    F = g(t)·(∇χ + k × ∇ψ) of budget.testing."""
    lon2, lat2 = np.meshgrid(LON, LAT)
    fu, fv = analytic.flux(lon2, lat2)
    scale = STANDARD_GRAVITY / COLUMN  # V = F g / (ps − p_top)
    shape = (TIMES.size, P.size) + lon2.shape
    u = np.broadcast_to(GROW[:, None, None, None] * (fu * scale)[None, None], shape).copy()
    v = np.broadcast_to(GROW[:, None, None, None] * (fv * scale)[None, None], shape).copy()
    d4 = ("time", "plev", "lat", "lon")
    ds = xr.Dataset(
        {
            "u": (d4, u, {"units": "m s-1", "standard_name": "eastward_wind"}),
            "v": (d4, v, {"units": "m s-1", "standard_name": "northward_wind"}),
            "q": (d4, np.zeros(shape), {"units": "kg kg-1", "standard_name": "specific_humidity"}),
            "ps": (("time", "lat", "lon"), np.full((TIMES.size,) + lon2.shape, PS),
                   {"units": "Pa", "standard_name": "surface_air_pressure"}),
        },
        coords={
            "time": ("time", TIMES),
            "plev": ("plev", P, {"units": "Pa", "standard_name": "air_pressure"}),
            "lat": ("lat", LAT, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", LON, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"title": "invented test fields (not real weather)"},
    )
    return open_fields(ds)


@pytest.fixture(scope="module")
def fields():
    return dry_divergent_fields()


@pytest.fixture(scope="module")
def budget(fields):
    return compute(fields, region_from_bbox(*BOX), profiles=True, mass_correction=False)


def edge_import_exact(edge: str) -> float:
    """a·∫ F·(inward normal) dl along one edge of BOX, by 32-point Gauss-Legendre quadrature."""
    w_, s_, e_, n_ = BOX
    x, wt = np.polynomial.legendre.leggauss(32)
    a = analytic.A
    if edge in ("S", "N"):
        lat = s_ if edge == "S" else n_
        lon = w_ + (e_ - w_) * (x + 1) / 2
        _, fv = analytic.flux(lon, np.full_like(lon, lat))
        line = np.sum(wt * fv) * np.radians(e_ - w_) / 2 * a * np.cos(np.radians(lat))
        return line if edge == "S" else -line  # inward is +v at the south edge
    lon = w_ if edge == "W" else e_
    lat = s_ + (n_ - s_) * (x + 1) / 2
    fu, _ = analytic.flux(np.full_like(lat, lon), lat)
    line = np.sum(wt * fu) * np.radians(n_ - s_) / 2 * a
    return line if edge == "W" else -line


def test_edge_reference_adds_up_to_the_area_integral():
    # guards the per-edge reference itself: its four edges give −∬ ∇·F dA (divergence theorem)
    import shapely

    total = sum(edge_import_exact(e) for e in "SENW")
    assert total == pytest.approx(-analytic.area_integral_of_divergence(shapely.box(*BOX)), rel=1e-9)


def test_dry_air_import_equals_the_analytic_mass_flux_convergence(budget):
    import shapely

    exact = -analytic.area_integral_of_divergence(shapely.box(*BOX)) * GROW
    # within 0.5 % at 1°, the tolerance the vapour budget meets on the same fields
    np.testing.assert_allclose(budget["dry_air_import"].values, exact, rtol=5e-3)


def test_each_edge_matches_its_line_integral(budget):
    assert list(budget["edge"].values) == ["S", "E", "N", "W"]
    got = budget["dry_air_edge_import"].values
    exact = np.array([[edge_import_exact(e) for e in "SENW"]]) * GROW[:, None]
    scale = np.abs(exact).max()
    # bilinear interpolation on grid lines: second order in the 1° spacing (common practice,
    # no source, for the tolerance: 0.1 % of the largest edge's import)
    np.testing.assert_allclose(got, exact, atol=1e-3 * scale)
    assert budget["dry_air_edge_import"].attrs["units"] == "kg s-1"


def test_edges_sum_to_the_total_to_round_off(budget):
    np.testing.assert_allclose(budget["dry_air_edge_import"].sum("edge").values,
                               budget["dry_air_import"].values, rtol=1e-12)


def test_profile_and_curtain_add_up_to_the_import(fields, budget):
    st = compile_stencil(region_from_bbox(*BOX), Grid.from_fields(fields))
    dens = budget["dry_air_import_density"].values  # kg m-1 s-1, (time, piece)
    np.testing.assert_allclose(dens @ st.piece_length, budget["dry_air_import"].values, rtol=1e-12)
    curtain = budget["dry_air_normal_flux_density"].values  # per Pa, (time, level, piece)
    dp = budget["layer_thickness"].values
    np.testing.assert_allclose(np.nansum(curtain * dp, axis=1), dens, rtol=1e-10, atol=1e-9)
    # V the same at every level and q = 0: each layer carries its share Δp / (ps − p_top) of
    # the column, so the curtain per unit pressure is the column's import density / (ps − p_top)
    above = dp > 0
    expected = np.broadcast_to((dens / COLUMN)[:, None, :], curtain.shape)
    np.testing.assert_allclose(curtain[above], expected[above], rtol=1e-9, atol=1e-12)


def test_vapour_curtain_is_unchanged_by_the_dry_air_one(fields, budget):
    # q = 0: no vapour crosses any piece at any level (the vapour flux q V vanishes)
    assert np.nanmax(np.abs(budget["normal_flux_density"].values)) == 0.0
    assert np.abs(budget["edge_import"].values).max() == 0.0


def test_column_inputs_have_no_dry_air_along_the_boundary():
    ds = compute(open_fields(analytic.column_dataset(2.0, ntime=2)), region_from_bbox(*BOX), profiles=True)
    for name in ("dry_air_edge_import", "dry_air_import_density", "dry_air_normal_flux_density"):
        assert name not in ds
