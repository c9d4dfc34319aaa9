"""budget.region: constructors, normalisation, antimeridian handling and every error message.

Areas are checked against the analytic box area R² Δλ (sin φ2 − sin φ1) (CHECKS.md, derived)
and against pyproj.Geod(a=R, f=0) on the same sphere (CHECKS.md, reference libraries).
Test inputs in tests/data/regions are invented shapes, not real places.
"""

import io
import json
import zipfile

import numpy as np
import pytest
from pyproj import CRS, Geod, Transformer

from budget import sphere
from budget.region import (
    Part,
    Region,
    Ring,
    list_features,
    load_region,
    region_from_bbox,
    region_from_geojson,
    region_from_shapefile,
    region_from_upload,
    region_from_vertices,
)

from tests.region_support import DATA, R, box_area, raises, write_shapefile

GEOD = Geod(a=R, f=0.0)  # pyproj on the project's sphere


def geod_area_lonlat(lon, lat, step=0.002):
    """pyproj.Geod area of a ring with lon-lat edges, densified so geodesics follow them."""
    x, y, _ = sphere.densify(lon, lat, step)
    return GEOD.polygon_area_perimeter(x[:-1], y[:-1])[0]


def same_cyclic(ring, lon, lat, atol=1e-9):
    """The ring's vertices equal (lon, lat) up to where the cycle starts."""
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    if ring.n != lon.size:
        return False
    for k in range(ring.n):
        if np.allclose(np.roll(ring.lon, -k), lon, atol=atol) and np.allclose(
            np.roll(ring.lat, -k), lat, atol=atol
        ):
            return True
    return False


# ---------------------------------------------------------------------------------- boxes


def test_bbox_vertices_names_and_area():
    r = region_from_bbox(0, 0, 10, 10, name="box")
    ring = r.parts[0].exterior
    assert r.kind == "bbox" and r.name == "box" and r.vertex_count == 4
    np.testing.assert_array_equal(ring.lon, [0, 10, 10, 0])  # SW, SE, NE, NW
    np.testing.assert_array_equal(ring.lat, [0, 0, 10, 10])
    assert ring.edge_names == ["S", "E", "N", "W"]
    # CHECKS.md: 10° x 10° box 0-10° N is 1.2302e12 m²
    assert r.area_m2() == pytest.approx(1.2302e12, rel=5e-5)
    assert r.bounds == (0.0, 0.0, 10.0, 10.0)


def test_bbox_across_antimeridian_same_area_as_shifted():
    r = region_from_bbox(170, -10, -170, 10)
    ring = r.parts[0].exterior
    np.testing.assert_array_equal(ring.lon, [170, 190, 190, 170])
    assert r.bounds == (170.0, -10.0, 190.0, 10.0)
    # analytic: the area depends only on Δλ and the latitudes
    assert r.area_m2() == pytest.approx(box_area(0, -10, 20, 10), rel=1e-12)
    assert r.area_m2() == pytest.approx(region_from_bbox(-10, -10, 10, 10).area_m2(), rel=1e-12)


def test_bbox_frames_normalised():
    r = region_from_bbox(200, 0, 220, 5)  # 0..360 frame
    np.testing.assert_array_equal(r.parts[0].exterior.lon, [-160, -140, -140, -160])
    assert r.area_m2() == pytest.approx(box_area(0, 0, 20, 5), rel=1e-12)


def test_full_longitude_cap_allowed():
    r = region_from_bbox(-180, 70, 180, 90)
    assert r.kind == "bbox"
    np.testing.assert_array_equal(r.parts[0].exterior.lon, [-180, 180, 180, -180])
    # analytic zone area 2πR²(1 − sin 70°)
    assert r.area_m2() == pytest.approx(2 * np.pi * R**2 * (1 - np.sin(np.radians(70))), rel=1e-12)
    assert any("all longitudes" in w for w in r.warnings)
    band = region_from_bbox(-180, -10, 180, 10)
    assert band.area_m2() == pytest.approx(box_area(-180, -10, 180, 10), rel=1e-12)


@pytest.mark.parametrize(
    "args, needle",
    [
        ((0, 10, 10, 10), "south latitude 10 is not below the north latitude 10"),
        ((0, 20, 10, 10), "south latitude 20"),
        ((0, -95, 10, 10), "south latitude -95 is outside"),
        ((0, 0, 10, 91), "north latitude 91 is outside"),
        ((5, 0, 5, 10), "both 5"),
        ((-200, 0, 200, 10), "spans 400°"),
        ((0, "x", 10, 10), "south value 'x' is not a number"),
        ((0, 0, float("nan"), 10), "east value nan is not finite"),
        ((400, 0, 10, 10), "west longitude 400 is outside"),
    ],
)
def test_bbox_errors(args, needle):
    assert needle in raises(region_from_bbox, *args)


# ------------------------------------------------------------------------ drawn vertices


def test_vertices_clockwise_reversed_names_travel():
    # clockwise input: (0,0) (0,10) (10,10) (10,0)
    r = region_from_vertices([0, 0, 10, 10], [0, 10, 10, 0])
    ring = r.parts[0].exterior
    assert sphere.ring_area(ring.lon, ring.lat) > 0  # CCW now
    np.testing.assert_array_equal(ring.lon, [0, 10, 10, 0])
    np.testing.assert_array_equal(ring.lat, [0, 0, 10, 10])
    # stored edge (0,0)->(10,0) is the user's closing edge 4 (10,0)->(0,0), reversed
    assert ring.edge_names == ["edge 4", "edge 3", "edge 2", "edge 1"]
    assert r.area_m2() == pytest.approx(box_area(0, 0, 10, 10), rel=1e-12)


def test_vertices_closed_and_duplicates_removed():
    r = region_from_vertices([0, 10, 10, 10, 0, 0], [0, 0, 0, 10, 10, 0])
    ring = r.parts[0].exterior
    assert ring.n == 4
    assert ring.edge_names == ["edge 1", "edge 2", "edge 3", "edge 4"]


def test_vertices_unwrapped_into_continuous_frame():
    # given in the 0..360 frame across Greenwich and in -180..180 across the antimeridian
    r = region_from_vertices([350, 10, 10, 350], [0, 0, 10, 10])
    np.testing.assert_array_equal(r.parts[0].exterior.lon, [-10, 10, 10, -10])
    r2 = region_from_vertices([170, -170, -170, 170], [0, 0, 10, 10])
    np.testing.assert_array_equal(r2.parts[0].exterior.lon, [170, 190, 190, 170])
    lon = r2.parts[0].exterior.lon
    assert np.all(np.abs(np.diff(lon)) < 180) and -180 <= lon[0] <= 180
    assert r2.area_m2() == pytest.approx(box_area(0, 0, 20, 10), rel=1e-12)


def test_irregular_polygon_area_against_pyproj():
    lon = [10.0, 16.5, 18.0, 13.0, 9.5]
    lat = [44.0, 43.0, 48.5, 50.0, 47.0]
    r = region_from_vertices(lon, lat)
    assert r.area_m2() == pytest.approx(geod_area_lonlat(lon, lat), rel=1e-6)


def test_great_circle_region_area_against_pyproj():
    # Geod joins vertices by geodesics: on a sphere these are great circles, so no densifying.
    lon = [-20.0, 30.0, 25.0, -10.0]
    lat = [40.0, 45.0, 70.0, 65.0]
    r = region_from_vertices(lon, lat, great_circle=True)
    ref = GEOD.polygon_area_perimeter(lon, lat)[0]
    assert r.area_m2() == pytest.approx(ref, rel=1e-5)
    # and it differs from the lon-lat polygon by far more than that tolerance
    assert abs(region_from_vertices(lon, lat).area_m2() - ref) > 1e-3 * ref


def test_polygon_across_antimeridian_same_area_as_shifted():
    lon = np.array([170.0, -175.0, -165.0, 175.0, 168.0])
    lat = np.array([-5.0, -8.0, 6.0, 12.0, 3.0])
    r = region_from_vertices(lon, lat)
    assert r.parts[0].exterior.lon.max() == 195.0
    shifted = region_from_vertices(lon % 360 - 180, lat)  # same shape around Greenwich
    assert r.area_m2() == pytest.approx(shifted.area_m2(), rel=1e-12)
    assert r.area_m2() == pytest.approx(geod_area_lonlat(lon % 360 - 180, lat), rel=1e-6)


@pytest.mark.parametrize(
    "lon, lat, needles",
    [
        ([0, 10], [0, 1], ["only 2 distinct vertices", "at least 3"]),
        ([0, 1, 1, 0], [0, 0, 0, 0], ["only 2 distinct"]),
        ([0, 10, 10, 0], [0, 0, float("nan"), 10], ["Vertex 3", "nan", "not a finite number"]),
        ([0, 10, 10, 0], [0, 0, 95, 10], ["latitude 95 of vertex 3", "−90 … 90"]),
        ([0, 10, 500, 0], [0, 0, 5, 10], ["longitude 500 of vertex 3", "projected"]),
        ([0, 1, 2], [0, 0, 0], ["zero area"]),
        ([0, 180, 90], [0, 0, 30], ["Vertices 1 and 2", "exactly 180°", "add a vertex"]),
        ([0, 10, 0], [0, 0], ["3 longitudes but 2 latitudes"]),
    ],
)
def test_vertex_errors_name_the_vertex(lon, lat, needles):
    msg = raises(region_from_vertices, lon, lat)
    for n in needles:
        assert n in msg, msg


def test_self_intersection_names_crossing_edges():
    # bow tie: (0,0) (10,0) (0,10) (10,10): edges 2→3 and 4→1 cross at (5°E, 5°N)
    msg = raises(region_from_vertices, [0, 10, 0, 10], [0, 0, 10, 10])
    assert "edges 2→3 and 4→1" in msg.lower()
    assert "(5.0°E, 5.0°N)" in msg
    assert "reorder the vertices or split the polygon" in msg


def test_self_intersection_found_in_large_ring():
    # a 2000-vertex circle with vertices 101 and 102 swapped (1-based): edges 100→101 and
    # 102→103 then cross (the STRtree path)
    t = np.linspace(0, 2 * np.pi, 2000, endpoint=False)
    lon = 20 + 10 * np.cos(t)
    lat = 40 + 5 * np.sin(t)
    lon[[100, 101]] = lon[[101, 100]]
    lat[[100, 101]] = lat[[101, 100]]
    msg = raises(region_from_vertices, lon, lat)
    assert "Edges 100→101 and 102→103" in msg, msg


def test_ring_around_pole_refused_with_box_hint():
    lon = [0, 90, 180, 270]
    lat = [75, 72, 74, 71]
    msg = raises(region_from_vertices, lon, lat)
    assert "North Pole" in msg and "bbox -180,71,180,90" in msg
    msg_s = raises(region_from_vertices, [0, -120, -240], [-60, -65, -62])
    assert "South Pole" in msg_s and "bbox -180,-90,180,-60" in msg_s


def test_ring_spanning_more_than_360_refused():
    # a spiral that runs 400° of longitude without closing round the pole
    lon = [-100, 0, 100, 200, 300, 300, 200, 100, 0, -100]
    lat = [0, 0, 0, 0, 0, 5, 5, 5, 5, 5]
    assert "spans 400.0° of longitude" in raises(region_from_vertices, lon, lat)


def test_great_circle_antipodal_edge_refused():
    # (0, 0) and (180, 0) via (90, 0.0) would be fine in lon-lat, but (0,0)-(180,0) directly
    # is refused before the great-circle check by the 180° rule; use a pole pair instead
    msg = raises(region_from_vertices, [0, 90, 90], [-90, 0, 90], great_circle=True)
    assert "antipodal" in msg and "vertices 3 and 1" in msg.lower()


def test_pole_edge_polygon_allowed():
    # a ring closed along the pole edge (lat 90) is an ordinary lon-lat polygon
    lon = [-180, -60, 60, 180, 180, -180]
    lat = [70, 72, 71, 70, 90, 90]
    r = region_from_vertices(lon, lat)
    assert r.parts[0].exterior.n == 6
    x, y, _ = sphere.densify(lon, lat, 0.01)
    assert r.area_m2() == pytest.approx(sphere.ring_area(x, y), rel=1e-12)


# --------------------------------------------------------------------------------- GeoJSON


def test_geojson_polygon_with_hole():
    obj = {
        "type": "Polygon",
        "coordinates": [
            [[0, 0], [20, 0], [20, 20], [0, 20], [0, 0]],
            [[5, 5], [15, 5], [15, 15], [5, 15], [5, 5]],  # CCW hole, must become CW
        ],
    }
    r = region_from_geojson(obj, name="holey")
    part = r.parts[0]
    assert len(part.holes) == 1
    assert sphere.ring_area(part.holes[0].lon, part.holes[0].lat) < 0
    assert part.exterior.edge_names[0] == "part 1 edge 1"
    assert part.holes[0].edge_names[0].startswith("part 1 hole 1 edge ")
    assert r.area_m2() == pytest.approx(box_area(0, 0, 20, 20) - box_area(5, 5, 15, 15), rel=1e-12)
    assert r.shapely().area == pytest.approx(400 - 100)


def test_geojson_hole_errors():
    crossing = {
        "type": "Polygon",
        "coordinates": [
            [[0, 0], [20, 0], [20, 20], [0, 20], [0, 0]],
            [[15, 5], [25, 5], [25, 15], [15, 15], [15, 5]],
        ],
    }
    msg = raises(region_from_geojson, crossing)
    assert "Edge 2→3 of the exterior and edge 1→2 of hole 1" in msg
    assert "(20.0°E, 5.0°N)" in msg
    outside = {
        "type": "Polygon",
        "coordinates": [
            [[0, 0], [20, 0], [20, 20], [0, 20], [0, 0]],
            [[25, 5], [35, 5], [35, 15], [25, 15], [25, 5]],
        ],
    }
    assert "hole must lie inside its exterior ring" in raises(region_from_geojson, outside).replace(
        "every hole", "hole"
    )


def test_feature_collection_listing_and_selection():
    path = DATA / "invented_basins.geojson"
    feats = list_features(path)
    assert [f["name"] for f in feats] == ["Upper Vale", "Coastal Fen", "Drawn Loop"]
    assert [f["index"] for f in feats] == [0, 1, 2]
    assert feats[1]["properties"]["code"] == "CF-2"
    assert feats[0]["geometry"] == "Polygon"

    by_name = region_from_geojson(path, feature="Coastal Fen")
    by_code = region_from_geojson(path, feature="CF-2")
    by_index = region_from_geojson(path, feature=1)
    by_index_text = region_from_geojson(path, feature="1")
    for r in (by_code, by_index, by_index_text):
        assert r.name == "Coastal Fen"
        assert r.area_m2() == pytest.approx(by_name.area_m2(), rel=1e-15)
    assert len(by_name.parts[0].holes) == 1

    msg = raises(region_from_geojson, path)
    assert "'invented_basins.geojson' holds 3 features" in msg
    assert "Upper Vale" in msg and "Coastal Fen" in msg
    msg = raises(region_from_geojson, path, feature="Lower Marsh")
    assert "'Lower Marsh'" in msg and "0: Upper Vale" in msg
    assert "no feature number 7" in raises(region_from_geojson, path, feature=7).lower()
    # the self-crossing feature names itself and its crossing edges
    msg = raises(region_from_geojson, path, feature="Drawn Loop")
    assert "(feature Drawn Loop)" in msg and "'invented_basins.geojson'" in msg
    assert "2→3 and 4→1" in msg


def test_duplicate_property_values_ask_for_index():
    fc = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": {"name": "A", "kind": "x"},
             "geometry": {"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 1], [0, 0]]]}},
            {"type": "Feature", "properties": {"name": "B", "kind": "x"},
             "geometry": {"type": "Polygon", "coordinates": [[[5, 0], [6, 0], [6, 1], [5, 0]]]}},
        ],
    }
    assert "2 features match 'x'" in raises(region_from_geojson, fc, feature="x")
    assert region_from_geojson(fc, feature="B").bounds == (5.0, 0.0, 6.0, 1.0)


def test_geojson_file_errors_name_the_file(tmp_path):
    msg = raises(region_from_geojson, DATA / "truncated.geojson")
    assert "'truncated.geojson' is not valid JSON" in msg and "line 2" in msg
    msg = raises(region_from_geojson, DATA / "linestring.geojson")
    assert "'LineString'" in msg and "'linestring.geojson'" in msg and "Polygon" in msg
    msg = raises(region_from_geojson, tmp_path / "missing.geojson")
    assert "missing.geojson" in msg and "does not exist" in msg
    assert "no \"type\" member" in raises(region_from_geojson, {"coordinates": []})
    assert "has no features" in raises(region_from_geojson, {"type": "FeatureCollection", "features": []})


def test_geojson_text_and_bytes_accepted():
    obj = {"type": "Polygon", "coordinates": [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]}
    a = region_from_geojson(json.dumps(obj)).area_m2()
    b = region_from_geojson(json.dumps(obj).encode()).area_m2()
    assert a == b == pytest.approx(box_area(0, 0, 10, 10), rel=1e-12)


def test_multipolygon_separate_parts_and_overlap():
    mp = {
        "type": "MultiPolygon",
        "coordinates": [
            [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]],
            [[[20, 0], [30, 0], [30, 5], [20, 5], [20, 0]]],
        ],
    }
    r = region_from_geojson(mp)
    assert len(r.parts) == 2
    assert r.parts[1].exterior.edge_names[2] == "part 2 edge 3"
    assert r.area_m2() == pytest.approx(box_area(0, 0, 10, 10) + box_area(20, 0, 30, 5), rel=1e-12)
    assert r.shapely().geom_type == "MultiPolygon"
    assert r.vertex_count == 8
    overlap = {
        "type": "MultiPolygon",
        "coordinates": [
            [[[0, 0], [20, 0], [20, 20], [0, 20], [0, 0]]],
            [[[10, 10], [30, 10], [30, 30], [10, 30], [10, 10]]],
        ],
    }
    assert "Parts 1 and 2" in raises(region_from_geojson, overlap)


def test_dateline_split_multipolygon_merged_into_one_part():
    r = region_from_geojson(DATA / "dateline_split.geojson")
    assert len(r.parts) == 1 and r.name == "Invented dateline sea"
    ring = r.parts[0].exterior
    # the seam vertex (180, -12) only split the south edge and is gone; (180, 8) is a corner
    assert same_cyclic(ring, [165, 192, 200, 180, 172], [-12, -12, 2, 8, 14])
    # same area as the same shape moved away from the antimeridian (analytic invariance)
    moved = region_from_vertices([-15, 12, 20, 0, -8], [-12, -12, 2, 8, 14])
    assert r.area_m2() == pytest.approx(moved.area_m2(), rel=1e-12)


def test_pole_winding_ring_in_file_names_file(tmp_path):
    p = tmp_path / "arctic.geojson"
    p.write_text(json.dumps({"type": "Polygon", "coordinates": [
        [[0, 70], [90, 70], [180, 71], [-90, 70], [0, 70]]]}))
    msg = raises(region_from_geojson, p)
    assert "'arctic.geojson'" in msg and "North Pole" in msg and "bbox -180,70,180,90" in msg


# ------------------------------------------------------------------------------ round trips


def check_rfc7946(feature):
    """RFC 7946: closed rings, exterior CCW, holes CW, longitudes in −180 … 180."""
    geom = feature["geometry"]
    polys = [geom["coordinates"]] if geom["type"] == "Polygon" else geom["coordinates"]
    for poly in polys:
        for k, ring in enumerate(poly):
            xy = np.asarray(ring)
            assert np.array_equal(xy[0], xy[-1])
            assert np.all((xy[:, 0] >= -180) & (xy[:, 0] <= 180))
            area = sphere.ring_area(xy[:, 0], xy[:, 1])
            assert (area > 0) if k == 0 else (area < 0)
    return polys


def test_round_trip_box_across_antimeridian():
    r = region_from_bbox(170, -10, -170, 10, name="dateline box")
    f = r.to_geojson()
    assert f["geometry"]["type"] == "MultiPolygon"
    assert f["bbox"] == [170.0, -10.0, -170.0, 10.0]  # RFC 7946 §5.2: west > east across
    check_rfc7946(f)
    back = region_from_geojson(json.loads(json.dumps(f)))
    assert back.kind == "bbox" and back.name == "dateline box"
    np.testing.assert_array_equal(back.parts[0].exterior.lon, [170, 190, 190, 170])
    assert back.parts[0].exterior.edge_names == ["S", "E", "N", "W"]
    # without our properties it still comes back as the same polygon
    f["properties"] = {}
    del f["bbox"]
    plain = region_from_geojson(f)
    assert same_cyclic(plain.parts[0].exterior, [170, 190, 190, 170], [-10, -10, 10, 10])
    assert plain.area_m2() == pytest.approx(r.area_m2(), rel=1e-12)


def test_round_trip_cap():
    r = region_from_bbox(-180, 70, 180, 90)
    f = r.to_geojson()
    assert f["geometry"]["type"] == "Polygon"
    check_rfc7946(f)
    back = region_from_geojson(f)
    assert back.kind == "bbox"
    assert back.area_m2() == pytest.approx(r.area_m2(), rel=1e-12)
    f["properties"] = {}
    plain = region_from_geojson(f["geometry"])
    assert plain.area_m2() == pytest.approx(r.area_m2(), rel=1e-12)


def test_round_trip_polygon_across_antimeridian():
    lon = [170.0, -175.0, -165.0, 175.0, 168.0]
    lat = [-5.0, -8.0, 6.0, 12.0, 3.0]
    r = region_from_vertices(lon, lat, name="drawn")
    f = r.to_geojson()
    polys = check_rfc7946(f)
    assert len(polys) == 2
    back = region_from_geojson(f)
    assert len(back.parts) == 1
    assert same_cyclic(back.parts[0].exterior, r.parts[0].exterior.lon, r.parts[0].exterior.lat)
    assert back.area_m2() == pytest.approx(r.area_m2(), rel=1e-12)


def test_round_trip_great_circle_polygon_across_antimeridian():
    lon = [170.0, -175.0, -165.0, 175.0, 168.0]
    lat = [-5.0, -8.0, 6.0, 12.0, 3.0]
    r = region_from_vertices(lon, lat, great_circle=True)
    f = r.to_geojson()
    assert f["properties"]["great_circle"] is True
    back = region_from_geojson(f)
    assert back.great_circle
    assert same_cyclic(back.parts[0].exterior, r.parts[0].exterior.lon, r.parts[0].exterior.lat)
    # the split points lie on the great circles, so the area is unchanged
    assert back.area_m2() == pytest.approx(r.area_m2(), rel=1e-9)


def test_round_trip_hole_across_antimeridian():
    obj = {"type": "Polygon", "coordinates": [
        [[160, -20], [200, -20], [200, 20], [160, 20], [160, -20]],
        [[175, -5], [175, 5], [185, 5], [185, -5], [175, -5]]]}
    r = region_from_geojson(obj)
    f = r.to_geojson()
    check_rfc7946(f)
    back = region_from_geojson(f)
    assert len(back.parts) == 1 and len(back.parts[0].holes) == 1
    assert same_cyclic(back.parts[0].holes[0], r.parts[0].holes[0].lon, r.parts[0].holes[0].lat)
    assert back.area_m2() == pytest.approx(box_area(0, -20, 40, 20) - box_area(0, -5, 10, 5), rel=1e-12)


def test_round_trip_plain_polygon_keeps_everything():
    r = region_from_geojson(DATA / "invented_basins.geojson", feature="Coastal Fen")
    back = region_from_geojson(r.to_geojson())
    assert back.name == "Coastal Fen"
    for a, b in zip(r.rings, back.rings):
        np.testing.assert_array_equal(a.lon, b.lon)
        np.testing.assert_array_equal(a.lat, b.lat)
        assert a.edge_names == b.edge_names


# ---------------------------------------------------------------------------- shapefiles


def test_shapefile_read_and_normalised(tmp_path):
    shp = write_shapefile(tmp_path)
    assert [f["name"] for f in list_features(shp)] == ["Upper Vale", "Coastal Fen"]
    r = region_from_shapefile(shp, feature="Upper Vale")
    part = r.parts[0]
    assert r.name == "Upper Vale" and len(part.holes) == 1
    assert sphere.ring_area(part.exterior.lon, part.exterior.lat) > 0
    assert sphere.ring_area(part.holes[0].lon, part.holes[0].lat) < 0
    assert r.area_m2() == pytest.approx(box_area(0, 0, 10, 10) - box_area(2, 2, 4, 4), rel=1e-12)
    assert region_from_shapefile(shp, feature=1).name == "Coastal Fen"
    msg = raises(region_from_shapefile, shp)
    assert "'basins.shp' holds 2 features" in msg and "Coastal Fen" in msg


def test_shapefile_zip_and_uploads(tmp_path):
    write_shapefile(tmp_path)
    zpath = tmp_path / "basins.zip"
    with zipfile.ZipFile(zpath, "w") as z:
        for ext in ("shp", "shx", "dbf"):
            z.write(tmp_path / f"basins.{ext}", f"inner/basins.{ext}")
    r = region_from_shapefile(zpath, feature="Coastal Fen")
    assert r.area_m2() == pytest.approx(box_area(20, 0, 25, 5), rel=1e-12)
    up = region_from_upload("basins.zip", zpath.read_bytes(), feature="Coastal Fen")
    assert up.area_m2() == r.area_m2() and up.name == "Coastal Fen"
    assert [f["name"] for f in list_features(zpath)] == ["Upper Vale", "Coastal Fen"]
    # a lone .shp upload: shapes without names, by index
    lone = region_from_upload("basins.shp", (tmp_path / "basins.shp").read_bytes(), feature=1)
    assert lone.area_m2() == pytest.approx(box_area(20, 0, 25, 5), rel=1e-12)
    assert any(".dbf" in w for w in lone.warnings)
    # GeoJSON upload
    gj = json.dumps(region_from_bbox(0, 0, 10, 10).to_geojson()).encode()
    assert region_from_upload("box.geojson", gj).kind == "bbox"


def test_upload_errors():
    assert "'notes.txt'" in raises(region_from_upload, "notes.txt", b"hello")
    assert "not a valid .zip" in raises(region_from_upload, "a.zip", b"not a zip")
    assert "'bad.geojson' is not valid JSON" in raises(region_from_upload, "bad.geojson", b"{")
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as z:
        z.writestr("readme.txt", "nothing")
    assert "holds no .shp file" in raises(region_from_upload, "empty.zip", buf.getvalue())
    assert "damaged or not a shapefile" in raises(region_from_upload, "x.shp", b"\x00" * 120)


def test_projected_shapefile_converted_with_pyproj(tmp_path):
    # vertices written in Web Mercator (EPSG:3857) with a .prj; pyproj converts them back
    fwd = Transformer.from_crs(4326, 3857, always_xy=True)
    shp = write_shapefile(tmp_path, prj=CRS.from_epsg(3857).to_wkt("WKT1_ESRI"),
                          transform=lambda x, y: fwd.transform(x, y))
    r = region_from_shapefile(shp, feature="Coastal Fen")
    assert same_cyclic(r.parts[0].exterior, [20, 25, 25, 20], [0, 0, 5, 5], atol=1e-7)
    assert r.area_m2() == pytest.approx(box_area(20, 0, 25, 5), rel=1e-9)
    assert any("projected" in w for w in r.warnings)


def test_shapefile_in_metres_without_prj_is_caught(tmp_path):
    fwd = Transformer.from_crs(4326, 3857, always_xy=True)
    shp = write_shapefile(tmp_path, transform=lambda x, y: fwd.transform(x, y))
    msg = raises(region_from_shapefile, shp, feature=1)
    assert "outside −360 … 360" in msg and "projected" in msg and "'basins.shp'" in msg


# -------------------------------------------------------------------------------- dispatcher


def test_load_region_dispatch(tmp_path):
    assert load_region(bbox="170,-10,-170,10").bounds == (170.0, -10.0, 190.0, 10.0)
    assert load_region(bbox=(0, 0, 10, 10), name="b").name == "b"
    r = load_region(DATA / "invented_basins.geojson", feature="Upper Vale")
    assert r.name == "Upper Vale" and r.kind == "polygon"
    shp = write_shapefile(tmp_path)
    assert load_region(str(shp), feature=0).name == "Upper Vale"
    gc = load_region(DATA / "invented_basins.geojson", feature=0, great_circle=True)
    assert gc.great_circle
    assert load_region(bbox="0,0,10,10", great_circle=True).warnings


@pytest.mark.parametrize(
    "kwargs, needle",
    [
        (dict(), "No region given"),
        (dict(path="a.geojson", bbox="0,0,1,1"), "not both"),
        (dict(bbox="1,2,3"), "must be four numbers"),
        (dict(bbox="a,b,c,d"), "west value 'a' is not a number"),
        (dict(path="region.kml"), "'region.kml' has an unsupported type '.kml'"),
    ],
)
def test_load_region_errors(kwargs, needle):
    assert needle in raises(load_region, **kwargs)


# ------------------------------------------------------------------------------ data model


def test_region_model_helpers():
    r = region_from_geojson(DATA / "invented_basins.geojson", feature="Coastal Fen")
    assert isinstance(r, Region) and isinstance(r.parts[0], Part)
    assert isinstance(r.parts[0].exterior, Ring)
    assert r.vertex_count == 8
    assert len(r.edge_names) == 8 and len(set(r.edge_names)) == 8
    assert r.bounds == (-5.0, 30.0, 5.0, 38.0)
    geom = r.shapely()
    assert geom.is_valid and len(geom.interiors) == 1
    assert r.warnings == []


def test_round_trip_band_and_pole_edge_polygon_in_0_360_frame():
    band = region_from_bbox(0, -10, 360, 10)
    f = band.to_geojson()
    assert f["geometry"]["type"] == "Polygon" and f["bbox"] == [-180.0, -10.0, 180.0, 10.0]
    check_rfc7946(f)
    assert region_from_geojson(f).area_m2() == pytest.approx(box_area(0, -10, 360, 10), rel=1e-12)
    # a polygon closed along the pole, given from 0 to 360: cut at 180, long pole edges split
    cap = region_from_vertices([0, 120, 240, 360, 360, 0], [70, 72, 71, 70, 90, 90])
    f = cap.to_geojson()
    for poly in check_rfc7946(f):
        steps = np.abs(np.diff(np.asarray(poly[0])[:, 0]))
        assert np.all(steps < 180)
    back = region_from_geojson(f)
    assert len(back.parts) == 1
    assert back.area_m2() == pytest.approx(cap.area_m2(), rel=1e-12)


def test_round_trip_multipart_with_one_part_across_antimeridian():
    mp = {"type": "MultiPolygon", "coordinates": [
        [[[0, 0], [10, 0], [10, 10], [0, 0]]],
        [[[175, 0], [185, 0], [185, 10], [175, 0]]]]}
    r = region_from_geojson(mp)
    f = r.to_geojson()
    assert len(f["geometry"]["coordinates"]) == 3
    back = region_from_geojson(f)
    assert len(back.parts) == 2
    assert same_cyclic(back.parts[0].exterior, [0, 10, 10], [0, 0, 10])
    assert same_cyclic(back.parts[1].exterior, [175, 185, 185], [0, 0, 10])
    assert back.area_m2() == pytest.approx(r.area_m2(), rel=1e-12)


@pytest.mark.parametrize(
    "geometry, needles",
    [
        ({"type": "Polygon", "coordinates": [[[0, 0], ["a", 1], [1, 1], [0, 0]]]},
         ["ring", "not numbers"]),
        ({"type": "Polygon", "coordinates": [[0, 0, 1]]}, ["not numbers"]),
        ({"type": "Polygon", "coordinates": []}, ["Polygon", "no coordinates"]),
        ({"type": "MultiPolygon", "coordinates": [[[[0, 0], [1, 0], [1, 1]]], [[[5, 0], [185, 0], [6, 1]]]]},
         ["Part 2 vertices 1 and 2", "180°"]),
        ({"type": "Polygon", "coordinates": [[[0, 0], [10, 0], [10, 10], [0, 10]],
                                             [[2, 2], [4, 2], [4, 4], [2, 4]],
                                             [[3, 3], [3.5, 3], [3.5, 3.5]]]},
         ["not a valid polygon", "nested", "(3.0°E, 3.0°N)"]),
        ({"type": "Polygon", "coordinates": [[[0, 0], [10, 0], [10, 10], [5, 0], [0, 10]]]},
         # vertex 4 (5, 0) lies on edge 1→2, so edges 3→4 and 4→5 both touch it there
         ["Edges 1→2 and ", "touch near (5.0°E, 0.0°N)"]),
        ({"type": "Polygon", "coordinates": [[[0, 0], [10, 0], [10, 95]]]},
         ["latitude 95 of vertex 3"]),
    ],
)
def test_geometry_errors(geometry, needles):
    msg = raises(region_from_geojson, {"type": "Feature", "properties": {}, "geometry": geometry})
    for n in needles:
        assert n in msg, msg


def test_feature_without_geometry_and_zip_with_two_shapefiles(tmp_path):
    fc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"name": "Empty"}, "geometry": None}]}
    assert "has no geometry" in raises(region_from_geojson, fc)
    write_shapefile(tmp_path, "one")
    write_shapefile(tmp_path, "two")
    zpath = tmp_path / "both.zip"
    with zipfile.ZipFile(zpath, "w") as z:
        for stem in ("one", "two"):
            for ext in ("shp", "shx", "dbf"):
                z.write(tmp_path / f"{stem}.{ext}", f"{stem}.{ext}")
    msg = raises(region_from_shapefile, zpath)
    assert "'both.zip' holds 2 shapefiles" in msg and "one.shp" in msg
    assert "is a folder" in raises(region_from_geojson, tmp_path)


def test_unreadable_prj_named(tmp_path):
    shp = write_shapefile(tmp_path, prj="this is not a coordinate system")
    msg = raises(region_from_shapefile, shp, feature=0)
    assert "The .prj file of 'basins.shp'" in msg


def test_repeated_vertices_reported_as_warning():
    r = region_from_vertices([0, 10, 10, 10, 0], [0, 0, 0, 10, 10])
    assert r.warnings == ["1 repeated vertex was removed."]


def test_edge_folding_back_is_an_overlap():
    # (10,0)→(10,10)→(10,5) walks back along the same meridian
    msg = raises(region_from_vertices, [0, 10, 10, 10, 10, 0], [0, 0, 10, 5, 12, 10])
    assert "Edges 2→3 and 3→4 overlap" in msg
