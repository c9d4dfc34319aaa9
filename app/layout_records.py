"""The long-record card: periods, climatology, river discharge, several regions at once.

Layout only; behaviour in app/callbacks_records.py, figures in app/figures_records.py.
"""

from __future__ import annotations

from dash import dcc, html

from .figures import empty_figure
from .figures_records import MONTH_NAMES, PERIODS

PLOT_CONFIG = {"displaylogo": False, "modeBarButtonsToRemove": ["lasso2d", "select2d"]}


def _graph(id_: str, height: int, text: str):
    return dcc.Graph(id=id_, config=PLOT_CONFIG, figure=empty_figure(text),
                     style={"height": f"{height}px"})


def records_card(upload_limit_mb: float = 10) -> html.Section:
    """Periods (event … water year) with their table, the monthly climatology, the gauge
    upload with P − E against discharge, and the overlay of ticked regions."""
    controls = html.Div(className="controls", children=[
        html.Div([html.Span("Sum by", className="control-label"),
                  dcc.RadioItems(id="records-period", value="event", inline=True,
                                 className="segmented",
                                 options=[{"label": label, "value": v} for v, label in PERIODS])]),
        html.Div(className="row", children=[
            html.Label(["Term ", dcc.Dropdown(id="records-term", value="p_minus_e",
                                              clearable=False, searchable=False,
                                              options=[{"label": "P − E", "value": "p_minus_e"}],
                                              style={"minWidth": "220px"})],
                       className="inline-label"),
            html.Label(["Water year starts on 1 ", dcc.Dropdown(
                id="records-wy-start", value=10, clearable=False, searchable=False,
                options=[{"label": m, "value": k + 1} for k, m in enumerate(MONTH_NAMES)],
                style={"minWidth": "90px"})], className="inline-label"),
        ]),
    ])
    periods = html.Div([
        _graph("records-series", 340, "The chosen region's budget by period appears here."),
        html.Div(id="records-table", className="records-scroll"),
    ])
    climate = html.Div([
        html.H3("Mean annual cycle", className="sub-title"),
        _graph("records-climatology", 330, "The climatology of the chosen region appears here."),
        html.P(id="records-climatology-note", className="muted small"),
    ])
    river = html.Div([
        html.H3("Against the river", className="sub-title"),
        dcc.Upload(id="gauge-upload", className="dropzone", multiple=False, children=html.Div([
            "Drop a gauge CSV here or ", html.A("choose one"),
            html.Span(f" (time in ISO 8601, discharge in m³/s; up to {upload_limit_mb:g} MB)",
                      className="muted"),
        ])),
        html.Div(id="gauge-column-row", className="row", style={"display": "none"}, children=[
            html.Span("Discharge column (m³/s)", className="control-label"),
            dcc.RadioItems(id="gauge-column", options=[], value=None, inline=True,
                           className="segmented"),
        ]),
        html.Div(id="gauge-message", className="notice", role="alert",
                 **{"aria-live": "polite"}),
        _graph("discharge-graph", 340, "Upload a gauge CSV to set P − E against the river's "
               "discharge."),
        html.P(id="discharge-summary", className="small"),
        html.Div(id="discharge-table", className="records-scroll"),
        html.P("Storage on and under the land is taken to average out over whole water years; "
               "long-term P − E and discharge of large basins agree within the analyses' "
               "errors (Oki et al. 1995, Hydrological Processes 9). Small or managed basins "
               "may not.", className="muted small"),
    ])
    overlay = html.Div([
        html.H3("Several regions", className="sub-title"),
        html.Span("Overlay the series of", className="control-label"),
        dcc.Checklist(id="overlay-regions", options=[], value=[], inline=True,
                      className="segmented"),
        _graph("overlay-graph", 340, "Tick regions in the list above to overlay their series."),
        dcc.Interval(id="overlay-poll", interval=500, disabled=True),
    ])
    return html.Section(id="records-card", className="card wide-card", children=[
        html.H2("Long record", className="card-title"),
        controls,
        html.Div(id="records-message", className="notice", role="alert",
                 **{"aria-live": "polite"}),
        periods, climate, river, overlay,
        dcc.Store(id="gauge-held", data=None),
    ])
