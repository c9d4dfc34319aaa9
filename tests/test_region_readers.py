"""budget.region readers: the one reader table, data in memory (no temporary files), the
expanded-size cap on shapefiles and zips, and files nested too deep.

Areas are checked against the analytic box area R² Δλ (sin φ2 − sin φ1) (CHECKS.md,
derived).  The shapes are invented test basins, not real places.
"""

import io
import json
import struct
import tempfile
import zipfile

import pytest

from budget.errors import RegionError
from budget.region import (
    READERS,
    list_features,
    load_region,
    read_features,
    region_from_geojson,
    region_from_shapefile,
    region_from_upload,
)
from budget.region.archive import read_capped

from tests.region_support import DATA, box_area, raises, write_shapefile

DEPTH = 100_000  # the nesting of issue 12's corpus


def zip_bytes(folder, stem="basins", pad: int = 0) -> bytes:
    """The shapefile `stem` in `folder` zipped in memory; `pad` extra zero bytes in the .dbf
    (they compress to almost nothing, as in a zip bomb)."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as z:
        for ext in ("shp", "shx", "dbf"):
            data = (folder / f"{stem}.{ext}").read_bytes()
            if ext == "dbf" and pad:
                data += b"\0" * pad
            z.writestr(f"{stem}.{ext}", data)
    return buf.getvalue()


@pytest.fixture
def no_temp_files(monkeypatch):
    """Fail if anything asks for a temporary file or folder."""
    def refuse(*a, **k):
        raise AssertionError("a temporary file was created")

    for name in ("mkstemp", "mkdtemp", "NamedTemporaryFile", "TemporaryFile",
                 "TemporaryDirectory", "SpooledTemporaryFile"):
        monkeypatch.setattr(tempfile, name, refuse)


# ------------------------------------------------------------------------ one reader table


def test_each_suffix_of_the_table_has_one_reader():
    suffixes = [s for r in READERS for s in r.suffixes]
    assert len(suffixes) == len(set(suffixes))
    assert {".geojson", ".json", ".shp", ".zip"} <= set(suffixes)


def test_path_upload_and_stream_give_the_same_region(tmp_path, no_temp_files):
    write_shapefile(tmp_path)
    data = zip_bytes(tmp_path)
    (tmp_path / "basins.zip").write_bytes(data)
    want = box_area(20, 0, 25, 5)  # "Coastal Fen" is the box 20–25 E, 0–5 N
    got = [
        region_from_shapefile(tmp_path / "basins.zip", feature="Coastal Fen"),
        load_region(tmp_path / "basins.zip", feature="Coastal Fen"),
        region_from_upload("basins.zip", data, feature="Coastal Fen"),
        region_from_upload("basins.zip", io.BytesIO(data), feature="Coastal Fen"),
    ]
    for r in got:
        assert r.name == "Coastal Fen"
        assert r.area_m2() == pytest.approx(want, rel=1e-12)


def test_list_features_reads_zip_bytes_and_streams_in_memory(tmp_path, no_temp_files):
    write_shapefile(tmp_path)
    data = zip_bytes(tmp_path)
    names = ["Upper Vale", "Coastal Fen"]
    assert [f["name"] for f in list_features(data)] == names  # recognised by its first bytes
    assert [f["name"] for f in list_features(io.BytesIO(data))] == names
    assert [f["name"] for f in list_features(data, filename="up.zip")] == names
    shp = (tmp_path / "basins.shp").read_bytes()
    assert [f["index"] for f in list_features(shp, filename="up.shp")] == [0, 1]
    gj = (DATA / "invented_basins.geojson").read_bytes()
    assert [f["name"] for f in list_features(gj, filename="b.geojson")][:2] == names


def test_upload_of_an_unknown_type_names_the_file_and_the_types():
    msg = raises(list_features, b"hello", filename="notes.txt")
    assert "'notes.txt'" in msg and ".geojson" in msg and ".zip" in msg


# ------------------------------------------------------------------- expanded-size cap


def test_zip_expanding_past_the_cap_is_refused_before_reading(tmp_path):
    write_shapefile(tmp_path)
    data = zip_bytes(tmp_path, pad=3 * 2**20)  # 3 MB of zeros: a few kB compressed
    assert len(data) < 64 * 1024
    msg = raises(region_from_upload, "big.zip", data, feature=0, limit=2**20)
    assert "'big.zip' expands to" in msg and "1.0 MB allowed" in msg
    # the same file under the default upload cap is fine (3 MB < 32 MB)
    assert region_from_upload("big.zip", data, feature=0).name == "Upper Vale"


def test_zip_whose_headers_understate_a_member_is_not_trusted(tmp_path):
    write_shapefile(tmp_path)
    data = bytearray(zip_bytes(tmp_path, pad=3 * 2**20))
    # rewrite the .dbf's uncompressed size to 100 bytes in both the local header and the
    # central directory (APPNOTE.TXT 4.3.7 and 4.3.12: offsets 22 and 24)
    for sig, off in ((b"PK\x03\x04", 22), (b"PK\x01\x02", 24)):
        start = 0
        while (i := data.find(sig, start)) >= 0:
            name_at = i + (30 if sig == b"PK\x03\x04" else 46)
            if data[name_at:name_at + 10] == b"basins.dbf":
                data[i + off:i + off + 4] = struct.pack("<I", 100)
            start = i + 4
    msg = raises(region_from_upload, "liar.zip", bytes(data), feature=0, limit=2**20)
    assert "'liar.zip'" in msg


def test_read_capped_counts_the_bytes_really_read():
    assert read_capped(io.BytesIO(b"x" * 1000), 1000, "a.zip", 1000) == b"x" * 1000
    msg = raises(read_capped, io.BytesIO(b"x" * 1001), 1000, "a.zip", 1000)
    assert "'a.zip' expands to" in msg


def test_shapefile_on_disk_over_the_cap_is_refused(tmp_path):
    shp = write_shapefile(tmp_path)
    msg = raises(read_features, shp, limit=100)
    assert "'basins.shp' expands to" in msg


# --------------------------------------------------------------------- nested too deep


def test_geojson_file_nested_100000_deep_is_one_sentence(tmp_path):
    path = tmp_path / "deep.geojson"
    path.write_text('{"type": "Polygon", "coordinates": ' + "[" * DEPTH + "]" * DEPTH + "}")
    msg = raises(load_region, path)
    assert "'deep.geojson' is nested too deep" in msg
    msg = raises(region_from_upload, "deep.json", path.read_bytes())
    assert "'deep.json' is nested too deep" in msg


def test_geometry_collection_nested_100000_deep_in_memory_is_one_sentence():
    geom = {"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 1]]]}
    for _ in range(DEPTH):
        geom = {"type": "GeometryCollection", "geometries": [geom]}
    # walked without recursion: the one polygon inside is found
    region = region_from_geojson({"type": "Feature", "properties": {}, "geometry": geom})
    assert region.area_m2() > 0
    # collections that share members can stand for 2**40 geometries: refused, not walked
    shared = geom
    for _ in range(40):
        shared = {"type": "GeometryCollection", "geometries": [shared, shared]}
    msg = raises(region_from_geojson, shared)
    assert "more than 1,000,000 geometries" in msg


def test_coordinates_nested_deep_inside_a_ring_are_one_sentence():
    ring = [0, 0]
    for _ in range(1000):
        ring = [ring]
    msg = raises(region_from_geojson, {"type": "Polygon", "coordinates": [[ring, [1, 0], [1, 1]]]})
    assert "not numbers" in msg or "pairs" in msg
