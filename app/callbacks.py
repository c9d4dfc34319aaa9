"""Behaviour of the dashboard: the time axis, the map and the budget of the chosen region.

All computation goes through the engine (budget.*); this module moves data between the page
and the engine (through the server's state, app.state) and turns every user-facing problem
into one visible sentence.  Region editing lives in app.regions.

The budget: choosing a region (or a method, correction or field set) makes a request (the
``want`` store) and starts a job in the server's thread pool (app.jobs); ``show_budget`` waits
briefly for it, so a short job is drawn in the same round trip, and otherwise shows every panel
as "computing" with a progress bar of real steps and a Cancel button, polling until the job
ends (``poll_budget`` carries only the progress; when the job ends it tells
``show_budget`` to draw, once).  No panel ever shows another region's numbers under this
region's name: every title names the region it belongs to.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
from dash import Input, Output, State, callback, ctx, dcc, html, no_update
from dash.exceptions import PreventUpdate

from budget.errors import FluxfenceError

from . import figures
from .jobs import CANCELLED, DONE, FAILED
from .messages import iso, problem, slug
from .state import current

WAIT_SECONDS = 0.8  # how long a request waits for a short job before showing "computing"


def _trigger():
    """The id that fired this callback (None when called outside a request, as in tests)."""
    from dash.exceptions import MissingCallbackContextException

    try:
        return ctx.triggered_id
    except MissingCallbackContextException:
        return None

# ---------------------------------------------------------------------------------------------
# time: slider, play/pause
# ---------------------------------------------------------------------------------------------


def _marks(times, count=4):
    n = len(times)
    if n == 0:
        return {}
    idx = sorted(set(np.linspace(0, n - 1, min(count, n)).round().astype(int).tolist()))
    return {int(i): pd.Timestamp(times[i]).strftime("%-d %b %Hh") for i in idx}


@callback(
    Output("time", "max"),
    Output("time", "marks"),
    Output("period", "max"),
    Output("period", "marks"),
    Output("period", "value"),
    Output("map-message", "children"),
    Output("map-message", "className"),
    Input("source", "value"),
)
def setup_time(source_id):
    try:
        times = current().fields(source_id).ds["time"].values
    except Exception as exc:  # noqa: BLE001
        return 1, {}, 1, {}, [0, 1], problem(exc, "opening the fields"), "notice error"
    n = len(times)
    marks = _marks(times)
    return max(n - 1, 0), marks, max(n - 1, 0), marks, [0, max(n - 1, 0)], "", "notice"


@callback(
    Output("time", "value"),
    Input("player", "n_intervals"),
    Input("source", "value"),
    State("time", "value"),
    State("time", "max"),
    prevent_initial_call=True,
)
def advance_time(_tick, _source, value, vmax):
    if _trigger() == "source":
        return 0
    vmax = int(vmax or 0)
    return 0 if vmax <= 0 else (int(value or 0) + 1) % (vmax + 1)


@callback(
    Output("player", "disabled"),
    Output("play", "children"),
    Input("play", "n_clicks"),
    State("player", "disabled"),
    prevent_initial_call=True,
)
def play_pause(_n, disabled):
    return (False, "❚❚ Pause") if disabled else (True, "▶ Play")


# ---------------------------------------------------------------------------------------------
# the map
# ---------------------------------------------------------------------------------------------
def _color_range(state, source_id, field, snap, fields):
    """Colour limits that only widen as more steps are seen; on first sight of a field they
    come from up to 8 steps spread over the record (small grids), so the peak does not
    saturate the scale."""
    nt = fields.ds.sizes["time"]
    lo, hi = figures.color_limits(figures.field_values(snap, field), field)
    key = (str(source_id), field)
    seen = state.color_ranges.get(key)
    size = fields.ds["lat"].size * fields.ds["lon"].size * fields.ds.sizes.get("level", 1)
    if seen is None and size <= 2_000_000:
        for k in np.unique(np.linspace(0, nt - 1, min(nt, 8)).round().astype(int)):
            klo, khi = figures.color_limits(
                figures.field_values(state.snapshot(source_id, int(k)), field), field)
            lo, hi = min(lo, klo), max(hi, khi)
    if seen is not None:
        lo, hi = min(lo, seen[0]), max(hi, seen[1])
    state.color_ranges[key] = (lo, hi)
    return lo, hi


@callback(
    Output("map", "figure"),
    Output("time-label", "children"),
    Input("source", "value"),
    Input("map-field", "value"),
    Input("time", "value"),
    Input("map-arrows", "value"),
    Input("regions", "data"),
    Input("region-select", "value"),
    Input("vertices", "data"),
    Input("map-tool", "value"),
    Input("map-refused", "data"),  # a refused drawing is wiped off the map (app/regions.py)
)
def draw_map(source_id, field, time_index, arrows, regions, selected, vertices, tool, _refused):
    try:
        state = current()
        fields = state.fields(source_id)
        nt = fields.ds.sizes["time"]
        t = min(max(int(time_index or 0), 0), nt - 1)
        snap = state.snapshot(source_id, t)
        label = iso(fields.ds["time"].values[t])
        field = field or "ivt"
        fig = figures.map_figure(
            snap, field, coastline=state.coastline(),
            color_range=_color_range(state, source_id, field, snap, fields),
            regions=regions or [], active_region=selected, vertices=vertices or [],
            time_label=label, arrows=bool(arrows),
            dragmode="pan" if tool in ("pan", "click") else tool, uirevision=str(source_id),
        )
        return fig, f"{label}  ·  step {t + 1} of {nt}"
    except Exception as exc:  # noqa: BLE001
        return figures.empty_figure(problem(exc, "drawing the map")), ""


# ---------------------------------------------------------------------------------------------
# the budget: request → job (server threads) → panels
# ---------------------------------------------------------------------------------------------
def start_budget(state, want: dict, key: str, again: bool = False):
    """Start (or find) the job computing ``want``'s budget; public: the overlaid regions of
    app/callbacks_records.py and the field sets of app/callbacks_datasets.py start theirs here."""
    from budget.ledger import compute
    from budget.region import region_from_geojson

    from budget.options import RunOptions

    from .callbacks_attribution import job_options

    source, geojson, name = want["source"], want["geojson"], want["name"]
    method, correction = want["method"], want["correction"]
    attribution = want.get("attribution")

    def work(progress):
        fields = state.fields(source)
        options = job_options(method, correction, attribution, fields.kind)
        if fields.ds.sizes["time"] > state.settings.long_steps:  # a long record: the pool
            return state.pool().run(key, progress, state.checked_paths(source), geojson,
                                    name, options)
        region = region_from_geojson(geojson, name=name)
        ds = compute(fields, region, options=options,
                     run=RunOptions(scheduler="sync", progress=progress))
        return ds.load()

    return state.jobs.submit(key, name, work, lambda ds: state.results.put(key, ds),
                             lambda exc: problem(exc, "computing the budget"), again=again)


@callback(
    Output("want", "data"),
    Input("region-select", "value"),
    Input("method", "value"),
    Input("source", "value"),
    Input("regions", "data"),
    Input("correction", "value"),
    Input("budget-again", "n_clicks"),
    Input("insight-options", "data"),  # layers and AR threshold (app/callbacks_attribution.py)
)
def request_budget(selected, method, source_id, regions, correction, _again, attribution=None):
    """What the page wants to see, with the server's key for it; starts its job."""
    rec = next((r for r in regions or [] if r["id"] == selected), None)
    if rec is None:
        return None
    want = {"source": str(source_id), "method": method, "correction": correction,
            "region": rec["id"], "name": rec["name"], "geojson": rec["geojson"],
            "attribution": attribution}
    state = current()
    try:
        want["key"] = state.budget_key(source_id, rec["geojson"], method, correction,
                                       attribution)
    except FluxfenceError as exc:
        want["key"], want["problem"] = None, str(exc)
        return want
    if want["key"] not in state.results:
        start_budget(state, want, want["key"], again=_trigger() == "budget-again")
    return want


BUDGET_OUT = {
    "series": Output("series", "figure"),
    "profile": Output("profile", "figure"),
    "curtain": Output("curtain", "figure"),
    "table": Output("budget-table", "children"),
    "message": Output("budget-message", "children"),
    "message_class": Output("budget-message", "className"),
    "period_label": Output("period-label", "children"),
    "poll_off": Output("budget-poll", "disabled"),
    "progress": Output("budget-progress", "value"),
    "progress_max": Output("budget-progress", "max"),
    "progress_text": Output("budget-progress-text", "children"),
    "running": Output("budget-running", "style"),
    "again": Output("budget-again", "style"),
    "csv_off": Output("dl-csv", "disabled"),
    "nc_off": Output("dl-nc", "disabled"),
    "dl_reason": Output("dl-reason", "children"),
    "budget_actions": Output("budget-actions", "style"),
    "kinds": Output("budget-kind", "options"),
    # greyed (CSS class "computing") while the chosen region's budget computes
    "series_class": Output("series-panel", "className"),
    "profile_class": Output("profile-panel", "className"),
    "curtain_class": Output("curtain-panel", "className"),
    "table_class": Output("budget-table", "className"),
}
PANEL, PANEL_COMPUTING = "panel", "panel computing"
KIND_MISSING = {
    "dry": "These fields are column totals without winds on levels, so they carry no dry-air "
           "mass budget; choose Water vapour.",
    "total": "These fields hold no cloud liquid or ice, so there is no total-water budget; "
             "choose Water vapour.",
}
HIDDEN, SHOWN = {"display": "none"}, {"display": "flex"}


def _blank(text: str, message: str = "", message_class: str = "notice", *, again=False,
           reason: str = "", actions=True) -> dict:
    fig = figures.empty_figure(text)
    return {"series": fig, "profile": fig, "curtain": fig, "table": None,
            "message": message, "message_class": message_class, "period_label": "",
            "poll_off": True, "progress": None, "progress_max": None, "progress_text": "",
            "running": HIDDEN, "again": SHOWN if again else HIDDEN, "csv_off": True,
            "nc_off": True, "dl_reason": reason,
            "budget_actions": {} if actions else HIDDEN, "kinds": no_update,
            **_panel_classes(PANEL)}


def _panel_classes(cls: str) -> dict:
    return {k: cls for k in ("series_class", "profile_class", "curtain_class", "table_class")}


def _steps(job) -> str:
    return f"step {job.done} of {job.total}" if job.total else "starting"


def _progress(job, name: str) -> tuple:
    """The progress bar's value and max and its text, from the job's real steps."""
    return (str(job.done) if job.total else None, str(job.total) if job.total else None,
            f"{name}: {_steps(job)}")


def _computing(job, name: str) -> dict:
    out = _blank(f"Computing the budget of {name}… ({_steps(job)})",
                 reason=f"Downloads wait for the budget of {name}.")
    out.update(_panel_classes(PANEL_COMPUTING))
    value, top, text = _progress(job, name)
    out.update(table=html.P(f"Computing the budget of {name}…", className="muted small"),
               poll_off=False, running=SHOWN, progress=value, progress_max=top,
               progress_text=text)
    return out


@callback(
    output=BUDGET_OUT,
    inputs=dict(want=Input("want", "data"), units=Input("units", "value"),
                time_index=Input("time", "value"), period=Input("period", "value"),
                kind=Input("budget-kind", "value"), _ready=Input("budget-ready", "data")),
)
def show_budget(want, units, time_index, period, kind, _ready=None):
    if not want:
        return _blank("Draw a region on the map to see its budget.", actions=False)
    name = want.get("name") or "the region"
    if want.get("problem"):
        return _blank(f"No budget for {name}.", want["problem"], "notice error",
                      reason="Nothing to download.")
    state = current()
    try:
        key = state.budget_key(want["source"], want["geojson"], want["method"],
                               want["correction"], want.get("attribution"))
    except (FluxfenceError, KeyError, TypeError, AttributeError) as exc:
        return _blank(f"No budget for {name}.", problem(exc, "checking the request"),
                      "notice error", reason="Nothing to download.")
    if key != want.get("key"):
        return _blank(f"No budget for {name}.", "This page's request does not match the "
                      "server's fields any more (they changed, or the page is older than the "
                      "server); choose the region again.", "notice error")
    polled = _trigger() == "budget-ready"  # poll_budget saw the job end
    ds = state.results.get(key)
    if ds is None:
        job = state.jobs.get(key) or start_budget(state, want, key)
        if job.pending and not polled:
            job.wait(WAIT_SECONDS)
        if job.status == DONE:
            ds = state.results.get(key)
        if ds is None:
            if job.status == FAILED:
                return _blank(f"No budget for {name}.", job.message, "notice error",
                              reason="Nothing to download.")
            if job.status == CANCELLED:
                return _blank(f"The budget of {name} was cancelled.",
                              f"Cancelled: the budget of {name} was not computed; press "
                              "“Start again” to compute it.", again=True,
                              reason="Nothing to download.")
            out = _computing(job, name)
            if polled:  # only the progress moves; the panels already say "computing"
                keep = ("progress", "progress_max", "progress_text", "running", "poll_off")
                out = {k: (v if k in keep else no_update) for k, v in out.items()}
            return out
    return _panels(ds, want, name, units, time_index, period, kind or "vapour")


@callback(
    Output("budget-ready", "data"),
    Output("budget-poll", "disabled", allow_duplicate=True),
    Output("budget-progress", "value", allow_duplicate=True),
    Output("budget-progress", "max", allow_duplicate=True),
    Output("budget-progress-text", "children", allow_duplicate=True),
    Input("budget-poll", "n_intervals"),
    State("want", "data"),
    prevent_initial_call=True,
)
def poll_budget(tick, want):
    """While the chosen region's job runs: its progress only (a few hundred bytes, so a
    poll never outlives the next one, which would make the page drop its answer).  Once the
    job has ended, ``budget-ready`` changes and show_budget draws the panels, once."""
    key = (want or {}).get("key")
    job = current().jobs.get(key) if key else None
    if job is not None and job.pending:
        return (no_update, False, *_progress(job, want.get("name") or "the region"))
    return {"key": key, "tick": tick}, True, no_update, no_update, no_update


@callback(
    Output("units", "options"),
    Output("units", "value"),
    Input("budget-kind", "value"),
    State("units", "value"),
    prevent_initial_call=True,
)
def units_for_budget(kind, units):
    """Rate units that fit the chosen budget: hPa/day or kg/s for dry air, mm/day, kg/s or
    m³/s for water; kg/s is kept across the switch, any other unit becomes the first one."""
    from .layout import DRY_UNITS, UNITS

    dry = kind == "dry"
    try:
        value = figures.rate_unit(units, kind)
    except ValueError:  # not a unit of either budget
        value = figures.DRY_UNITS[0] if dry else "mm/day"
    return (DRY_UNITS if dry else UNITS), value


def _kind_options(ds) -> list[dict]:
    from .layout import BUDGETS

    have = figures.available_views(ds)
    return [dict(o, disabled=o["value"] not in have) for o in BUDGETS]


def _panels(ds, want, name, units, time_index, period, kind) -> dict:
    if kind not in figures.available_views(ds):
        out = _blank(f"No {figures.VIEWS[kind].title} for {name}.", KIND_MISSING.get(kind, ""),
                     "notice", reason="")
        out.update(kinds=_kind_options(ds), csv_off=False, nc_off=False,
                   dl_reason=f"Files of {name}.")
        return out
    try:
        nt = ds.sizes["time"]
        t = min(max(int(time_index or 0), 0), nt - 1)
        lo, hi = (period or [0, nt - 1])[:2]
        lo, hi = int(lo), int(min(hi, nt - 1))
        times = ds["time"].values
        when = iso(times[t])
        series = figures.series_figure(ds, units, time_index=t, name=name, kind=kind)
        profile = figures.profile_figure(ds, t, name=name, time_label=when, kind=kind)
        curtain = figures.curtain_figure(ds, t, name=name, time_label=when, kind=kind)
        table = figures_table(ds, units, lo, hi, kind, name, f"{iso(times[lo])} → "
                              f"{iso(times[hi])}")
        warnings = json.loads(ds.attrs.get("warnings", "[]") or "[]")
        note = ("Note: " + " ".join(warnings)) if warnings else ""
    except Exception as exc:  # noqa: BLE001
        return _blank(f"No budget to show for {name}.", problem(exc, "drawing the budget"),
                      "notice error")
    out = _blank("")
    out.update(series=series, profile=profile, curtain=curtain, table=table, message=note,
               kinds=_kind_options(ds),
               period_label=f"{iso(times[lo])} → {iso(times[hi])}", csv_off=False,
               nc_off=False, dl_reason=f"Files of {name}.")
    return out


def figures_table(ds, units, lo, hi, kind, name, period_text):
    """The period table and the edge table of the chosen budget, titled with the region."""
    rows = figures.period_rows(ds, units, lo, hi, kind=kind)
    edges = figures.edge_rows(ds, units, lo, hi, kind=kind)
    caption = html.Caption(f"{name} · {period_text}")
    head = html.Thead(html.Tr([html.Th("term"), html.Th("period mean"),
                               html.Th("period total")]))
    body = html.Tbody([
        html.Tr([html.Td(r["term"]), html.Td(r["mean"], className="num"),
                 html.Td(r["total"], className="num")]) for r in rows
    ])
    from .figures_records import flagged_text  # the plausibility counts (issue 12)

    foot = html.Tfoot(html.Tr(html.Td(flagged_text(ds), colSpan=3, className="flag-counts")))
    out = [html.Table([caption, head, body, foot], className="totals")]
    if edges:
        ehead = html.Thead(html.Tr([html.Th("edge"), html.Th("mean import"),
                                    html.Th("direction")]))
        ebody = html.Tbody([
            html.Tr([html.Td(e["edge"]), html.Td(e["mean"], className="num"),
                     html.Td("coming in" if e["direction"] == "in" else "going out",
                             className=f"dir {e['direction']}")]) for e in edges
        ])
        out.append(html.Div(html.Table([html.Caption(f"Through each edge of {name}"),
                                        ehead, ebody], className="totals edges"),
                            className="edge-scroll"))
    return html.Div(out)


@callback(
    Output("budget-poll", "n_intervals"),
    Input("budget-cancel", "n_clicks"),
    State("want", "data"),
    State("budget-poll", "n_intervals"),
    prevent_initial_call=True,
)
def cancel_budget(_n, want, ticks):
    """Cancel the chosen region's job; the engine stops at its next time block."""
    if not want or not want.get("key"):
        raise PreventUpdate
    current().jobs.cancel(want["key"])
    return (ticks or 0) + 1


# ---------------------------------------------------------------------------------------------
# downloads: the finished budget of the chosen region, named after it
# ---------------------------------------------------------------------------------------------
def _finished(want):
    """The finished budget of ``want`` (its key derived again here), or nothing."""
    if not want:
        raise PreventUpdate
    state = current()
    try:
        key = state.budget_key(want["source"], want["geojson"], want["method"],
                               want["correction"], want.get("attribution"))
    except (FluxfenceError, KeyError, TypeError, AttributeError):
        raise PreventUpdate from None
    ds = state.results.get(key)
    if ds is None:
        raise PreventUpdate
    return ds


def _download_name(want, ext):
    return f"{slug(want.get('name'))}_{want.get('method', 'boundary')}.{ext}"


@callback(
    Output("download-csv", "data"),
    Input("dl-csv", "n_clicks"),
    State("want", "data"),
    prevent_initial_call=True,
)
def download_csv(_n, want):
    from budget.export import to_csv_text

    ds = _finished(want)
    return dcc.send_string(to_csv_text(ds), _download_name(want, "csv"))


@callback(
    Output("download-nc", "data"),
    Input("dl-nc", "n_clicks"),
    State("want", "data"),
    prevent_initial_call=True,
)
def download_netcdf(_n, want):
    from budget.export import to_netcdf_bytes

    ds = _finished(want)
    return dcc.send_bytes(to_netcdf_bytes(ds), _download_name(want, "nc"))

