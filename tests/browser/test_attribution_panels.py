"""The "Where the water comes from" card in headless Chromium on the invented sample event.

The page must show the engine's numbers for the selected region and period: each check
recomputes them here with budget.* (whose own checks against analytic fields and published
methods are in tests/test_attribution.py, test_events.py, test_eddies.py) and compares.
Every test (through the app_page fixture) also checks for console errors and requests beyond
127.0.0.1, and saves a screenshot.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.browser.conftest import graph_traces

pytestmark = pytest.mark.browser

LAYERS = "1000,850,700,500,300"


@pytest.fixture(scope="module")
def basin_budget():
    """The sample basin's budget with layers, as the engine computes it outside the page."""
    from budget.attribution import AttributionOptions
    from budget.fields import open_fields
    from budget.layers import parse_layers
    from budget.ledger import compute
    from budget.options import BudgetOptions
    from budget.region import load_region
    from sample_fields import ensure_sample

    sample = ensure_sample()
    fields = open_fields([str(sample.levels)])
    region = load_region(path=sample.basin)
    opts = BudgetOptions(attribution=AttributionOptions(layers=parse_layers(LAYERS)))
    return {"fields": fields, "region": region, "ds": compute(fields, region, options=opts)}


def _wait_traces(page, graph_id, names, timeout=90_000):
    page.wait_for_function(
        """([id, names]) => {
            const gd = document.querySelector('#' + id + ' .js-plotly-plot');
            return gd && gd.data && names.every(n => gd.data.some(t => t.name === n));
        }""", arg=[graph_id, names], timeout=timeout)


def test_layer_bars_appear_after_typing_bounds(app_page, basin_budget):
    page = app_page
    ds = basin_budget["ds"]
    layers = [str(x) for x in ds["layer"].values]
    page.fill("#insight-layers", LAYERS)
    page.press("#insight-layers", "Enter")
    _wait_traces(page, "insight-layers-graph", layers)
    traces = {t["name"]: t for t in graph_traces(page, "insight-layers-graph")}
    # the bars are the engine's period-mean layer imports per edge (whole record selected)
    mean = ds["layer_edge_import"].mean("time")
    for name in layers:
        np.testing.assert_allclose(traces[name]["y"], mean.sel(layer=name).values, rtol=1e-9)
    # layers tile the column: all bars add up to the column import with the files' winds
    # (layers carry no mass correction, budget/attribution.py), by the divergence theorem
    # over the same boundary pieces
    stacked = np.sum([traces[n]["y"] for n in layers])
    np.testing.assert_allclose(stacked, float(ds["vapour_import_uncorrected"].mean("time")),
                               rtol=1e-6)
    assert "Sample basin" in page.inner_text("#insight-title")
    title = page.evaluate("document.querySelector('#insight-layers-graph .js-plotly-plot').layout.title.text")
    assert "Sample basin" in title
    # the AR share of the whole record: Σ ar_inflow Δt / Σ inflow Δt (budget.attribution.ar_share)
    from budget.attribution import ar_share
    from budget.events import step_seconds

    share = 100 * ar_share(ds, step_seconds(ds["time"].values))
    assert f"{share:.1f} %" in page.inner_text("#insight-ar-table")
    assert "Sample basin" in page.inner_text("#insight-ar-title")
    # the sample carries no evaporation or precipitation: the panel says what is missing
    assert "needs evaporation" in page.inner_text("#insight-recycling")
    assert "well-mixed column" in page.inner_text("#insight-recycling-help")


def test_event_table_and_a_click_sets_the_period(app_page, basin_budget):
    from budget.events import find_events

    page = app_page
    events = find_events(basin_budget["ds"])  # default rule: 95th percentile, 24 h joins
    assert len(events) >= 1
    page.wait_for_selector("#insight-events td[data-dash-column='start']", timeout=90_000)
    starts = page.locator("#insight-events td[data-dash-column='start']").all_inner_texts()
    assert starts == list(events["start"])
    assert "Sample basin" in page.inner_text("#insight-events-title")
    # click the first event: the period becomes its steps
    page.locator("#insight-events td[data-dash-column='start']").first.click()
    times = basin_budget["ds"]["time"].values
    start = np.datetime64(events["start"].iloc[0].rstrip("Z"))
    first = int(np.searchsorted(times, start))
    import pandas as pd

    want = pd.Timestamp(times[first]).strftime("%Y-%m-%d %H:%M UTC")
    page.wait_for_function(
        "(t) => document.querySelector('#period-label').textContent.startsWith(t)",
        arg=want, timeout=30_000)
    # and the time slider moves to the event's first step (the map follows)
    page.wait_for_function(
        "(t) => document.querySelector('#time-label').textContent.startsWith(t)",
        arg=want, timeout=60_000)


def test_eddy_panel_with_its_sampling_note(app_page, basin_budget):
    from budget.eddies import decompose

    page = app_page
    _wait_traces(page, "insight-eddy-graph", ["mean flow", "transient eddies"])
    traces = {t["name"]: t for t in graph_traces(page, "insight-eddy-graph")}
    split = decompose(basin_budget["fields"], basin_budget["region"])  # the whole record
    np.testing.assert_allclose(traces["mean flow"]["y"][-1],
                               float(split["vapour_import"].sel(part="mean_flow")), rtol=1e-9)
    np.testing.assert_allclose(traces["transient eddies"]["y"][:-1],
                               split["edge_import"].sel(part="transient_eddy").values, rtol=1e-9)
    note = page.inner_text("#insight-eddy-note")
    assert "sampling interval" in note and "Seager and Henderson 2013" in note
    title = page.evaluate("document.querySelector('#insight-eddy-graph .js-plotly-plot').layout.title.text")
    assert "Sample basin" in title


def test_event_catalogue_download_matches_the_table(app_page, basin_budget):
    import pandas as pd

    from budget.events import find_events

    page = app_page
    page.wait_for_selector("#insight-events td[data-dash-column='start']", timeout=90_000)
    page.wait_for_function("!document.querySelector('#insight-dl-events').disabled", timeout=30_000)
    assert "Sample basin" in page.inner_text("#insight-dl-events-reason")
    with page.expect_download() as info:
        page.click("#insight-dl-events")
    download = info.value
    assert download.suggested_filename == "sample_basin_invented_events.csv"  # the region's name
    df = pd.read_csv(download.path())
    # the columns of the command line's --events file (budget.events.find_events)
    assert list(df.columns) == list(find_events(basin_budget["ds"]).columns)
    # one row per table row, the same events in the same order
    starts = page.locator("#insight-events td[data-dash-column='start']").all_inner_texts()
    totals = page.locator("#insight-events td[data-dash-column='total_p_minus_e_mm']").all_inner_texts()
    assert list(df["start"]) == starts
    np.testing.assert_allclose(df["total_p_minus_e_mm"].round(2), [float(x) for x in totals], atol=1e-9)


def test_datasets_overlay_one_trace_per_field_set(app_page):
    # Reference: the engine's budget of the basin on each field set, computed outside the page
    # (budget.ledger.compute on each file, on the time stamps both share).
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import load_region
    from sample_fields import ensure_sample

    page = app_page
    sample = ensure_sample()
    labels = {"Invented demo event — on pressure levels": sample.levels,
              "Invented demo event — column totals": sample.column}
    page.locator("#insight-datasets").scroll_into_view_if_needed()
    for label in labels:
        page.click("#insight-datasets")
        page.get_by_role("option", name=label).click()
        page.keyboard.press("Escape")
    _wait_traces(page, "insight-datasets-graph", list(labels))
    traces = {t["name"]: t for t in graph_traces(page, "insight-datasets-graph")}
    assert set(traces) == {"spread (range)", *labels}  # the legend names each dataset
    region = load_region(path=sample.basin)
    for label, path in labels.items():
        ds = compute(open_fields([str(path)]), region)
        np.testing.assert_allclose(traces[label]["y"], ds["p_minus_e"].values * 86400.0, rtol=1e-6)
    band = np.asarray(traces["spread (range)"]["y"], float)
    ys = np.array([traces[label]["y"] for label in labels], float)
    n = ys.shape[1]
    np.testing.assert_allclose(band[:n], ys.max(axis=0))
    np.testing.assert_allclose(band[n:][::-1], ys.min(axis=0))
    assert "Sample basin" in page.inner_text("#insight-datasets-title")
    assert "mm/day" in page.evaluate(
        "document.querySelector('#insight-datasets-graph .js-plotly-plot').layout.yaxis.title.text")
