"""The dashboard opens the inputs the command line opens: a real GRIB file on a Lambert grid and
a CF NetCDF on a rotated-pole grid, both found in --data-dir.

References: the budget shown must be the engine's own `compute` of the same region on the same
file (budget.ledger, itself checked against analytic answers on both grids in
tests/test_gridmap.py); the map's longitude-latitude extent must be the file's own 2-D latitude
and longitude (the rotated file's are made here by pyproj from the CF rotated-pole parameters;
the NAM file's come from its GRIB grid keys, NCEP grid 211 over North America).
The rotated-pole fields are invented analytic fields (budget.testing), written by this test.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

import xarray as xr

from budget import testing
from budget.gridmap import GridMapping, ProjectedGrid
from tests.browser.conftest import Watch, graph_traces, own_dashboard, to_pixels, wait_for_series

pytestmark = pytest.mark.browser

NAM = Path(__file__).resolve().parent.parent / "data" / "grib" / "nam.t00z.awp21100.tm00.cut.grib2"
G0 = 9.80665  # standard gravity (3rd CGPM 1901), as in budget.constants
ROTATED = {"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": 39.25,
           "grid_north_pole_longitude": -162.0}


def rotated_file(path: Path) -> None:
    """A CF NetCDF on a 1° rotated-pole grid (pole 39.25° N, 162° W): the analytic flux of
    budget.testing carried by earth-relative winds, q uniform, two levels, two times."""
    grid = ProjectedGrid(GridMapping.from_cf(ROTATED), np.arange(-20.0, 20.01, 1.0), np.arange(-15.0, 15.01, 1.0))
    qu, qv = testing.flux(grid.lon, grid.lat)
    q, dp = 0.01, 50000.0  # levels 500 and 1000 hPa, ps 1000 hPa: the column flux is q·V·Δp/g
    dims = ("time", "plev", "rlat", "rlon")
    cube = lambda a: np.broadcast_to(a * G0 / (q * dp), (2, 2) + a.shape).copy()  # noqa: E731
    ds = xr.Dataset(
        {
            "ua": xr.Variable(dims, cube(qu), {"units": "m s-1", "standard_name": "eastward_wind", "grid_mapping": "crs"}),
            "va": xr.Variable(dims, cube(qv), {"units": "m s-1", "standard_name": "northward_wind", "grid_mapping": "crs"}),
            "hus": xr.Variable(dims, np.full((2, 2) + grid.shape, q), {"units": "kg kg-1", "grid_mapping": "crs"}),
            "ps": xr.Variable(("time", "rlat", "rlon"), np.full((2,) + grid.shape, 100000.0),
                              {"units": "Pa", "grid_mapping": "crs"}),
            "crs": xr.Variable((), 0, ROTATED),
        },
        coords={
            "time": ("time", np.array(["2031-03-01T00", "2031-03-01T06"], dtype="datetime64[ns]")),
            "plev": ("plev", [500.0, 1000.0], {"units": "hPa", "standard_name": "air_pressure"}),
            "rlat": ("rlat", grid.y, {"units": "degrees"}),
            "rlon": ("rlon", grid.x, {"units": "degrees"}),
            "lat": (("rlat", "rlon"), grid.lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": (("rlat", "rlon"), grid.lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"title": "Invented analytic test fields on a rotated-pole grid (not real data)"},
    )
    ds.to_netcdf(path)




@pytest.fixture(scope="module")
def files_dashboard(tmp_path_factory):
    """A dashboard serving a data folder with the NAM GRIB sample and a rotated-pole NetCDF, in
    its own process (Dash's callbacks and the server's state are per process, so the session's
    sample dashboard in tests/browser/conftest.py is left alone)."""
    folder = tmp_path_factory.mktemp("data-dir")
    shutil.copy(NAM, folder / NAM.name)
    rotated_file(folder / "rotated_pole.nc")
    with own_dashboard(tmp_path_factory.mktemp("dash-cache"), data_dir=folder) as url:
        yield {"url": url, "folder": folder}


def _heat(page) -> dict:
    return next(t for t in graph_traces(page, "map") if t["type"] == "heatmap")


def _choose(page, label: str) -> None:
    page.click("#source")
    page.get_by_role("option", name=label).click()


def _wait_for_map_near(page, lon: float) -> None:
    """Wait until the map's heatmap is drawn around the given longitude (the new source)."""
    page.wait_for_function(
        """(lon) => {
            const gd = document.querySelector('#map .js-plotly-plot');
            const t = gd && gd._fullData && gd._fullData.find(d => d.type === 'heatmap');
            if (!t) return false;
            const x = Array.from(t.x);
            return Math.min(...x) < lon && Math.max(...x) > lon;
        }""", arg=lon, timeout=90_000)


def _draw_box(page, west, south, east, north) -> None:
    x0, y0 = to_pixels(page, west, south)
    x1, y1 = to_pixels(page, east, north)
    page.mouse.move(x0, y0)
    page.mouse.down()
    for k in range(1, 11):
        page.mouse.move(x0 + (x1 - x0) * k / 10, y0 + (y1 - y0) * k / 10)
    page.mouse.up()


def _extent(path: Path):
    from budget.fields import open_fields

    f = open_fields([str(path)])
    lon = np.asarray(f.lon, float)
    lon = lon[lon.shape[0] // 2, lon.shape[1] // 2] + np.mod(lon - lon[lon.shape[0] // 2, lon.shape[1] // 2] + 180, 360) - 180
    return f, (lon.min(), lon.max(), float(np.min(f.lat)), float(np.max(f.lat)))


def _shown_region(page):
    from budget.region import region_from_geojson

    with page.expect_download() as info:
        page.click("#dl-region")
    return region_from_geojson(json.loads(open(info.value.path(), encoding="utf-8").read())["features"][0])


def test_grib_and_rotated_pole_files_give_a_budget_and_a_lonlat_map(page, files_dashboard, shots_dir):
    from budget.ledger import compute

    watch = Watch(page, files_dashboard["url"])
    folder = files_dashboard["folder"]
    page.goto(files_dashboard["url"] + "/")
    page.wait_for_selector("#map .heatmaplayer image, #map .hm image", timeout=90_000)
    cases = [
        # label in the picker, file, a longitude inside, the box drawn, its name
        (NAM.name, folder / NAM.name, -100.0, (-105.0, 35.0, -90.0, 45.0), "Box 1"),
        ("rotated_pole.nc", folder / "rotated_pole.nc", 15.0, (8.0, 45.0, 22.0, 55.0), "Box 2"),
    ]
    for label, path, inside, box, name in cases:
        _choose(page, label)
        _wait_for_map_near(page, inside)
        fields, (lo0, lo1, la0, la1) = _extent(path)
        heat = _heat(page)
        x, y = np.asarray(heat["x"], float), np.asarray(heat["y"], float)
        # drawn in longitude-latitude over the file's own 2-D coordinates (display step ≤ 1.5°)
        assert x.min() == pytest.approx(lo0, abs=1e-6) and x.max() == pytest.approx(lo1, abs=1.5)
        assert y.min() == pytest.approx(la0, abs=1e-6) and y.max() == pytest.approx(la1, abs=1.5)
        _draw_box(page, *box)
        if path.suffix == ".nc":
            # the invented file: q uniform, so W = q Δp / g = 0.01 × 50000 / g0 (CHECKS.md)
            expected_w = 0.01 * 50000.0 / G0
        wait_for_series(page, name, timeout=120_000)
        series = graph_traces(page, "series")
        pme = np.asarray(next(t for t in series if t["name"] == "P − E")["y"], float)
        pw = np.asarray(series[0]["y"], float)  # the column content, kg m-2
        region = _shown_region(page)
        assert region.bounds == pytest.approx(box, abs=0.5)  # where the mouse went, to a pixel
        expected = compute(fields, region)
        # the series is drawn in mm/day: kg m-2 s-1 × 86400 (CHECKS.md, conversions); the GRIB
        # sample has one time, so its P − E (which needs the tendency) is NaN on both sides
        np.testing.assert_allclose(pme, expected["p_minus_e"].values * 86400, rtol=1e-9)
        np.testing.assert_allclose(pw, expected["precipitable_water"].values, rtol=1e-9)
        assert np.all(np.isfinite(pw)) and np.all(pw > 0)
        if path.suffix == ".nc":
            np.testing.assert_allclose(pw, expected_w, rtol=1e-5)
            assert np.all(np.isfinite(pme))
        page.screenshot(path=str(shots_dir / f"files_{Path(label).stem}.png"), full_page=True)
    assert not watch.errors, f"console errors: {watch.errors}"
    assert not watch.outside(), f"requests left 127.0.0.1: {watch.outside()}"
