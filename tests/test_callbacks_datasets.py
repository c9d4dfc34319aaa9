"""The datasets-side-by-side panel (app/callbacks_datasets.py) without a browser: the region's
budget on several field sets of a server, through the server's own jobs and cache.

References: the budget is linear in humidity (W = (1/g)∫q dp), so a field set whose humidity is
1.2 times another's has 1.2 times its precipitable water at every step, and the shaded range
spans the two; a field set whose grid lies 100° east of the region cannot cover it, and the
panel names it in a sentence instead of drawing it.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from app.callbacks_datasets import gather, overlay, status_text
from app.regions import record
from app.server import ASSETS, resolve_sources
from app.state import AppState, Settings, Source
from budget.region import load_region
from sample_fields import ensure_sample


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    """A server state (not the process's configured one) over a data folder of three field
    sets: the invented sample, the same with humidity x 1.2, and one moved 100° east."""
    root = tmp_path_factory.mktemp("datasets")
    sample = ensure_sample()
    with xr.open_dataset(sample.levels) as src:
        src.load()
        src.to_netcdf(root / "a_base.nc")
        moist = src.copy()
        moist["hus"] = src["hus"] * 1.2
        moist.to_netcdf(root / "b_moist.nc")
        far = src.assign_coords(lon=src["lon"] + 100.0)
        far.to_netcdf(root / "c_far.nc")
    sources = resolve_sources(data_dir=root)
    state = AppState(Settings(
        sources=tuple(Source(id=s["id"], label=s["label"], paths=tuple(s["paths"]), root=s.get("root"))
                      for s in sources),
        cache_dir=tmp_path_factory.mktemp("cache"), assets=ASSETS, job_threads=2))
    rec = record(load_region(path=sample.basin), "r1", "Sample basin (invented)")
    want = {"geojson": rec["geojson"], "method": "boundary", "correction": "off", "attribution": None,
            "name": rec["name"]}
    yield state, want, {s["label"]: s["id"] for s in sources}
    state.shutdown()


def test_each_field_set_budgeted_and_overlaid(server):
    state, want, ids = server
    got = gather(state, want, [ids["a_base.nc"], ids["b_moist.nc"]], wait=120)
    assert sorted(got.budgets) == ["a_base.nc", "b_moist.nc"] and not got.failed and not got.pending
    base, moist = got.budgets["a_base.nc"], got.budgets["b_moist.nc"]
    np.testing.assert_allclose(moist["precipitable_water"] / base["precipitable_water"], 1.2, rtol=1e-5)
    fig = overlay(got, "precipitable_water", want["name"])
    names = [t.name for t in fig.data]
    assert names == ["spread (range)", "a_base.nc", "b_moist.nc"]  # the legend names each dataset
    band = np.asarray(fig.data[0].y, float)
    nt = base.sizes["time"]
    np.testing.assert_allclose(band[:nt], moist["precipitable_water"].values, rtol=1e-6)  # kg m-2 = mm
    np.testing.assert_allclose(band[nt:][::-1], base["precipitable_water"].values, rtol=1e-6)
    assert "mm" in fig.layout.yaxis.title.text and want["name"] in fig.layout.title.text
    # the results went into the server's cache under the main budget's key
    key = state.budget_key(ids["a_base.nc"], want["geojson"], "boundary", "off", None)
    assert state.results.get(key) is base


def test_a_field_set_that_cannot_cover_the_region_is_named(server):
    state, want, ids = server
    got = gather(state, want, [ids["a_base.nc"], ids["c_far.nc"]], wait=120)
    assert list(got.budgets) == ["a_base.nc"]
    [(label, message)] = got.failed
    assert label == "c_far.nc" and "Traceback" not in message
    assert "grid" in message or "outside" in message  # the engine's RegionError sentence
    text = status_text(got, want["name"])
    assert text.startswith("“c_far.nc” cannot give the budget of Sample basin (invented): ")
    fig = overlay(got, "p_minus_e", want["name"])
    assert not fig.data or all(t.name != "c_far.nc" for t in fig.data)
