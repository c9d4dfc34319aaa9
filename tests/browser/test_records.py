"""The long-record card in headless Chromium, on the bundled invented sample event: the period
selector, the period table with its flags, the climatology note, the gauge upload and the
overlay of several regions.  Drawn values are read from the page and checked against pandas
(resample of the engine's per-step series) and against plain unit arithmetic.

Every test (through the app_page fixture) also checks that the page logged no console error
and made no request beyond 127.0.0.1, and saves a screenshot.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tests.browser.conftest import own_dashboard, graph_traces, wait_for_series

pytestmark = pytest.mark.browser

BASIN = "Sample basin"


@pytest.fixture(scope="module")
def basin_budget():
    """The sample basin's budget computed by the engine in the test process."""
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import load_region
    from sample_fields import ensure_sample

    sample = ensure_sample()
    return compute(open_fields([str(sample.levels)]), load_region(path=sample.basin))


def _rows(page, table: str) -> list[list[str]]:
    return page.evaluate(
        """(sel) => Array.from(document.querySelectorAll(sel + ' tbody tr')).map(
               tr => Array.from(tr.querySelectorAll('td')).map(td => td.textContent))""",
        table)


def _num(text: str) -> float:
    return float(text.replace(",", ""))


def _choose_period(page, label: str):
    page.locator("#records-period label").filter(has_text=label).first.click()


def test_period_selector_switches_series_and_table(app_page, basin_budget):
    page = app_page
    page.locator("#records-card").scroll_into_view_if_needed()
    page.wait_for_function("document.querySelectorAll('#records-table tbody tr').length == 1")
    event = _rows(page, "#records-table")
    assert event[0][0] == "record"
    # reference: pandas resample of the engine's per-step P − E (6-hourly steps, each holding
    # for its 6 hours: a complete day's mean is the mean of its four values)
    pme = pd.Series(basin_budget["p_minus_e"].values * 86400.0,
                    index=pd.DatetimeIndex(basin_budget["time"].values))
    daily = pme.resample("D").mean()
    steps = pme.resample("D").count()

    _choose_period(page, "day")
    page.wait_for_function("document.querySelectorAll('#records-table tbody tr').length == 6")
    rows = _rows(page, "#records-table")
    head = page.evaluate("""() => Array.from(document.querySelectorAll('#records-table th'))
                            .map(th => th.textContent)""")
    assert "P − E mean (mm/day)" in head and "P − E total (mm)" in head  # units in headers
    assert "P − E mean (m³/s)" in head
    mean_col = head.index("P − E mean (mm/day)")
    for row, (day, value) in zip(rows, daily.items()):
        assert row[0] == day.strftime("%Y-%m-%d")
        assert int(row[3]) == steps[day]
        if steps[day] == 4:
            assert _num(row[mean_col]) == pytest.approx(value, rel=1e-3)
    # the last day holds one step (6 h of 24): flagged, its mean left empty
    last = page.locator("#records-table tbody tr").nth(5)
    assert "flagged" in (last.get_attribute("class") or "")
    assert "low coverage" in rows[5][4] and rows[5][mean_col] == "—"
    # the series switched to bars of the same daily means, named for the region
    page.wait_for_function(
        """() => { const gd = document.querySelector('#records-series .js-plotly-plot');
                   return gd && gd.data && gd.data[0].type === 'bar'; }""")
    bars = graph_traces(page, "records-series")[0]
    np.testing.assert_allclose(np.asarray(bars["y"][:5], float), daily.values[:5], rtol=1e-9)
    title = page.evaluate("() => document.querySelector('#records-series .gtitle').textContent")
    assert "by day" in title and BASIN in title and "mm/day" in title
    # the plausibility counts sit in the footer of both period tables (the sample has none)
    for table in ("#records-table", "#budget-table table.totals"):
        foot = page.locator(f"{table} tfoot").first.inner_text()
        assert foot == "Values flagged by the plausibility checks and accepted (whole record): none"

    _choose_period(page, "month")
    page.wait_for_function(
        "(document.querySelector('#records-table tbody tr td') || {}).textContent === '2025-01'")
    month = _rows(page, "#records-table")
    assert len(month) == 1 and "low coverage" in month[0][4]  # 5¼ days of January


def test_climatology_says_the_record_is_too_short(app_page):
    page = app_page
    page.locator("#records-climatology").scroll_into_view_if_needed()
    page.wait_for_function(
        "document.querySelector('#records-climatology-note').textContent.includes('several years')")
    drawn = page.evaluate("""() => {
        const gd = document.querySelector('#records-climatology .js-plotly-plot');
        return {bars: gd.data.filter(t => t.type === 'bar').length,
                text: Array.from(gd.querySelectorAll('.annotation-text')).map(a => a.textContent).join(' ')};
    }""")
    # five days hold no complete month: no bars pretending to be a mean cycle, the note instead
    assert drawn["bars"] == 0
    assert "several years" in drawn["text"] and BASIN in drawn["text"]


def _gauge_csv(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def test_gauge_upload_refuses_bad_files_and_draws_both_series_in_m3_s(app_page, basin_budget,
                                                                      tmp_path):
    page = app_page
    page.locator("#gauge-upload").scroll_into_view_if_needed()
    upload = "#gauge-upload input[type=file]"
    # invented gauge records (not real rivers)
    page.set_input_files(upload, _gauge_csv(tmp_path, "negative.csv",
                                            "date,flow\n2025-01-15,10\n2025-01-16,-3\n"))
    page.wait_for_function(
        "document.querySelector('#gauge-message').textContent.includes('negative discharge')")
    message = page.locator("#gauge-message").inner_text()
    assert "Row 3" in message and "negative.csv" in message and "Traceback" not in message

    page.set_input_files(upload, _gauge_csv(tmp_path, "baddate.csv",
                                            "date,flow\n2025-01-15,10\n2025-13-40,3\n"))
    page.wait_for_function(
        "document.querySelector('#gauge-message').textContent.includes('not a date')")

    page.set_input_files(upload, _gauge_csv(tmp_path, "elsewhen.csv",
                                            "date,flow\n1990-01-15,10\n1990-01-16,3\n"))
    page.wait_for_function(
        "document.querySelector('#gauge-message').textContent.includes('does not overlap')")

    days = pd.date_range("2025-01-14", "2025-01-22", freq="D")
    lines = ["time,upper_gauge,lower_gauge"] + [f"{d:%Y-%m-%d},{100 + k},{2000 + 10 * k}"
                                                 for k, d in enumerate(days)]
    page.set_input_files(upload, _gauge_csv(tmp_path, "two_gauges.csv", "\n".join(lines)))
    page.wait_for_selector("#gauge-column-row", state="visible")
    page.wait_for_function(
        """() => { const gd = document.querySelector('#discharge-graph .js-plotly-plot');
                   return gd && gd.data && gd.data.length >= 2; }""")
    traces = {t["name"]: t for t in graph_traces(page, "discharge-graph")}
    # reference: m³/s = kg m-2 s-1 × area / 1000 kg m-3 (DESIGN.md's conversion, by hand)
    area = float(basin_budget.attrs["region_area_m2"])
    np.testing.assert_allclose(traces["P − E over the region"]["y"],
                               basin_budget["p_minus_e"].values * area / 1000.0, rtol=1e-9)
    inside = [100 + k for k, d in enumerate(days)
              if pd.Timestamp("2025-01-15") <= d <= pd.Timestamp("2025-01-20")]
    np.testing.assert_allclose(traces["discharge (upper_gauge)"]["y"], inside)
    axis = page.evaluate("() => document.querySelector('#discharge-graph .ytitle').textContent")
    assert "m³/s" in axis
    summary = page.locator("#discharge-summary").inner_text()
    assert BASIN in summary and "No water year is complete" in summary

    page.locator("#gauge-column label").filter(has_text="lower_gauge").click()
    page.wait_for_function(
        """() => { const gd = document.querySelector('#discharge-graph .js-plotly-plot');
                   return gd && gd.data && gd.data.some(t => t.name === 'discharge (lower_gauge)'); }""")
    traces = {t["name"]: t for t in graph_traces(page, "discharge-graph")}
    assert traces["discharge (lower_gauge)"]["y"][0] == 2010.0  # 2025-01-15, the second row


def test_ticked_regions_overlay_each_under_its_own_name(app_page, basin_budget):
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox
    from sample_fields import ensure_sample

    page = app_page
    if not page.is_visible("#box-west"):
        page.click("#adder-box summary")
    for field, value in (("west", 0), ("south", 40), ("east", 8), ("north", 46)):
        page.fill(f"#box-{field}", str(value))
    page.click("#box-add")
    wait_for_series(page, "Typed box")
    box_name = page.evaluate(
        "() => Array.from(document.querySelectorAll('#overlay-regions label')).map(l => l.textContent)")
    box_name = [n for n in box_name if n.startswith("Typed box")][0]
    page.locator("#overlay-regions").scroll_into_view_if_needed()
    for label in page.locator("#overlay-regions label").all():
        label.click()
    page.wait_for_function(
        """() => { const gd = document.querySelector('#overlay-graph .js-plotly-plot');
                   return gd && gd.data && gd.data.length == 2; }""", timeout=60_000)
    traces = {t["name"]: t for t in graph_traces(page, "overlay-graph")}
    box = compute(open_fields([str(ensure_sample().levels)]), region_from_bbox(0, 40, 8, 46))
    basin_name = [n for n in traces if n.startswith(BASIN)][0]
    # each region's own engine numbers under its own name (mm/day = kg m-2 s-1 × 86400)
    np.testing.assert_allclose(traces[basin_name]["y"], basin_budget["p_minus_e"].values * 86400,
                               rtol=1e-9)
    np.testing.assert_allclose(traces[box_name]["y"], box["p_minus_e"].values * 86400, rtol=1e-9)
    colours = page.evaluate("""() => document.querySelector('#overlay-graph .js-plotly-plot')
                               ._fullData.map(t => t.line.color)""")
    assert len(set(colours)) == 2
    legend = page.evaluate("""() => Array.from(document.querySelectorAll(
                              '#overlay-graph .legendtext')).map(t => t.textContent)""")
    assert sorted(legend) == sorted(traces)


# ---------------------------------------------------------------------------------------------
# a three-year invented record, served by a dashboard in its own process (Dash's callbacks
# and the server's state are per process, so the sample dashboard above is left alone)
# ---------------------------------------------------------------------------------------------

LONG_BOX = (5, 35, 15, 45)  # W, S, E, N inside the invented grid


def three_year_fields(path):
    """Invented column fields (not weather): the analytic flux of budget.testing on a 1° grid,
    its divergent part scaled daily by an annual cycle whose level rises each water year, so
    the box's P − E has a known annual cycle; W is constant, so dW/dt is zero."""
    import xarray as xr

    from budget import testing

    times = pd.date_range("2021-10-01", "2024-09-30", freq="D")
    lon, lat = np.arange(0.0, 20.5, 1.0), np.arange(30.0, 50.5, 1.0)
    qu_d, qv_d, qu_r, qv_r = testing.flux_parts(*np.meshgrid(lon, lat))
    wy = times.year + (times.month >= 10) - 2022  # 0, 1, 2 for the three water years
    g = 1.0 + 0.5 * np.sin(2 * np.pi * times.day_of_year.to_numpy() / 365.0) + 0.2 * wy
    g = g.to_numpy()[:, None, None]
    std = "atmosphere_water_vapor_transport_across_unit_distance"
    ds = xr.Dataset(
        {"qu": (("time", "lat", "lon"), g * qu_d + qu_r, {"units": "kg m-1 s-1",
                                                          "standard_name": "eastward_" + std}),
         "qv": (("time", "lat", "lon"), g * qv_d + qv_r, {"units": "kg m-1 s-1",
                                                          "standard_name": "northward_" + std}),
         "w": (("time", "lat", "lon"), np.full((times.size, lat.size, lon.size), 20.0),
               {"units": "kg m-2", "standard_name": "atmosphere_mass_content_of_water_vapor"})},
        coords={"time": times.values,
                "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
                "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"})},
        attrs={"title": "Invented three-year column fields for Fluxfence tests (not weather)"},
    )
    ds.to_netcdf(path)
    return path


@pytest.fixture(scope="module")
def long_record(tmp_path_factory):
    folder = tmp_path_factory.mktemp("long-record")
    fields = three_year_fields(folder / "invented_three_years.nc")
    with own_dashboard(folder / "cache", paths=[fields]) as url:
        yield {"url": url, "fields": fields}


@pytest.fixture(scope="module")
def long_budget(long_record):
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    return compute(open_fields([str(long_record["fields"])]), region_from_bbox(*LONG_BOX))


@pytest.fixture
def long_page(page, long_record, shots_dir, request):
    from tests.browser.conftest import Watch

    watch = Watch(page, long_record["url"])
    page.goto(long_record["url"] + "/")
    page.wait_for_selector("#map .heatmaplayer image, #map .hm image", timeout=90_000)
    page.click("#adder-box summary")
    west, south, east, north = LONG_BOX
    for field, value in (("west", west), ("south", south), ("east", east), ("north", north)):
        page.fill(f"#box-{field}", str(value))
    page.click("#box-add")
    wait_for_series(page, "Typed box", timeout=120_000)
    yield page
    page.screenshot(path=str(shots_dir / f"{request.node.name}.png"), full_page=True)
    assert not watch.errors, f"console errors: {watch.errors}"
    assert not watch.outside(), f"requests left 127.0.0.1: {watch.outside()}"


def test_climatology_of_three_years_matches_pandas_and_its_note_stays_clear(long_page,
                                                                           long_budget):
    page = long_page
    page.locator("#records-climatology").scroll_into_view_if_needed()
    page.wait_for_function(
        """() => { const gd = document.querySelector('#records-climatology .js-plotly-plot');
                   return gd && gd.data && gd.data.some(t => t.type === 'bar'); }""",
        timeout=60_000)
    bars = graph_traces(page, "records-climatology")[0]
    # reference: pandas — monthly means of the engine's daily P − E (daily steps each hold for
    # a day), then mean and standard deviation (ddof=1) over the years of each calendar month
    pme = pd.Series(long_budget["p_minus_e"].values * 86400.0,
                    index=pd.DatetimeIndex(long_budget["time"].values))
    monthly = pme.resample("MS").mean()
    by_month = monthly.groupby(monthly.index.month)
    np.testing.assert_allclose(bars["y"], by_month.mean().values, rtol=1e-9)
    err = page.evaluate("""() => Array.from(document.querySelector(
        '#records-climatology .js-plotly-plot')._fullData[0].error_y.array)""")
    np.testing.assert_allclose(err, by_month.std().values, rtol=1e-9)
    note = page.locator("#records-climatology-note").inner_text()
    assert "3 years" in note and "Water years" in note
    boxes = page.evaluate("""() => {
        const gd = document.querySelector('#records-climatology .js-plotly-plot');
        const title = gd.querySelector('.gtitle').getBoundingClientRect();
        const marks = Array.from(gd.querySelectorAll('.bars .point path, .bars .point text, .errorbar path'));
        return {title_bottom: title.bottom, text: gd.querySelector('.gtitle').textContent,
                top_mark: Math.min(...marks.map(m => m.getBoundingClientRect().top))};
    }""")
    assert "3 years" in boxes["text"]
    assert boxes["title_bottom"] <= boxes["top_mark"]  # the note never covers a bar


def test_water_years_and_the_river_ratio_known_by_construction(long_page, long_budget, tmp_path):
    page = long_page
    page.locator("#records-period label").filter(has_text="water year").first.click()
    page.wait_for_function(
        "(document.querySelector('#records-table tbody tr td') || {}).textContent === 'WY2022'",
        timeout=60_000)
    rows = _rows(page, "#records-table")
    assert [r[0] for r in rows] == ["WY2022", "WY2023", "WY2024"]
    assert not page.locator("#records-table tr.flagged").count()
    pme = pd.Series(long_budget["p_minus_e"].values * 86400.0,
                    index=pd.DatetimeIndex(long_budget["time"].values))
    ref = pme.resample("YS-OCT").mean()  # pandas: years starting 1 October
    head = page.evaluate("""() => Array.from(document.querySelectorAll('#records-table th'))
                            .map(th => th.textContent)""")
    col = head.index("P − E mean (mm/day)")
    np.testing.assert_allclose([_num(r[col]) for r in rows], ref.values, rtol=1e-3)

    # an invented gauge carrying exactly half of the box's P − E (m³/s by hand: mm/day / 1000
    # × area / 86400): the long-term ratio is 0.5 by construction
    area = float(long_budget.attrs["region_area_m2"])
    flow = pme / 1000.0 * area / 86400.0 * 0.5
    lines = ["date,flow_m3_s"] + [f"{t:%Y-%m-%d},{v!r}" for t, v in flow.items()]
    path = tmp_path / "invented_gauge.csv"
    path.write_text("\n".join(lines))
    page.locator("#gauge-upload").scroll_into_view_if_needed()
    page.set_input_files("#gauge-upload input[type=file]", str(path))
    page.wait_for_function(
        "document.querySelector('#discharge-summary').textContent.includes('ratio')",
        timeout=60_000)
    summary = page.locator("#discharge-summary").inner_text()
    assert "WY2022–WY2024 (3 water years)" in summary
    assert "ratio discharge / (P − E) 0.5;" in summary and "gauge missing 0 %" in summary
    table = _rows(page, "#discharge-table")
    assert table[-1][0] == "long-term (3 years)" and table[-1][4] == "0.5"
