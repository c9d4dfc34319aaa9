"""budget.region.load_regions: every feature of a file as a named region.

Ids follow the rule of issue 10 (property named by --id-property; by default name, else id,
else the feature's index).  Areas are checked against the analytic box area
R² Δλ (sin φ2 − sin φ1) (CHECKS.md, derived).  All shapes are invented, not real places.
"""

import json

import pytest

from budget.region import FeatureProblem, NamedRegion, RegionSet, load_region, load_regions

from tests.region_support import DATA, box_area, raises, write_shapefile


def box(w, s, e, n):
    return [[[w, s], [e, s], [e, n], [w, n], [w, s]]]


def collection(*features):
    return {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": props, "geometry": {"type": "Polygon", "coordinates": c},
         **extra} for props, c, extra in features]}


def test_every_feature_of_a_collection_with_ids_and_areas(tmp_path):
    path = tmp_path / "three.geojson"
    path.write_text(json.dumps(collection(
        ({"name": "North Vale"}, box(0, 40, 5, 45), {}),
        ({"id": "B-2"}, box(5, 40, 10, 45), {}),
        ({}, box(10, 40, 15, 45), {}),
    )))
    rs = load_regions(path)
    assert isinstance(rs, RegionSet) and rs.ok and rs.problems == []
    assert rs.ids == ["North Vale", "B-2", "2"]  # name, then id, then the index
    assert all(isinstance(r, NamedRegion) for r in rs.regions)
    assert [r.index for r in rs.regions] == [0, 1, 2]
    for item, west in zip(rs.regions, (0, 5, 10)):
        assert item.region.name == item.id
        assert item.region.area_m2() == pytest.approx(box_area(west, 40, west + 5, 45), rel=1e-12)
    rs.raise_if_invalid()  # nothing to refuse


def test_each_region_equals_the_single_feature_load():
    path = DATA / "invented_basins.geojson"  # holds one feature that is invalid on purpose
    rs = load_regions(path)
    assert rs.regions and rs.problems
    for item in rs.regions:
        one = load_region(path, feature=item.index)
        assert item.region.area_m2() == one.area_m2()
        assert item.region.edge_names == one.edge_names
    for problem in rs.problems:  # the same sentence a single load gives
        assert problem.message == raises(load_region, path, feature=problem.index)


def test_feature_level_id_member_and_id_property(tmp_path):
    fc = collection(({"code": "X1"}, box(0, 0, 1, 1), {"id": 7}), ({"code": "X2"}, box(1, 0, 2, 1), {"id": 8}))
    assert load_regions(fc).ids == ["7", "8"]
    assert load_regions(fc, id_property="code").ids == ["X1", "X2"]
    msg = raises(load_regions, fc, id_property="basin_no")
    assert "Feature 0" in msg and "'basin_no'" in msg and "code" in msg


def test_two_features_sharing_an_id_are_refused():
    fc = collection(({"name": "Twin"}, box(0, 0, 1, 1), {}), ({"name": "Twin"}, box(1, 0, 2, 1), {}))
    msg = raises(load_regions, fc)
    assert "Features 0 and 1" in msg and "'Twin'" in msg and "--id-property" in msg


def test_invalid_features_are_collected_and_named(tmp_path):
    bow = [[[0, 0], [1, 1], [1, 0], [0, 1], [0, 0]]]  # edges cross: a bow tie
    fc = collection(({"name": "Good"}, box(0, 0, 1, 1), {}),
                    ({"name": "Bow"}, bow, {}),
                    ({"name": "Also good"}, box(2, 0, 3, 1), {}))
    path = tmp_path / "mixed.geojson"
    path.write_text(json.dumps(fc))
    rs = load_regions(path)
    assert rs.ids == ["Good", "Also good"] and not rs.ok
    (problem,) = rs.problems
    assert isinstance(problem, FeatureProblem) and (problem.id, problem.index) == ("Bow", 1)
    assert "(feature Bow)" in problem.message and "cross" in problem.message
    msg = raises(rs.raise_if_invalid)
    assert "Feature 'Bow' of 'mixed.geojson'" in msg and "--skip-invalid" in msg


def test_several_invalid_features_in_one_sentence():
    fc = collection(*[({"name": f"Empty {k}"}, [[[k, 0], [k + 1, 0], [k + 2, 0]]], {}) for k in range(12)])
    rs = load_regions(fc)
    assert rs.regions == [] and len(rs.problems) == 12
    msg = raises(rs.raise_if_invalid)
    assert msg.startswith("12 features of the region are not valid regions") and "2 more" in msg


def test_shapefile_features_with_numeric_ids(tmp_path):
    shp = write_shapefile(tmp_path)
    rs = load_regions(shp)
    assert rs.ids == ["Upper Vale", "Coastal Fen"]
    assert load_regions(shp, id_property="code").ids == ["1", "2"]  # numeric field 1 → "1"
    fen = rs.regions[1].region
    assert fen.area_m2() == pytest.approx(box_area(20, 0, 25, 5), rel=1e-12)
    assert any(".dbf" in w for w in load_regions(shp.read_bytes(), filename="b.shp").warnings)
