"""budget.sphere against analytic values (CHECKS.md) and pyproj.Geod on the same sphere."""

import numpy as np
import pytest
from pyproj import Geod

from budget import sphere
from budget.constants import EARTH_RADIUS

R = EARTH_RADIUS
# pyproj reference on a sphere of the same radius (CHECKS.md, "Reference libraries").
GEOD = Geod(a=R, f=0.0)


def geod_area_lonlat(lon, lat, step=0.002):
    """Geodesic area after densifying the lon-lat edges finely (Geod joins by geodesics)."""
    x, y, _ = sphere.densify(lon, lat, step)
    area, _ = GEOD.polygon_area_perimeter(x[:-1], y[:-1])
    return area


def test_box_0_10N_matches_checks_value():
    # CHECKS.md: 10° x 10° box 0-10° N on the IUGG mean sphere is 1.2302e12 m²
    # (derived there from R² Δλ (sin φ2 − sin φ1)).
    area = sphere.ring_area([0, 10, 10, 0], [0, 0, 10, 10])
    assert area == pytest.approx(1.2302e12, rel=5e-5)
    # and the same closed form to rounding
    exact = R**2 * np.radians(10) * np.sin(np.radians(10))
    assert area == pytest.approx(exact, rel=1e-12)


def test_whole_sphere_area():
    # CHECKS.md: sphere area 5.10066e14 m² for the IUGG mean radius; analytic 4πR².
    area = sphere.ring_area([-180, 180, 180, -180], [-90, -90, 90, 90])
    assert area == pytest.approx(5.10066e14, rel=2e-6)
    assert area == pytest.approx(4 * np.pi * R**2, rel=1e-12)


def test_orientation_sign_and_closed_ring_accepted():
    lon, lat = [0, 10, 10, 0], [0, 0, 10, 10]
    ccw = sphere.ring_area(lon, lat)
    assert ccw > 0
    assert sphere.ring_area(lon[::-1], lat[::-1]) == pytest.approx(-ccw, rel=1e-12)
    assert sphere.ring_area(lon + [0], lat + [0]) == pytest.approx(ccw, rel=1e-12)


def test_polar_cap_analytic():
    # A cap north of 70° N: 2πR²(1 − sin 70°) (analytic zone area).
    area = sphere.ring_area([-180, 180, 180, -180], [70, 70, 90, 90])
    assert area == pytest.approx(2 * np.pi * R**2 * (1 - np.sin(np.radians(70))), rel=1e-12)


@pytest.mark.parametrize(
    "lon, lat",
    [
        ([0, 30, 25, 5], [10, -5, 40, 30]),  # irregular quadrilateral
        ([-20, 5, 40, 12, -3, -30], [-35, -50, -20, 10, -5, 0]),  # hexagon, southern hemisphere
        ([100, 140, 120, 110], [60, 70, 85, 75]),  # high latitude, slanted edges
    ],
)
def test_irregular_polygon_against_pyproj(lon, lat):
    # pyproj.Geod(a=R, f=0).polygon_area_perimeter on the finely densified ring.
    ours = sphere.ring_area(lon, lat)
    ref = geod_area_lonlat(lon, lat)
    assert ours == pytest.approx(ref, rel=1e-6)


def test_area_across_antimeridian_equals_shifted_copy():
    # Area depends only on longitude differences (analytic), so the frame does not matter.
    lon = np.array([170.0, 185.0, 195.0, 175.0, 168.0])
    lat = np.array([-5.0, -8.0, 6.0, 12.0, 3.0])
    assert sphere.ring_area(lon, lat) == pytest.approx(sphere.ring_area(lon - 180, lat), rel=1e-12)


def test_tiny_polygon_stays_accurate():
    # 1 km-scale square at 45° N: ring_area vs the cell-area closed form R² Δλ Δ(sin φ).
    d = 0.01
    area = sphere.ring_area([10, 10 + d, 10 + d, 10], [45, 45, 45 + d, 45 + d])
    exact = R**2 * np.radians(d) * (np.sin(np.radians(45 + d)) - np.sin(np.radians(45)))
    assert area == pytest.approx(exact, rel=1e-9)


def test_cell_areas_sum_to_sphere_and_match_closed_form():
    lat_e = np.linspace(-90, 90, 37)
    lon_e = np.linspace(0, 360, 73)
    a = sphere.cell_areas(lat_e, lon_e)
    assert a.shape == (36, 72)
    assert a.sum() == pytest.approx(4 * np.pi * R**2, rel=1e-12)  # analytic 4πR²
    # one cell equals the exact ring area of the same box
    box = sphere.ring_area([5, 10, 10, 5], [40, 40, 45, 45])
    assert sphere.cell_areas([40, 45], [5, 10])[0, 0] == pytest.approx(box, rel=1e-12)
    # descending latitudes give the same positive areas
    np.testing.assert_allclose(sphere.cell_areas(lat_e[::-1], lon_e), a[::-1], rtol=1e-12)


def test_arc_lengths_meridian_and_parallel_exact():
    # A meridian is a great circle (length R Δφ); a parallel has length R cos φ Δλ (analytic).
    le = sphere.arc_lengths([10, 10], [-20, 50])
    assert le[0] == pytest.approx(R * np.radians(70), rel=1e-12)
    lp = sphere.arc_lengths([0, 90], [60, 60])
    assert lp[0] == pytest.approx(R * np.cos(np.radians(60)) * np.radians(90), rel=1e-12)


def test_arc_lengths_short_pieces_against_pyproj():
    # Short pieces: lon-lat line and geodesic nearly coincide; compare with Geod.inv.
    lon = np.array([3.0, 3.05, 3.02, 2.97])
    lat = np.array([45.0, 45.03, 45.08, 45.1])
    ours = sphere.arc_lengths(lon, lat)
    _, _, ref = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    np.testing.assert_allclose(ours, ref, rtol=1e-6)
    closed = sphere.arc_lengths(lon, lat, closed=True)
    assert closed.size == 4
    _, _, last = GEOD.inv(lon[-1], lat[-1], lon[0], lat[0])
    assert closed[-1] == pytest.approx(last, rel=1e-6)


def test_arc_length_long_slanted_piece_against_densified_pyproj():
    # A long lon-lat straight piece: sum of Geod.inv over a fine densification.
    lon, lat = [0.0, 40.0], [10.0, 60.0]
    ours = sphere.arc_lengths(lon, lat)[0]
    x, y, _ = sphere.densify(lon, lat, 0.01, closed=False)
    _, _, d = GEOD.inv(x[:-1], y[:-1], x[1:], y[1:])
    assert ours == pytest.approx(d.sum(), rel=1e-7)


def test_great_circle_points_lie_on_the_geodesic():
    # pyproj Geod.npts gives intermediate points of the geodesic (a great circle for f=0).
    lon, lat = sphere.great_circle_points(-30.0, 20.0, 40.0, 55.0, 6)
    ref = np.array(GEOD.npts(-30.0, 20.0, 40.0, 55.0, 4))
    np.testing.assert_allclose(lon[1:-1], ref[:, 0], atol=1e-9)
    np.testing.assert_allclose(lat[1:-1], ref[:, 1], atol=1e-9)
    assert (lon[0], lat[0], lon[-1], lat[-1]) == (-30.0, 20.0, 40.0, 55.0)
    # equal spacing along the arc
    _, _, d = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    np.testing.assert_allclose(d, d[0], rtol=1e-9)


def test_great_circle_points_across_antimeridian_are_continuous():
    lon, lat = sphere.great_circle_points(170.0, 10.0, -170.0, 20.0, 9)
    assert np.all(np.abs(np.diff(lon)) < 180)
    assert lon[-1] == pytest.approx(190.0)
    ref = np.array(GEOD.npts(170.0, 10.0, -170.0, 20.0, 7))
    np.testing.assert_allclose((lon[1:-1] + 180) % 360 - 180, ref[:, 0], atol=1e-9)
    np.testing.assert_allclose(lat[1:-1], ref[:, 1], atol=1e-9)


def test_great_circle_antipodal_refused():
    with pytest.raises(ValueError, match="antipodal"):
        sphere.great_circle_points(0.0, 0.0, 180.0, 0.0, 5)


def test_great_circle_lat_at_lon_against_points():
    lon, lat = sphere.great_circle_points(170.0, 10.0, -170.0, 20.0, 2001)
    k = np.argmin(np.abs(lon - 180.0))
    assert sphere.great_circle_lat_at_lon(170.0, 10.0, -170.0, 20.0, 180.0) == pytest.approx(
        lat[k], abs=0.01
    )


def test_densify_keeps_vertices_and_edge_index():
    lon, lat = [0.0, 10.0, 10.0, 0.0], [0.0, 0.0, 5.0, 5.0]
    x, y, edge = sphere.densify(lon, lat, 1.0)
    assert (x[0], y[0], x[-1], y[-1]) == (0.0, 0.0, 0.0, 0.0)
    assert edge.size == x.size - 1 == 30
    assert list(np.bincount(edge)) == [10, 5, 10, 5]
    # densified ring has the same exact area (the pieces are collinear in lon-lat)
    assert sphere.ring_area(x, y) == pytest.approx(sphere.ring_area(lon, lat), rel=1e-12)
