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

from tests.browser.conftest import graph_traces, wait_for_series

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
    # the plausibility counts sit in the table's footer (the sample has none flagged)
    foot = page.locator("#records-table tfoot").inner_text()
    assert "Values flagged by the plausibility checks" in foot

    _choose_period(page, "month")
    page.wait_for_function(
        "document.querySelector('#records-table tbody tr td').textContent === '2025-01'")
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
