"""Behaviour of the "Where the water comes from" card (app/layout_attribution.py).

For the selected region and period: import by layer and edge, the mean-flow / transient-eddy
split, the atmospheric-river share of the inflow, the event catalogue (a click on an event sets
the period) and the bulk recycling ratio.  Every number comes from the engine (budget.*) through
the region's cached budget; every panel's title names the region it shows.

The layer bounds and the AR threshold are options of the budget job: ``read_options`` checks
them into the ``insight-options`` store, the budget request (app/callbacks.py) puts that record
into its cache key and ``budget_options`` turns it into the engine's BudgetOptions.
"""

from __future__ import annotations

import threading
from collections import OrderedDict

import numpy as np
from dash import Input, Output, State, callback, dcc, html, no_update
from dash.exceptions import PreventUpdate

from budget.attribution import AR_IVT_THRESHOLD, AttributionOptions
from budget.errors import FluxfenceError, RequestError
from budget.layers import parse_layers
from budget.options import BudgetOptions, ClosureOptions

from . import figures_attribution as fa
from .figures import empty_figure
from .messages import problem

TITLE = "Where the water comes from"
MAX_AR = 5000.0  # kg m-1 s-1; IVT of the strongest rivers is a few thousand (common practice, no source)


# ---------------------------------------------------------------------------------------------
# options of the budget job
# ---------------------------------------------------------------------------------------------
def read_options(layers_text, ar_threshold) -> dict:
    """The checked options record {"layers": text, "ar": float} (JSON-safe, part of the cache
    key); a RequestError names the field to fix."""
    text = (layers_text or "").strip()
    if text:
        parse_layers(text)  # refuses with a sentence
        text = ",".join(f"{b:g}" for b in sorted(parse_layers(text).bounds, reverse=True)) \
            if not text.lower().startswith("sigma:") else text
    try:
        ar = float(ar_threshold)
    except (TypeError, ValueError):
        raise RequestError("The AR threshold must be a number in kg m-1 s-1; "
                           f"the common choice is {AR_IVT_THRESHOLD:g}.") from None
    if not 0.0 < ar <= MAX_AR:
        raise RequestError(f"The AR threshold {ar:g} kg m-1 s-1 is outside 0–{MAX_AR:g}; "
                           f"the common choice is {AR_IVT_THRESHOLD:g}.")
    return {"layers": text, "ar": ar}


def attribution_options(record, fields_kind: str) -> AttributionOptions:
    """The engine's AttributionOptions from an options record; layers only for level fields
    (pre-integrated columns have no layers, and the panel says so)."""
    record = record or {}
    layers = None
    if record.get("layers") and fields_kind == "levels":
        layers = parse_layers(record["layers"])
    return AttributionOptions(layers=layers, ar_threshold=float(record.get("ar", AR_IVT_THRESHOLD)))


def budget_options(method: str, correction: str, record, fields_kind: str) -> BudgetOptions:
    """The budget job's options: method, mass correction ("off" or as the engine advises),
    profiles for the curtain panels, and the attribution record."""
    return BudgetOptions(
        method=method, profiles=True,
        closure=ClosureOptions(mass_correction="off" if correction == "off" else "auto"),
        attribution=attribution_options(record, fields_kind),
    )


def job_options(method: str, correction: str, record, fields_kind: str) -> BudgetOptions:
    """``budget_options`` for a record that came from the page: checked again here."""
    record = record or {}
    checked = read_options(record.get("layers"), record.get("ar", AR_IVT_THRESHOLD))
    return budget_options(method, correction, checked, fields_kind)


@callback(
    Output("insight-options", "data"),
    Output("insight-message", "children"),
    Output("insight-message", "className"),
    Input("insight-layers", "value"),
    Input("insight-ar", "value"),
    State("insight-options", "data"),
    prevent_initial_call=True,
)
def apply_options(layers_text, ar_threshold, current):
    try:
        record = read_options(layers_text, ar_threshold)
    except FluxfenceError as exc:
        return no_update, str(exc), "notice error"
    if record == current:
        return no_update, "", "notice"
    return record, "", "notice"


# ---------------------------------------------------------------------------------------------
# where the budget and the fields are (the server's state, app/state.py)
# ---------------------------------------------------------------------------------------------
def _budget_of(want):
    """The finished budget of the page's request (its key derived again here), or None."""
    from .state import current

    if not want or not want.get("key"):
        return None
    state = current()
    try:
        key = state.budget_key(want["source"], want["geojson"], want["method"],
                               want["correction"], want.get("attribution"))
    except (FluxfenceError, KeyError, TypeError, AttributeError):
        return None
    return state.results.get(key) if key == want["key"] else None


def _fields_of(source_id):
    from .state import current

    return current().fields(source_id)


_SPLITS: OrderedDict = OrderedDict()
_SPLITS_LOCK = threading.Lock()


def _split(want, lo: int, hi: int, times):
    """The mean-flow / transient-eddy split of the selected region over steps lo..hi (cached)."""
    from budget.eddies import decompose
    from budget.region import region_from_geojson

    key = (want["key"], lo, hi)
    with _SPLITS_LOCK:
        if key in _SPLITS:
            _SPLITS.move_to_end(key)
            return _SPLITS[key]
    region = region_from_geojson(want["geojson"], name=want.get("name"))
    split = decompose(_fields_of(want["source"]), region, start=str(times[lo]), end=str(times[hi]))
    with _SPLITS_LOCK:
        _SPLITS[key] = split
        while len(_SPLITS) > 32:
            _SPLITS.popitem(last=False)
    return split


def _period(ds, period):
    nt = ds.sizes["time"]
    lo, hi = (period or [0, nt - 1])[:2]
    lo = min(max(int(lo), 0), nt - 1)
    return lo, min(max(int(hi), lo), nt - 1)


def _pct(x) -> str:
    return "—" if x is None or not np.isfinite(x) else f"{x:.1f} %"


# ---------------------------------------------------------------------------------------------
# the panels
# ---------------------------------------------------------------------------------------------
PANEL_OUT = {
    "title": Output("insight-title", "children"),
    "layers": Output("insight-layers-graph", "figure"),
    "ar_title": Output("insight-ar-title", "children"),
    "ar": Output("insight-ar-share", "children"),
    "rec_title": Output("insight-recycling-title", "children"),
    "rec": Output("insight-recycling", "children"),
    "ev_title": Output("insight-events-title", "children"),
    "ev_note": Output("insight-events-note", "children"),
    "events": Output("insight-events", "data"),
    "ev_dl_off": Output("insight-dl-events", "disabled"),
    "ev_dl_reason": Output("insight-dl-events-reason", "children"),
}


def _waiting(text: str, name: str | None = None, reason: str | None = None) -> dict:
    who = f" — {name}" if name else ""
    if reason is None:
        reason = f"The catalogue waits for the budget of {name}." if name else "No region yet."
    return {"title": TITLE + who, "layers": empty_figure(text), "ar_title": f"Atmospheric-river share{who}",
            "ar": text, "rec_title": f"Recycling{who}", "rec": text, "ev_title": f"Events{who}",
            "ev_note": text, "events": [], "ev_dl_off": True, "ev_dl_reason": reason}


def _ar_block(summary):
    if summary is None:
        return "This budget carries no atmospheric-river inflow."
    head = html.Thead(html.Tr([html.Th("crossing"), html.Th("share of the inflow")]))
    rows = [html.Tr([html.Td(html.Strong("whole boundary")),
                     html.Td(html.Strong(_pct(summary["share_percent"])), className="num")])]
    crossed = [e for e in summary["edges"] if e["share_percent"]]
    rows += [html.Tr([html.Td(e["edge"]), html.Td(_pct(e["share_percent"]), className="num")])
             for e in crossed]
    if len(crossed) < len(summary["edges"]):
        rows.append(html.Tr([html.Td(f"{len(summary['edges']) - len(crossed)} other edges",
                                     className="muted"), html.Td("none", className="num muted")]))
    mean_in = summary["mean_inflow_kg_s"]
    caption = (f"IVT ≥ {summary['threshold']}; period-mean inflow "
               f"{mean_in:.3g} kg/s" if mean_in is not None else f"IVT ≥ {summary['threshold']}")
    return html.Table([html.Caption(caption), head, html.Tbody(rows)],
                      className="totals insight-ar", id="insight-ar-table")


def _layers_figure(ds, want, lo, hi, name):
    record = want.get("attribution") or {}
    if "layer_edge_import" in ds:
        return fa.layer_edge_figure(ds, lo, hi + 1, name=name)
    if record.get("layers"):
        return empty_figure("No layers: these fields are column totals, not levels.")
    return empty_figure("Type layer bounds above to see the import by height and edge.")


def _catalogue(ds, percentile):
    """The event catalogue (budget.events.find_events) for the percentile typed on the page."""
    from budget.events import EventRule, find_events

    try:
        rule = EventRule(percentile=float(percentile if percentile is not None else 95))
    except (TypeError, ValueError):
        raise RequestError("The event percentile must be a number; try 95.") from None
    return find_events(ds, rule)


def _events(ds, percentile, name):
    try:
        events = _catalogue(ds, percentile)
    except FluxfenceError as exc:
        return [], str(exc)
    note = (f"{len(events)} event(s) of {name}: P − E above {events.attrs['threshold_mm_day']:.2f} "
            f"mm/day (the {events.attrs['percentile']:g}th percentile of its record).")
    return fa.event_table(ds, events), note


@callback(
    output=PANEL_OUT,
    inputs=dict(want=Input("want", "data"), _shown=Input("period-label", "children"),
                period=Input("period", "value"), percentile=Input("insight-percentile", "value")),
)
def show_insight(want, _shown, period, percentile):
    if not want:
        return _waiting("Draw a region on the map to see where its water comes from.")
    name = want.get("name") or "the region"
    ds = _budget_of(want)
    if ds is None:
        return _waiting(f"Waiting for the budget of {name}…", name)
    try:
        lo, hi = _period(ds, period)
        rows, note = _events(ds, percentile, name)
        rec = fa.recycling_summary(ds, lo, hi)
        return {
            "title": f"{TITLE} — {name}",
            "layers": _layers_figure(ds, want, lo, hi, name),
            "ar_title": f"Atmospheric-river share — {name}",
            "ar": _ar_block(fa.ar_share_summary(ds, lo, hi)),
            "rec_title": f"Recycling — {name}",
            "rec": rec["text"],
            "ev_title": f"Events — {name}",
            "ev_note": note,
            "events": rows,
            "ev_dl_off": not rows,
            "ev_dl_reason": (f"The catalogue of {name}: {len(rows)} event(s)." if rows
                             else f"No events of {name} to download ({note})"),
        }
    except Exception as exc:  # noqa: BLE001
        return _waiting(problem(exc, "drawing where the water comes from"), name)


@callback(
    Output("insight-eddy-graph", "figure"),
    Output("insight-eddy-note", "children"),
    Input("want", "data"),
    Input("period-label", "children"),
    Input("period", "value"),
)
def show_eddies(want, _shown, period):
    if not want:
        return empty_figure("Draw a region on the map to split its import."), ""
    name = want.get("name") or "the region"
    ds = _budget_of(want)
    if ds is None:
        return empty_figure(f"Waiting for the budget of {name}…"), ""
    lo, hi = _period(ds, period)
    times = ds["time"].values
    if hi <= lo:
        return empty_figure("The split needs a period of two time steps or more."), fa.SAMPLING_NOTE
    try:
        split = _split(want, lo, hi, times)
    except Exception as exc:  # noqa: BLE001
        return empty_figure(f"No mean-flow / eddy split for {name}."), problem(exc, "splitting the import")
    return fa.eddy_figure(split, name=name), fa.SAMPLING_NOTE


@callback(
    Output("period", "value", allow_duplicate=True),
    Output("time", "value", allow_duplicate=True),
    Input("insight-events", "active_cell"),
    State("insight-events", "data"),
    prevent_initial_call=True,
)
def pick_event(cell, rows):
    """A click on an event's row sets the period (and the time slider) to that event."""
    if not cell or not rows:
        raise PreventUpdate
    row = next((r for r in rows if r.get("id") == cell.get("row_id")), None)
    if row is None:
        raise PreventUpdate
    return [int(row["first"]), int(row["last"])], int(row["first"])


# ---------------------------------------------------------------------------------------------
# the event catalogue as CSV: the columns of the command line's --events file
# ---------------------------------------------------------------------------------------------
@callback(
    Output("insight-download-events", "data"),
    Input("insight-dl-events", "n_clicks"),
    State("want", "data"),
    State("insight-percentile", "value"),
    prevent_initial_call=True,
)
def download_events(_n, want, percentile):
    """The finished budget's event catalogue, written as `fluxfence run --events` writes it
    (budget.events.find_events, budget.export.frame_csv_text), named after the region."""
    from budget.export import frame_csv_text

    from .messages import slug

    ds = _budget_of(want)
    if ds is None:
        raise PreventUpdate
    try:
        events = _catalogue(ds, percentile)
    except FluxfenceError:
        raise PreventUpdate from None
    if events.empty:
        raise PreventUpdate
    return dcc.send_string(frame_csv_text(events), f"{slug(want.get('name'))}_events.csv")
