"""The budget panels in headless Chromium: never a stale number, Cancel, downloads while a
budget computes, the full edge table, the budget selector.

Every test (through the app_page fixture) also checks that the page logged no console error
and made no request beyond 127.0.0.1, and saves a screenshot.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from tests.browser.conftest import graph_traces, type_box, wait_for_series

pytestmark = pytest.mark.browser

PANEL_LOG = """() => {
    window.__panels = [];
    const title = (id) => {
        const gd = document.querySelector('#' + id + ' .js-plotly-plot');
        const t = gd && gd.layout && gd.layout.title;
        return (t && (t.text || t)) || '';
    };
    const pme = () => {
        const gd = document.querySelector('#series .js-plotly-plot');
        const t = gd && gd._fullData && gd._fullData.find(t => t.name === 'P − E');
        return t ? Array.from(t.y).slice(0, 3) : null;
    };
    window.__panelTimer = setInterval(() => {
        const cap = document.querySelector('#budget-table caption');
        window.__panels.push({t: performance.now(), series: String(title('series')),
            profile: String(title('profile')), curtain: String(title('curtain')),
            table: cap ? cap.textContent : '',
            message: document.querySelector('#budget-message').textContent,
            pme: pme()});
    }, 15);
}"""


_type_box = type_box


def _engine(sample, bbox, **kw):
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import region_from_bbox

    return compute(open_fields([str(sample.levels)]), region_from_bbox(*bbox), **kw)


@pytest.fixture(scope="module")
def sample():
    from sample_fields import ensure_sample

    return ensure_sample()


def test_no_panel_shows_the_old_region_once_the_new_one_is_chosen(app_page, sample):
    page = app_page
    old = "Sample basin"
    new = "Typed box 1"
    expected = _engine(sample, (-2, 39, 7, 47))["p_minus_e"].values * 86400  # mm/day
    page.evaluate(PANEL_LOG)
    _type_box(page, -2, 39, 7, 47)
    wait_for_series(page, new)
    page.wait_for_timeout(300)
    log = page.evaluate("() => { clearInterval(window.__panelTimer); return window.__panels; }")
    assert log, "the panel log is empty"
    # 1. no sample claims the new region's name with other numbers
    for entry in log:
        if new in entry["series"] and entry["pme"]:
            np.testing.assert_allclose(entry["pme"], expected[:3], rtol=1e-9)
    # 2. once the new series is there, no panel, table or message names the old region
    first = next(i for i, e in enumerate(log) if new in e["series"] and e["pme"])
    for entry in log[first:]:
        for panel in ("series", "profile", "curtain", "table", "message"):
            assert old not in entry[panel], (panel, entry)
    final = log[-1]
    for panel in ("series", "profile", "curtain", "table"):
        assert new in final[panel], (panel, final)
    # the profile and curtain name the time they show
    assert "UTC" in final["profile"] and "UTC" in final["curtain"]


@pytest.fixture
def paced_engine(monkeypatch):
    """The engine as usual, but each job first reports 30 steps 0.25 s apart, so that a
    person (or this test) can act while it runs; Cancel stops it at the next step."""
    import budget.ledger

    real = budget.ledger.compute

    def paced(*args, progress=None, **kw):
        # the dashboard passes its progress callback in RunOptions (budget.options)
        report = progress if progress is not None else getattr(kw.get("run"), "progress", None)
        for k in range(30):
            if report is not None:
                report(k, 30)
            time.sleep(0.25)
        if progress is not None:
            kw["progress"] = progress
        return real(*args, **kw)

    monkeypatch.setattr(budget.ledger, "compute", paced)
    return real


def test_cancel_and_downloads_while_a_budget_computes(app_page, sample, paced_engine,
                                                     monkeypatch):
    page = app_page
    name = "Typed box 1"
    _type_box(page, 0, 40, 6, 45)
    page.wait_for_selector("#budget-running", state="visible", timeout=15_000)
    # the progress bar counts real steps of this region's job
    page.wait_for_function(
        "document.querySelector('#budget-progress-text').textContent.includes('of 30')",
        timeout=15_000)
    text = page.inner_text("#budget-progress-text")
    assert text.startswith(name)
    # every panel says it is computing, for this region; nothing of the basin is left
    series_title = page.evaluate(
        "() => document.querySelector('#series .js-plotly-plot').layout.annotations[0].text")
    assert f"Computing the budget of {name}" in series_title
    assert "Sample basin" not in page.inner_text("#budget-card")
    # downloads are visibly disabled, with the reason
    assert page.is_disabled("#dl-csv") and page.is_disabled("#dl-nc")
    assert f"Downloads wait for the budget of {name}" in page.inner_text("#dl-reason")

    page.click("#budget-cancel")
    page.wait_for_selector("#budget-again", state="visible", timeout=10_000)
    assert page.is_hidden("#budget-running")
    assert f"Cancelled: the budget of {name} was not computed" in page.inner_text(
        "#budget-message")
    from app import state

    # the paced job (30 steps) stopped part-way (earlier tests may have their own "Typed box 1")
    paced = [j for j in state.current().jobs._jobs.values() if j.label == name and j.total == 30]
    assert len(paced) == 1 and paced[0].status == "cancelled" and paced[0].done < 30

    # started again (the engine at its normal pace) it computes and the downloads open
    import budget.ledger

    monkeypatch.setattr(budget.ledger, "compute", paced_engine)
    page.click("#budget-again")
    wait_for_series(page, name)
    page.wait_for_function("!document.querySelector('#dl-csv').disabled", timeout=10_000)
    with page.expect_download() as info:
        page.click("#dl-csv")
    assert info.value.suggested_filename == "typed_box_1_boundary.csv"


def test_the_edge_table_lists_every_edge_and_the_map_numbers_them(app_page, sample):
    from budget.region import load_region

    page = app_page
    edges = load_region(path=sample.basin).edge_names
    assert len(edges) == 15
    page.wait_for_selector("#budget-table .edge-scroll table")
    rows = page.locator("#budget-table .edge-scroll tbody tr")
    assert rows.count() == len(edges)
    assert [rows.nth(i).locator("td").first.inner_text() for i in range(len(edges))] == edges
    # the list scrolls inside the card and its last edge can be scrolled to
    box = page.evaluate("""() => { const d = document.querySelector('#budget-table .edge-scroll');
        return {scroll: d.scrollHeight, client: d.clientHeight}; }""")
    assert box["scroll"] > box["client"]
    rows.nth(len(edges) - 1).scroll_into_view_if_needed()
    assert rows.nth(len(edges) - 1).is_visible()
    # the map labels the same edges on the active region's outline
    labels = next(t for t in page.evaluate("""() => {
        const gd = document.querySelector('#map .js-plotly-plot');
        return gd._fullData.map(t => ({name: t.name, text: t.text ? Array.from(t.text) : []}));
    }""") if t["name"] == "edge numbers")
    assert labels["text"] == [str(i + 1) for i in range(15)]


def test_the_budget_selector_shows_the_dry_air_mass_budget(app_page, sample):
    import budget
    from budget.constants import STANDARD_GRAVITY

    page = app_page
    ds = budget.compute(budget.open_fields(sample.levels), budget.load_region(path=sample.basin))
    # the sample holds no cloud water: total water cannot be chosen
    assert page.is_disabled("#budget-kind input[value=total]")
    page.get_by_text("Dry-air mass", exact=True).click()
    page.wait_for_function(
        "document.querySelector('#series .js-plotly-plot').layout.title.text"
        ".includes('Dry-air mass budget')", timeout=15_000)
    resid = next(t for t in graph_traces(page, "series")
                 if t["name"] == "Dry-air residual")
    # a column-mass rate R (kg m-2 s-1) is the surface-pressure tendency R·g (hydrostatic
    # balance), standard gravity 9.80665 m s-2 (ISO 80000-3); in hPa/day × 86400 / 100
    assert STANDARD_GRAVITY == 9.80665
    np.testing.assert_allclose(resid["y"], ds["dry_air_residual"].values * 9.80665 * 864,
                               rtol=1e-9, atol=1e-12)
    table = page.inner_text("#budget-table")
    for term in ("Net dry-air import", "Dry-air import as surface-pressure change",
                 "Dry-air convergence", "Surface-pressure tendency", "Dry-air residual",
                 "Mass-correction speed (outward)"):
        assert term in table
    assert "kg/s" in table and "hPa/day" in table and "cm/s" in table
    assert "e+" not in table  # one number format: grouped digits, never an exponent
    assert "Sample basin" in page.inner_text("#budget-table caption")


def test_dry_air_mode_switches_edges_profile_curtain_and_rate_units(app_page, sample):
    import budget

    page = app_page
    ds = budget.compute(budget.open_fields(sample.levels), budget.load_region(path=sample.basin),
                        profiles=True)
    page.get_by_text("Dry-air mass", exact=True).click()
    page.wait_for_function(
        "document.querySelector('#series .js-plotly-plot').layout.title.text"
        ".includes('Dry-air mass budget')", timeout=15_000)
    # the rate units fit air: hPa/day or kg/s, never mm/day or m³/s of liquid water
    page.wait_for_function(
        "Array.from(document.querySelectorAll('#units input')).map(i => i.value).join() "
        "== 'hPa/day,kg/s'", timeout=10_000)
    assert page.is_checked("#units input[value='hPa/day']")
    # the profile and the curtain show dry air, named with the region and the time
    page.wait_for_function(
        "document.querySelector('#profile .js-plotly-plot').layout.title.text"
        ".includes('Dry air crossing the boundary')", timeout=10_000)
    line = next(t for t in graph_traces(page, "profile") if t["name"] == "import density")
    np.testing.assert_allclose(line["y"], ds["dry_air_import_density"].isel(time=0).values,
                               rtol=1e-9)
    curtain_title = page.evaluate(
        "() => document.querySelector('#curtain .js-plotly-plot').layout.title.text")
    assert "Inward dry air flux by height" in curtain_title and "Sample basin" in curtain_title
    # the edge table lists the dry-air import of each edge in the chosen unit (kg/s here);
    # the engine's per-edge means (budget.compute), shown with 4 significant digits
    page.click("#units input[value='kg/s']")
    page.wait_for_function(
        "document.querySelector('#series .js-plotly-plot').layout.title.text"
        ".includes('rates in kg/s')", timeout=10_000)
    from app.figures import number

    cells = page.locator("#budget-table .edge-scroll tbody tr td:nth-child(2)")
    means = ds["dry_air_edge_import"].mean("time").values
    assert [cells.nth(i).inner_text() for i in range(len(means))] == [
        f"{number(m)} kg/s" for m in means]
    # back to water vapour: the water units return, kg/s is kept
    page.get_by_text("Water vapour", exact=True).click()
    page.wait_for_function(
        "Array.from(document.querySelectorAll('#units input')).map(i => i.value).join() "
        "== 'mm/day,kg/s,m3/s'", timeout=10_000)
    assert page.is_checked("#units input[value='kg/s']")


GREY_LOG = """() => {
    window.__grey = [];
    const look = (el) => {  // the opacity the eye sees: the element's times its ancestors'
        let o = 1, f = [];
        for (let e = el; e && e !== document.body; e = e.parentElement) {
            const cs = getComputedStyle(e);
            o *= parseFloat(cs.opacity);
            if (cs.filter && cs.filter !== 'none') f.push(cs.filter);
        }
        return {opacity: o, filter: f.join(' '), cls: el.className,
                loading: !!el.closest('[data-dash-is-loading="true"]')};
    };
    const text = (id) => {
        const gd = document.querySelector('#' + id + ' .js-plotly-plot');
        const t = gd && gd.layout && gd.layout.title;
        const notes = gd && gd.layout && gd.layout.annotations || [];
        return String((t && (t.text || t)) || '') + ' ' + notes.map(a => a.text).join(' ');
    };
    window.__greyTimer = setInterval(() => {
        const row = {t: performance.now(),
                     computing: !!document.querySelector('#budget-running')
                         && getComputedStyle(document.querySelector('#budget-running')).display !== 'none'};
        for (const id of ['series', 'profile', 'curtain']) {
            row[id] = {...look(document.getElementById(id)), text: text(id)};
        }
        row.table = {...look(document.getElementById('budget-table')),
                     text: document.getElementById('budget-table').textContent};
        window.__grey.push(row);
    }, 20);
}"""
PANELS = ("series", "profile", "curtain", "table")


def test_panels_are_greyed_and_named_while_a_budget_computes(app_page, sample, paced_engine):
    """Dash 4: the computed style of every panel during a paced job (opacity, filter)."""
    page = app_page
    name = "Typed box 1"
    page.evaluate(GREY_LOG)
    _type_box(page, 1, 41, 5, 44)
    page.wait_for_function(
        "document.querySelector('#budget-progress-text').textContent.includes('of 30')",
        timeout=15_000)
    page.wait_for_timeout(400)  # past the 0.15 s fade
    log = page.evaluate("() => window.__grey")
    now = log[-1]
    assert now["computing"]
    for panel in PANELS:
        # greyed by CSS (class "computing" in assets/fluxfence.css) ...
        assert now[panel]["opacity"] < 0.5, (panel, now[panel])
        assert "grayscale" in now[panel]["filter"], (panel, now[panel])
        # ... and named with the region whose budget is on its way, nothing of the old one
        assert f"Computing the budget of {name}" in now[panel]["text"], (panel, now[panel])
        assert "Sample basin" not in now[panel]["text"], (panel, now[panel])
    # before that, while the request was in flight, Dash 4 marked the old panels as loading
    # (data-dash-is-loading) and the CSS greyed them, still under the old region's name
    in_flight = [r for r in log if not r["computing"] and any(r[p]["loading"] for p in PANELS)]
    assert in_flight, "no request in flight was seen"
    for r in in_flight[10:]:  # after the 0.15 s fade
        for panel in PANELS:
            if r[panel]["loading"]:
                assert r[panel]["opacity"] < 0.5, (panel, r[panel])
                assert name not in r[panel]["text"], (panel, r[panel])
    # no sample of the whole log shows the new region's name on a panel at full strength
    # before its numbers arrived (the fade itself lasts 0.15 s: 8 samples of 20 ms)
    for panel in PANELS:
        full = [r for r in log if name in r[panel]["text"] and r[panel]["opacity"] > 0.9]
        assert len(full) <= 8, (panel, full[:3])

    page.click("#budget-cancel")
    page.wait_for_selector("#budget-again", state="visible", timeout=10_000)
    page.wait_for_timeout(400)
    after = page.evaluate("() => { clearInterval(window.__greyTimer); return window.__grey; }")[-1]
    for panel in PANELS:  # no longer computing: no longer greyed
        assert after[panel]["opacity"] > 0.9 and "grayscale" not in after[panel]["filter"], (
            panel, after[panel])


def test_a_region_change_draws_the_map_once(app_page, sample):
    """Choosing a region clears the region message; that alone must not send the map again
    (140 KB and a redraw, on the path from a region change to its budget)."""
    page = app_page
    posts = []
    page.on("request", lambda r: posts.append(r.post_data or "")
            if r.url.split("?")[0].endswith("/_dash-update-component") else None)
    type_box(page, 2, 42, 7, 46)
    wait_for_series(page, "Typed box 1")
    page.wait_for_timeout(800)  # any late request has gone out
    maps = [p for p in posts if "..map.figure..." in p]
    assert len(maps) == 1, [p[:120] for p in maps]
    # the map shows the new region (its outline is on the active layer)
    names = page.evaluate("() => document.querySelector('#map .js-plotly-plot')._fullData"
                          ".map(t => t.name)")
    assert any("Typed box 1" in str(n) for n in names), names

    # choosing another region from the list: the map is sent once more and draws that region
    # as the chosen one (a second, later request for the same change would replace the first)
    posts.clear()
    page.click("#region-select")
    page.get_by_role("dialog").get_by_role("option", name="Sample basin (invented)").click()
    wait_for_series(page, "Sample basin (invented)")
    page.wait_for_timeout(800)
    assert len([p for p in posts if "..map.figure..." in p]) == 1
    chosen = page.evaluate("() => document.querySelector('#map .js-plotly-plot')._fullData"
                           ".filter(t => t.mode === 'lines+markers').map(t => t.name)")
    assert chosen == ["region: Sample basin (invented)"], chosen
