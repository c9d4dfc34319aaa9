"""The page: what is on the screen and where.  No behaviour here (see callbacks.py)."""

from __future__ import annotations

from dash import dcc, html

from .layout_attribution import insight_card
from .layout_records import records_card

CAUTION = (
    "Reanalysis budgets are estimates with known imbalances; they are not a substitute for "
    "gauge records or official forecasts. Defer to local agencies and licensed practice."
)

MAP_CONFIG = {
    "displaylogo": False,
    "scrollZoom": True,
    "modeBarButtonsToAdd": ["drawrect", "drawclosedpath", "eraseshape"],
    "modeBarButtonsToRemove": ["lasso2d", "select2d", "autoScale2d"],
    "toImageButtonOptions": {"format": "png", "filename": "fluxfence_map", "scale": 2},
}
PLOT_CONFIG = {"displaylogo": False, "modeBarButtonsToRemove": ["lasso2d", "select2d"]}

TOOLS = [
    {"label": "Draw a box", "value": "drawrect"},
    {"label": "Draw a shape", "value": "drawclosedpath"},
    {"label": "Click vertices", "value": "click"},
    {"label": "Pan / zoom", "value": "pan"},
]
FIELDS = [
    {"label": "Vapour transport (IVT)", "value": "ivt"},
    {"label": "Precipitable water", "value": "pw"},
    {"label": "Convergence", "value": "convergence"},
]
UNITS = [
    {"label": "mm/day", "value": "mm/day"},
    {"label": "kg/s", "value": "kg/s"},
    {"label": "m³/s", "value": "m3/s"},
]
DRY_UNITS = [  # the dry-air budget: air, not liquid water (app/figures.py DRY_UNITS)
    {"label": "hPa/day", "value": "hPa/day"},
    {"label": "kg/s", "value": "kg/s"},
]
CORRECTION = [
    # the engine's default: applied for level inputs, which carry the dry-air flux
    {"label": "on: winds adjusted so dry air balances (level inputs)", "value": "default"},
    {"label": "off: the files' winds as they are", "value": "off"},
]
BUDGETS = [
    {"label": "Water vapour", "value": "vapour"},
    {"label": "Dry-air mass", "value": "dry"},
    {"label": "Total water", "value": "total"},
]
METHODS = [
    {"label": "boundary line integral", "value": "boundary"},
    {"label": "area integral of divergence", "value": "area"},
]


def _card(title, *children, cls="", id=None):
    props = {"className": f"card {cls}".strip()}
    if id:
        props["id"] = id
    return html.Section([html.H2(title, className="card-title"), *children], **props)


def _notice(id_):
    return html.Div(id=id_, className="notice", role="alert", **{"aria-live": "polite"})


def build_layout(sources: list[dict], upload_limit_mb: float, initial_regions=None) -> html.Div:
    """sources: [{"value": id, "label": text}] of the field sets this server may read;
    initial_regions: region records to start with (the sample's invented basin), the first
    one selected."""
    initial_regions = list(initial_regions or [])
    first = initial_regions[0]["id"] if initial_regions else None
    header = html.Header(
        className="topbar",
        children=[
            html.Div([
                html.Span("Fluxfence", className="wordmark"),
                html.Span("water-vapour and dry-air budget of a region", className="tagline"),
            ]),
            html.Div(className="source-picker", children=[
                html.Label("Fields", htmlFor="source"),
                dcc.Dropdown(id="source", options=sources, value=sources[0]["value"],
                             clearable=False, searchable=False, style={"minWidth": "320px"}),
            ]),
        ],
    )

    map_controls = html.Div(className="controls", children=[
        html.Div([html.Span("Show", className="control-label"),
                  dcc.RadioItems(id="map-field", options=FIELDS, value="ivt", inline=True,
                                 className="segmented")]),
        dcc.Checklist(id="map-arrows", options=[{"label": "arrows", "value": "on"}],
                      value=["on"], inline=True, className="segmented small"),
        html.Div([html.Span("Region tool", className="control-label"),
                  dcc.RadioItems(id="map-tool", options=TOOLS, value="drawrect", inline=True,
                                 className="segmented")]),
    ])
    click_bar = html.Div(id="click-bar", className="click-bar", style={"display": "none"},
                         children=[
        html.Span(id="click-count", children="Click on the map to place vertices "
                  "(they snap to grid-cell centres)."),
        html.Button("Close the shape", id="click-close", className="btn primary"),
        html.Button("Undo last", id="click-undo", className="btn"),
        html.Button("Clear", id="click-clear", className="btn"),
    ])
    time_bar = html.Div(className="timebar", children=[
        html.Button("▶ Play", id="play", className="btn", n_clicks=0,
                    **{"aria-label": "play or pause the time steps"}),
        html.Div(dcc.Slider(id="time", min=0, max=1, step=1, value=0, marks=None,
                            updatemode="mouseup", allow_direct_input=False), className="slider"),
        html.Span(id="time-label", className="time-label"),
        dcc.Interval(id="player", interval=1200, disabled=True),
    ])
    map_card = _card(
        "Map",
        map_controls,
        click_bar,
        _notice("map-message"),
        dcc.Graph(id="map", config=MAP_CONFIG, className="map-graph",
                  style={"height": "560px"}),
        time_bar,
        cls="map-card",
    )

    regions_card = _card(
        "Region",
        _notice("region-message"),
        html.Div(className="row", children=[
            dcc.Dropdown(id="region-select", value=first, clearable=False,
                         options=[{"label": r["name"], "value": r["id"]} for r in initial_regions],
                         placeholder="no region yet — draw one on the map",
                         className="grow"),
        ]),
        html.Div(id="region-info", className="muted small"),
        html.Div(id="region-actions", style={} if first else {"display": "none"}, children=[
            html.Div(className="row", children=[
                dcc.Input(id="region-name", type="text", placeholder="name this region",
                          maxLength=80, debounce=False, className="grow"),
                html.Button("Rename", id="region-rename", className="btn"),
            ]),
            html.Div(className="row", children=[
                html.Button("Download GeoJSON", id="dl-region", className="btn"),
                html.Button("Remove from the list", id="region-remove", className="btn quiet"),
            ]),
        ]),
        html.Details(className="adder", open=False, id="adder-upload", children=[
            html.Summary("Upload a GeoJSON or zipped shapefile"),
            dcc.Upload(id="upload", className="dropzone", multiple=False, children=html.Div([
                "Drop a file here or ", html.A("choose one"),
                html.Span(f" (.geojson, .json, .zip; up to {upload_limit_mb:g} MB)",
                          className="muted"),
            ])),
            html.Div(id="feature-row", className="row", style={"display": "none"}, children=[
                dcc.Dropdown(id="feature", options=[], value=None, clearable=False,
                             className="grow", placeholder="pick a feature"),
                html.Button("Use this feature", id="feature-use", className="btn primary"),
            ]),
        ]),
        html.Details(className="adder", open=False, id="adder-box", children=[
            html.Summary("Type a box"),
            html.Div(className="box-grid", children=[
                html.Label(["west (°E)", dcc.Input(id="box-west", type="number", step="any")]),
                html.Label(["east (°E)", dcc.Input(id="box-east", type="number", step="any")]),
                html.Label(["south (°N)", dcc.Input(id="box-south", type="number",
                                                     step="any")]),
                html.Label(["north (°N)", dcc.Input(id="box-north", type="number",
                                                     step="any")]),
            ]),
            html.Button("Add this box", id="box-add", className="btn primary"),
            html.Div("West greater than east crosses the antimeridian.", className="muted small"),
        ]),
        cls="side-card",
    )

    budget_card = _card(
        "Budget",
        html.Div(className="controls", children=[
            html.Div([html.Span("Budget of", className="control-label"),
                      dcc.RadioItems(id="budget-kind", options=BUDGETS, value="vapour",
                                     inline=True, className="segmented")]),
            html.Div([html.Span("Convergence from", className="control-label"),
                      dcc.RadioItems(id="method", options=METHODS, value="boundary",
                                     inline=True, className="segmented")]),
            html.Div([html.Span("Dry-air mass correction", className="control-label"),
                      dcc.RadioItems(id="correction", options=CORRECTION, value="default",
                                     inline=True, className="segmented")]),
            html.Div([html.Span("Rates in", className="control-label"),
                      dcc.RadioItems(id="units", options=UNITS, value="mm/day", inline=True,
                                     className="segmented")]),
        ]),
        _notice("budget-message"),
        html.Div(id="budget-running", className="running", style={"display": "none"},
                 children=[
            html.Span("Computing", className="control-label"),
            html.Progress(id="budget-progress", **{"aria-label": "budget progress"}),
            html.Span(id="budget-progress-text", className="muted small"),
            html.Button("Cancel", id="budget-cancel", className="btn small"),
        ]),
        html.Button("Start again", id="budget-again", className="btn primary small",
                    style={"display": "none"}),
        html.Div(id="budget-table", className="panel"),
        html.Div(className="period", children=[
            html.Span("Period for the table", className="control-label"),
            dcc.RangeSlider(id="period", min=0, max=1, step=1, value=[0, 1], marks=None,
                            allowCross=False, allow_direct_input=False),
            html.Span(id="period-label", className="muted small"),
        ]),
        html.Div(id="budget-actions", className="row downloads", children=[
            html.Button("Series as CSV", id="dl-csv", className="btn", disabled=True),
            html.Button("Full budget as NetCDF", id="dl-nc", className="btn", disabled=True),
            html.Span(id="dl-reason", className="muted small"),
        ]),
        html.Div(className="row downloads", children=[  # app/callbacks_report.py
            html.Button("Report figure (PDF)", id="dl-report-pdf", className="btn"),
            html.Button("Report figure (PNG)", id="dl-report-png", className="btn"),
            html.Span(id="report-message", className="muted small", role="status"),
        ]),
        cls="side-card", id="budget-card",
    )

    # each panel sits in a Div that carries its state ("panel computing" greys it): a Graph
    # does not redraw for a new className (dash 4)
    series_card = _card("Through the event",
                        html.Div(dcc.Graph(id="series", config=PLOT_CONFIG,
                                           style={"height": "440px"}),
                                 id="series-panel", className="panel"),
                        cls="wide-card")
    profile_card = _card(
        "Where it comes in",
        html.Div(dcc.Graph(id="profile", config=PLOT_CONFIG, style={"height": "260px"}),
                 id="profile-panel", className="panel"),
        html.Div(dcc.Graph(id="curtain", config=PLOT_CONFIG, style={"height": "300px"}),
                 id="curtain-panel", className="panel"),
        cls="wide-card",
    )

    footer = html.Footer(className="footer", children=[
        html.P([html.Strong("Please note. "), CAUTION]),
        html.P([
            "Sign convention: import and convergence are positive when the region gains "
            "moisture. Coastlines: Natural Earth (public domain). The bundled sample is an "
            "invented scenario, not real weather.",
        ], className="muted"),
    ])

    return html.Div(className="page", children=[
        header,
        html.Main(className="grid", children=[
            map_card,
            html.Div(className="side", children=[regions_card, budget_card]),
            series_card,
            profile_card,
            insight_card(sources),
            records_card(upload_limit_mb),
        ]),
        footer,
        dcc.Store(id="regions", data=initial_regions),
        dcc.Store(id="vertices", data=[]),
        dcc.Store(id="map-refused", data=None),  # when a drawing was refused (app/regions.py)
        dcc.Store(id="upload-held", data=None),
        dcc.Store(id="want", data=None),
        dcc.Interval(id="budget-poll", interval=300, disabled=True),
        dcc.Store(id="budget-ready", data=None),  # the job ended: draw (app/callbacks.py)
        dcc.Download(id="download-region"),
        dcc.Download(id="download-csv"),
        dcc.Download(id="download-nc"),
        dcc.Download(id="download-report"),
    ])
