"""Report figures (app/report): every layout renders offline on the invented sample; pixel,
PDF and page-size checks; projection choice; the shipped cartography and its one source.

References named beside the checks: ISO 216 (A4 = 210 mm x 297 mm), ANSI/ASME Y14.1 (letter
= 8.5 in x 11 in), Snyder 1987 (USGS Professional Paper 1395) for the conic's standard
parallels, MetPy's unit registry (pint) for the m3/s axis, cartopy's documented folder layout.
"""

from __future__ import annotations

import json
import socket
import urllib.request

import matplotlib.image as mpimg
import numpy as np
import pytest

from app import report
from app.figure_cmd import figure_data
from app.report.cartography import CARTOGRAPHY_DIR, choose_frame, shapefile_path, shipped_lines
from app.report.style import OUTLINE
from budget.fields import open_fields
from budget.region import load_region
from sample_fields import ensure_sample


@pytest.fixture(autouse=True)
def no_network(monkeypatch):
    """Any attempt to open a network connection (cartopy's downloader included) fails the test."""

    def refuse(*args, **kwargs):
        raise AssertionError(f"network access attempted: {args[:2]!r}")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    monkeypatch.setattr(urllib.request, "urlopen", refuse)


@pytest.fixture(scope="module")
def sample_data():
    paths = ensure_sample()
    fields = open_fields([paths.levels])
    data, _ = figure_data(fields, load_region(path=paths.basin), with_map=True)
    return data


def _rgb(hex_colour: str) -> np.ndarray:
    return np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0


def _near(image: np.ndarray, colour, tol: float = 0.06) -> np.ndarray:
    return np.all(np.abs(image[..., :3] - np.asarray(colour)[None, None, :3]) < tol, axis=-1)


def _geo_axes(fig):
    from cartopy.mpl.geoaxes import GeoAxes

    return [ax for ax in fig.axes if isinstance(ax, GeoAxes)]


def _all_axes(fig):
    return [a for ax in fig.axes for a in [ax, *ax.child_axes]]


def test_guard_blocks_network():
    # the guard itself works, so a passing render below means no download was tried
    with pytest.raises(AssertionError, match="network access"):
        urllib.request.urlopen("http://127.0.0.1:9/")
    with pytest.raises(AssertionError, match="network access"):
        socket.create_connection(("127.0.0.1", 9))


@pytest.mark.parametrize("layout", ["map", "series", "boundary", "climatology"])
def test_each_layout_renders_to_a_plausible_png(sample_data, layout, tmp_path):
    fig = report.render(layout, sample_data, report.get_style("paper"))
    out = report.save(fig, tmp_path / f"{layout}.png", dpi=100)
    size = out.stat().st_size
    assert 15_000 < size < 3_000_000, size  # a drawn figure, not an empty canvas (common practice, no source)
    image = mpimg.imread(out)
    w, h = fig.get_size_inches() * 100
    assert image.shape[:2] == (round(h), round(w))
    assert not list(tmp_path.glob(".*"))  # no temporary file left behind
    assert oct(out.stat().st_mode & 0o777) == oct(0o666 & ~_umask())


def _umask():
    import os

    mask = os.umask(0)
    os.umask(mask)
    return mask


def test_map_outline_inside_region_box_and_colour_bar(sample_data, tmp_path):
    import cartopy.crs as ccrs

    fig = report.render("map", sample_data, report.get_style("paper"))
    out = report.save(fig, tmp_path / "map.png", dpi=100)
    image = mpimg.imread(out)
    height = image.shape[0]
    ax = _geo_axes(fig)[0]
    ring = sample_data.region.parts[0].exterior
    xy = ax.projection.transform_points(ccrs.PlateCarree(), np.asarray(ring.lon), np.asarray(ring.lat))[:, :2]
    px = ax.transData.transform(xy)
    x0, x1 = px[:, 0].min() - 25, px[:, 0].max() + 25
    y0, y1 = height - px[:, 1].max() - 25, height - px[:, 1].min() + 25
    hit = _near(image, _rgb(OUTLINE))
    inside = hit[int(y0):int(y1), int(x0):int(x1)].sum()
    assert inside > 300  # the outline (2 px wide, ~2000 km long) is drawn where the region is
    assert inside >= 0.95 * hit.sum()  # and nowhere else on the figure
    # a labelled colour bar with the ends of the IVT scale (cividis) in it
    labels = [a.get_ylabel() for a in _all_axes(fig)]
    assert any("IVT" in t and "kg m⁻¹ s⁻¹" in t for t in labels)
    import matplotlib

    cmap = matplotlib.colormaps[report.style.IVT_CMAP]
    assert _near(image, cmap(0.02)[:3], 0.05).sum() > 50
    assert _near(image, cmap(0.98)[:3], 0.05).sum() > 50


def test_map_with_convergence_uses_a_diverging_scale_centred_on_zero(sample_data):
    fig = report.render("map", sample_data, report.get_style("slide"), convergence=True)
    meshes = [c for ax in _geo_axes(fig) for c in ax.collections if hasattr(c, "get_clim") and c.get_cmap().name == "BrBG"]
    assert meshes
    lo, hi = meshes[0].get_clim()
    assert lo == pytest.approx(-hi) and hi > 0


@pytest.mark.parametrize("page, size_pt", [("a4", (595.3, 841.9)), ("letter", (612.0, 792.0))])
def test_report_pdf_one_page_of_the_right_size_with_its_text(sample_data, tmp_path, page, size_pt):
    from pypdf import PdfReader

    fig = report.render("report", sample_data, report.get_style("paper"), page=page)
    out = report.save(fig, tmp_path / "report.pdf")
    pdf = PdfReader(str(out))
    assert len(pdf.pages) == 1
    box = pdf.pages[0].mediabox
    # A4 210 x 297 mm (ISO 216) and letter 8.5 x 11 in (ANSI), at 72 pt per inch
    assert float(box.width) == pytest.approx(size_pt[0], abs=1.0)
    assert float(box.height) == pytest.approx(size_pt[1], abs=1.0)
    text = pdf.pages[0].extract_text()
    for expected in ("INVENTED SCENARIO", "Invented basin (demo)", "mm/day", "kg m", "hPa",
                     "not a substitute for gauge records", "2025-01-15 00:00"):
        assert expected in text, expected


def test_svg_keeps_text_as_text(sample_data, tmp_path):
    out = report.save(report.render("series", sample_data, report.get_style("paper")), tmp_path / "s.svg")
    svg = out.read_text(encoding="utf-8")
    assert svg.lstrip().startswith("<?xml") and "W, mm" in svg and "INVENTED SCENARIO" in svg


def test_slide_style_is_larger_than_paper(sample_data):
    paper, slide = report.get_style("paper"), report.get_style("slide")
    assert slide.font_size > paper.font_size and slide.line_width > paper.line_width
    fig = report.render("series", sample_data, slide)
    assert max(line.get_linewidth() for ax in fig.axes for line in ax.lines) >= slide.line_width


def test_climatology_right_axis_is_the_volume_rate(sample_data):
    # 1 mm/day over the region as m3/s, checked with MetPy's unit registry (pint)
    from metpy.units import units

    expected = (1 * units("mm/day") * sample_data.area_m2 * units("m^2")).to("m^3/s").magnitude
    assert sample_data.to_m3_s(1.0) == pytest.approx(expected, rel=1e-12)
    assert sample_data.from_m3_s(expected) == pytest.approx(1.0, rel=1e-12)


def test_monthly_cycle_of_a_short_record_matches_pandas(sample_data):
    # five days of January: the daily means grouped by month, as a plain pandas resample gives
    import pandas as pd

    cyc, spread = report.monthly_cycle(sample_data, "p_minus_e")
    daily = pd.Series(sample_data.budget["p_minus_e"].values * 86400.0, index=sample_data.times).resample("1D").mean()
    assert list(cyc["month"]) == [1] and "daily means" in spread
    assert cyc["mean"].iloc[0] == pytest.approx(daily.mean(), rel=1e-12)
    assert cyc["low"].iloc[0] == pytest.approx(daily.quantile(0.1), rel=1e-12)


def test_monthly_cycle_of_years_is_the_interannual_mean_and_spread():
    # three complete years of daily P - E = 2 + month/10 + (year - 2002) mm/day: each month's
    # mean is 2 + month/10 and its spread between years is the sample standard deviation of
    # (-1, 0, 1), which is 1 (ddof = 1); computed by hand, no library
    import pandas as pd
    import xarray as xr

    from app.report import FigureData

    times = pd.date_range("2001-01-01", "2003-12-31 18:00", freq="6h")
    mm_day = 2.0 + times.month / 10.0 + (times.year - 2002)
    ds = xr.Dataset({"p_minus_e": ("time", np.asarray(mm_day, float) / 86400.0, {"units": "kg m-2 s-1"})},
                    coords={"time": times.values},
                    attrs={"region_area_m2": 1.0e10, "region_name": "invented test box"})
    cyc, spread = report.monthly_cycle(FigureData(budget=ds, region=None), "p_minus_e")
    assert "between years" in spread
    assert list(cyc["month"]) == list(range(1, 13))
    assert list(cyc["years"]) == [3] * 12
    assert np.allclose(cyc["mean"], 2.0 + np.arange(1, 13) / 10.0, rtol=1e-6)
    assert np.allclose(cyc["high"] - cyc["mean"], 1.0, rtol=1e-6)


def test_projection_choice():
    import cartopy.crs as ccrs

    mid = choose_frame(5.0, 40.0, 15.0, 52.0)
    assert isinstance(mid.projection(), ccrs.AlbersEqualArea)
    # standard parallels one sixth in from each end of the latitude range (Snyder 1987, USGS PP
    # 1395, rule for conics; page from memory)
    assert mid.parallels == pytest.approx((42.0, 50.0))
    assert isinstance(choose_frame(-60.0, 72.0, 40.0, 85.0).projection(), ccrs.NorthPolarStereo)
    assert isinstance(choose_frame(-60.0, -88.0, 40.0, -72.0).projection(), ccrs.SouthPolarStereo)
    assert isinstance(choose_frame(-180.0, -90.0, 180.0, 90.0).projection(), ccrs.Robinson)
    assert isinstance(choose_frame(10.0, -5.0, 30.0, 8.0).projection(), ccrs.LambertAzimuthalEqualArea)
    across = choose_frame(170.0, 40.0, 200.0, 55.0)  # continuous longitudes across the antimeridian
    assert across.central_lon == pytest.approx(185.0)


def test_cartopy_reads_the_shipped_files_in_its_own_layout():
    # cartopy's Natural Earth lookup (pre_existing_data_dir/shapefiles/natural_earth/...) finds
    # the shipped files; with the network guard on, a download attempt would fail this test
    import cartopy
    import cartopy.io.shapereader as shpreader

    from app.report.cartography import configure_cartopy

    configure_cartopy()
    assert cartopy.config["pre_existing_data_dir"] == CARTOGRAPHY_DIR
    for category, name in (("physical", "coastline"), ("cultural", "admin_0_boundary_lines_land")):
        for scale in ("110m", "50m"):
            path = shpreader.natural_earth(resolution=scale, category=category, name=name)
            assert str(path).startswith(str(CARTOGRAPHY_DIR))


def test_dashboard_coastline_and_shapefile_share_one_source():
    # every vertex of the dashboard's GeoJSON coastline is a vertex of the shipped 1:110m shapefile
    geo = json.loads((CARTOGRAPHY_DIR.parent / "coastline_110m.geojson").read_text(encoding="utf-8"))
    geo_points = {tuple(p) for line in geo["features"][0]["geometry"]["coordinates"] for p in line}
    shp_points = {(round(x, 3), round(y, 3)) for line in shipped_lines("110m", "coastline") for x, y in line.coords}
    assert len(geo_points) > 4000
    assert geo_points == shp_points
    assert shapefile_path("50m", "borders").exists()
    assert len(shipped_lines("50m", "borders")) > len(shipped_lines("110m", "borders")) > 100


@pytest.mark.parametrize("bbox, kind", [
    ((170.0, 60.0, -170.0, 80.0), "north-polar"),  # across the antimeridian, near the pole
    ((-60.0, -82.0, 40.0, -72.0), "south-polar"),
    ((150.0, -10.0, -160.0, 12.0), "azimuthal"),  # across the antimeridian and the equator
])
def test_region_only_maps_in_any_frame_draw_the_outline(bbox, kind):
    # a map with no fields still draws the region and the shipped coastlines, offline
    import pandas as pd
    import xarray as xr

    from app.report import FigureData
    from app.report.mapview import frame_for
    from budget.region import region_from_bbox

    region = region_from_bbox(*bbox, name="invented test box")
    budget = xr.Dataset(coords={"time": pd.date_range("2030-01-01", periods=2, freq="6h").values},
                        attrs={"region_area_m2": region.area_m2(), "region_name": "invented test box"})
    data = FigureData(budget=budget, region=region, source="none", invented=True)
    assert frame_for(data).kind == kind
    fig = report.render("map", data, report.get_style("paper"))
    image = report.to_bytes(fig, "png", dpi=80)
    import io

    pixels = mpimg.imread(io.BytesIO(image))
    assert _near(pixels, _rgb(OUTLINE)).sum() > 100
