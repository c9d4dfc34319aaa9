"""Server defaults of the dashboard, without a browser: what it may read, upload caps."""

from __future__ import annotations

import base64
import inspect
import json

import pytest

from app import callbacks, regions, server, state
from budget.errors import RegionError, RequestError


def test_serve_binds_localhost_by_default():
    params = inspect.signature(server.serve).parameters
    assert params["host"].default == "127.0.0.1"
    assert params["port"].default == 8050


def test_data_dir_lists_only_fields_inside_it(tmp_path):
    inside = tmp_path / "data"
    (inside / "sub").mkdir(parents=True)
    (inside / "a.nc").write_bytes(b"")
    (inside / "sub" / "b.nc").write_bytes(b"")
    (inside / "notes.txt").write_text("not fields")
    outside = tmp_path / "elsewhere.nc"
    outside.write_bytes(b"")
    (inside / "link.nc").symlink_to(outside)  # a link leading out of the folder
    sources = server.resolve_sources(data_dir=str(inside))
    labels = sorted(s["label"] for s in sources)
    assert labels == ["a.nc", "sub/b.nc"]
    for s in sources:
        assert all(p.startswith(str(inside.resolve())) for p in s["paths"])


def test_missing_inputs_give_one_sentence(tmp_path):
    with pytest.raises(RequestError, match="does not exist"):
        server.resolve_sources(paths=[str(tmp_path / "nope.nc")])
    with pytest.raises(RequestError, match="No NetCDF"):
        server.resolve_sources(data_dir=str(tmp_path))


def test_requests_name_field_sets_by_id_never_by_path(tmp_path):
    app = server.create_app(cache_dir=tmp_path / "cache")
    assert app.server.config["MAX_CONTENT_LENGTH"] == server.REQUEST_LIMIT_BYTES
    # the page only ever sees ids and labels
    layout = json.dumps(app.layout.to_plotly_json(), default=str)
    st = state.current()
    for src in st.settings.sources:
        for path in src.paths:
            assert path not in layout
    # a forged or stale id gets a plain sentence, not an apology for a bug
    with pytest.raises(RequestError, match="does not offer") as caught:
        st.source("/etc/passwd")
    assert "bug" not in str(caught.value)


def test_upload_over_the_cap_is_refused_with_a_clear_message(tmp_path):
    server.create_app(cache_dir=tmp_path / "cache")
    limit = state.current().settings.upload_limit
    data = b" " * (limit + 1)
    contents = "data:application/json;base64," + base64.b64encode(data).decode()
    with pytest.raises(RegionError, match=r"more than the 10 MB allowed"):
        regions.decode_upload(contents, "huge.geojson")
    with pytest.raises(RegionError, match="arrived damaged"):
        regions.decode_upload("data:application/json;base64,@@@", "bad.geojson")


def test_zip_upload_is_capped_on_its_expanded_size(tmp_path):
    import io
    import zipfile

    from budget.region import UPLOAD_EXPANDED_LIMIT_BYTES

    server.create_app(cache_dir=tmp_path / "cache")
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("big.shp", b"\0" * (UPLOAD_EXPANDED_LIMIT_BYTES + 1))
    data = buffer.getvalue()
    assert len(data) < 1_000_000  # small on the wire, large once expanded
    contents = "data:application/zip;base64," + base64.b64encode(data).decode()
    # the page's path: decode (compressed-size cap), then the reader's expanded-size cap
    with pytest.raises(RegionError, match=r"expands to .* more than the"):
        regions.upload_features("big.zip", regions.decode_upload(contents, "big.zip"))


def test_closed_path_from_plotly_becomes_vertices():
    lon, lat = regions.path_vertices("M1.5,40L10,40.25L9.75,47.5Z")
    assert lon == [1.5, 10.0, 9.75] and lat == [40.0, 40.25, 47.5]
    lon, lat = regions.path_vertices("M-3,38L4,38L4,45L-3,38")
    assert lon == [-3.0, 4.0, 4.0] and lat == [38.0, 38.0, 45.0]


def _want(geojson, correction="default", name="Box A"):
    from app.regions import record
    from budget.region import region_from_geojson

    rec = record(region_from_geojson(geojson), "r1", name)
    return callbacks.request_budget("r1", "boundary", "0", [rec], correction, None)


def test_a_request_with_a_forged_key_gets_a_plain_sentence(tmp_path):
    from budget.region import region_from_bbox

    server.create_app(cache_dir=tmp_path / "cache")
    want = _want(region_from_bbox(0, 40, 5, 45).to_geojson())
    forged = dict(want, key="0" * 32)
    shown = callbacks.show_budget(forged, "mm/day", 0, [0, 20], "vapour", None)
    assert "does not match" in shown["message"] and "bug" not in shown["message"]
    assert shown["csv_off"] and shown["nc_off"]
    assert state.current().results.get("0" * 32) is None


def test_mass_correction_off_is_its_own_cached_result(tmp_path):
    import numpy as np

    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox, region_from_geojson

    server.create_app(cache_dir=tmp_path / "cache")
    geojson = region_from_bbox(0, 40, 8, 46).to_geojson()
    st = state.current()
    keys = {c: st.budget_key("0", geojson, "boundary", c) for c in ("default", "off")}
    assert keys["default"] != keys["off"]
    want = _want(geojson, "off")
    assert want["key"] == keys["off"]
    assert st.jobs.get(keys["off"]).wait(120)
    shown = st.results.get(keys["off"])
    expected = compute(open_fields(st.checked_paths("0")), region_from_geojson(geojson),
                       mass_correction=False)
    np.testing.assert_allclose(shown["p_minus_e"].values, expected["p_minus_e"].values,
                               rtol=1e-12)


def test_cache_key_names_the_engine_version(tmp_path, monkeypatch):
    from budget.region import region_from_bbox

    server.create_app(cache_dir=tmp_path / "cache")
    geojson = region_from_bbox(0, 40, 8, 46).to_geojson()
    before = state.current().budget_key("0", geojson, "boundary", "default")
    monkeypatch.setattr(state, "ENGINE_VERSION", "0.0.0-other")
    assert state.current().budget_key("0", geojson, "boundary", "default") != before


def test_a_data_file_swapped_for_a_link_after_start_is_not_read(tmp_path):
    import shutil

    from sample_fields import ensure_sample

    data = tmp_path / "data"
    data.mkdir()
    shutil.copy(ensure_sample().levels, data / "event.nc")
    outside = tmp_path / "secret.nc"
    shutil.copy(ensure_sample().column, outside)
    server.create_app(data_dir=str(data), cache_dir=tmp_path / "cache")
    st = state.current()
    assert st.fields("0").kind == "levels"
    (data / "event.nc").unlink()
    (data / "event.nc").symlink_to(outside)  # swapped after the server started
    with pytest.raises(RequestError, match="leads outside the data folder"):
        st.fields("0")
    with pytest.raises(RequestError, match="leads outside the data folder"):
        st.budget_key("0", {"geometry": None}, "boundary", "default")
