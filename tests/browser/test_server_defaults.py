"""Server defaults of the dashboard, without a browser: what it may read, upload caps."""

from __future__ import annotations

import base64
import inspect
import json

import pytest

from app import callbacks, server
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
    for src in callbacks._STATE["sources"].values():
        for path in src["paths"]:
            assert path not in layout
    with pytest.raises(KeyError):
        callbacks._source("/etc/passwd")


def test_upload_over_the_cap_is_refused_with_a_clear_message(tmp_path):
    server.create_app(cache_dir=tmp_path / "cache")
    limit = callbacks._STATE["upload_limit"]
    data = b" " * (limit + 1)
    contents = "data:application/json;base64," + base64.b64encode(data).decode()
    with pytest.raises(RegionError, match=r"more than the 10 MB allowed"):
        callbacks._decode_upload(contents, "huge.geojson")
    with pytest.raises(RegionError, match="arrived damaged"):
        callbacks._decode_upload("data:application/json;base64,@@@", "bad.geojson")


def test_closed_path_from_plotly_becomes_vertices():
    lon, lat = callbacks.path_vertices("M1.5,40L10,40.25L9.75,47.5Z")
    assert lon == [1.5, 10.0, 9.75] and lat == [40.0, 40.25, 47.5]
    lon, lat = callbacks.path_vertices("M-3,38L4,38L4,45L-3,38")
    assert lon == [-3.0, 4.0, 4.0] and lat == [38.0, 38.0, 45.0]


def test_a_budget_job_with_a_forged_key_is_refused(tmp_path):
    from dash.exceptions import PreventUpdate

    from budget.region import region_from_bbox

    server.create_app(cache_dir=tmp_path / "cache")
    geojson = region_from_bbox(0, 40, 5, 45).to_geojson()
    job = {"key": "0" * 32, "source": "0", "method": "boundary", "geojson": geojson}
    with pytest.raises(PreventUpdate):
        callbacks.run_budget(lambda progress: None, job)
    assert "0" * 32 not in callbacks._results()
    # with its true key the same job computes and caches the engine's budget
    job["key"] = callbacks._budget_key("0", geojson, "boundary")
    assert callbacks.run_budget(lambda progress: None, job) == {"key": job["key"], "error": None}
    ds = callbacks._results()[job["key"]]
    assert ds.attrs["method"] == "boundary" and "p_minus_e" in ds


def test_mass_correction_off_is_its_own_cached_result(tmp_path):
    import numpy as np

    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox, region_from_geojson

    server.create_app(cache_dir=tmp_path / "cache")
    geojson = region_from_bbox(0, 40, 8, 46).to_geojson()
    keys = {c: callbacks._budget_key("0", geojson, "boundary", c) for c in ("default", "off")}
    assert keys["default"] != keys["off"]
    job = {"key": keys["off"], "source": "0", "method": "boundary", "geojson": geojson,
           "correction": "off"}
    assert callbacks.run_budget(lambda progress: None, job)["error"] is None
    shown = callbacks._results()[keys["off"]]
    expected = compute(open_fields(callbacks._source("0")["paths"]),
                       region_from_geojson(geojson), mass_correction=False)
    np.testing.assert_allclose(shown["p_minus_e"].values, expected["p_minus_e"].values,
                               rtol=1e-12)
