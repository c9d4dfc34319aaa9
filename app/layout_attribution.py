"""The "Where the water comes from" card: layers by edge, mean flow and eddies, the
atmospheric-river share, the event catalogue and the recycling ratio of the selected region.

Layout only; the behaviour is in app/callbacks_attribution.py.  The layer bounds and the AR
threshold typed here become options of the budget job (and so part of its cache key).
"""

from __future__ import annotations

from dash import dash_table, dcc, html

from budget.attribution import AR_IVT_THRESHOLD

from .figures_attribution import EVENT_COLUMNS

PLOT_CONFIG = {"displaylogo": False, "modeBarButtonsToRemove": ["lasso2d", "select2d"]}

RECYCLING_HELP = (
    "Bulk recycling ratio ρ = E·A / (E·A + 2·F_in) (Brubaker, Entekhabi and Eagleson 1993): "
    "the share of the region's precipitation that evaporated inside it. It assumes a "
    "well-mixed column and a steady state over the period (no change in storage), and it "
    "grows with the size of the region (Trenberth 1999), so compare only regions of similar "
    "size. It needs evaporation: from the files, or observed precipitation and the budget."
)
AR_HELP = (
    "Atmospheric-river share: the part of the inflow that crossed the boundary where the "
    "vertically integrated vapour transport (IVT) met the threshold, common choice "
    "250 kg m⁻¹ s⁻¹ (Rutz, Steenburgh and Ralph 2014)."
)
DATASETS_HELP = (
    "Each field set is budgeted for this region on its own grid, levels and time steps (never "
    "regridded); the series are compared on the time stamps they share, and the shaded band is "
    "the range between them: how far the answer depends on the choice of dataset."
)
DATASET_VARIABLES = [
    {"label": "P − E (mm/day)", "value": "p_minus_e"},
    {"label": "Precipitable water (mm)", "value": "precipitable_water"},
    {"label": "Net import (kg/s)", "value": "vapour_import"},
]
EVENT_HELP = (
    "Events: runs of time steps where the region's P − E exceeds the chosen percentile of its "
    "own record, joined across gaps shorter than a day. Click a row to set the period."
)


def _field(label, control, hint=None):
    return html.Label(className="insight-field", children=[
        html.Span(label, className="insight-label"), control,
        html.Span(hint, className="muted small") if hint else None,
    ])


def _datasets_block(sources) -> html.Div:
    """Choose several field sets of the server (app/server.py resolve_sources) and overlay the
    region's series from each."""
    return html.Div(className="insight-datasets", children=[
        html.H3(id="insight-datasets-title", children="Datasets side by side"),
        html.P(DATASETS_HELP, className="muted small"),
        html.Div(className="insight-options", children=[
            _field("Field sets", dcc.Dropdown(id="insight-datasets", options=list(sources), value=[],
                                              multi=True, placeholder="choose two or more",
                                              style={"minWidth": "360px"})),
            _field("Series", dcc.RadioItems(id="insight-datasets-variable", options=DATASET_VARIABLES,
                                            value="p_minus_e", inline=True, className="segmented")),
        ]),
        html.Div(id="insight-datasets-message", className="notice", role="alert",
                 **{"aria-live": "polite"}),
        dcc.Graph(id="insight-datasets-graph", config=PLOT_CONFIG, style={"height": "360px"}),
        dcc.Interval(id="insight-datasets-poll", interval=500, disabled=True),
    ])


def insight_card(sources=()) -> html.Section:
    """The card, placed by app/layout.py below the budget panels; ``sources`` are the field
    sets the server may read ([{"value": id, "label": text}])."""
    options = html.Div(className="insight-options", children=[
        _field("Layer bounds (hPa)",
               dcc.Input(id="insight-layers", type="text", value="", debounce=True,
                         placeholder="e.g. 1000,850,700,500,300", maxLength=120),
               "empty: whole column only; press Enter to apply"),
        _field("AR threshold (kg m⁻¹ s⁻¹)",
               dcc.Input(id="insight-ar", type="number", value=AR_IVT_THRESHOLD, min=1,
                         step="any", debounce=True)),
        _field("Event percentile",
               dcc.Input(id="insight-percentile", type="number", value=95, min=1, max=99.9,
                         step="any", debounce=True)),
    ])
    table = dash_table.DataTable(
        id="insight-events",
        columns=[{"name": label, "id": key} for key, label in EVENT_COLUMNS],
        data=[], sort_action="native", row_selectable=False, cell_selectable=True,
        style_table={"overflowX": "auto"},
        style_cell={"fontFamily": "inherit", "fontSize": "12px", "padding": "4px 6px",
                    "textAlign": "right", "cursor": "pointer"},
        style_header={"fontWeight": "600", "backgroundColor": "#efece4", "fontFamily": "inherit"},
        style_data_conditional=[{"if": {"state": "active"}, "backgroundColor": "#dbe9e6",
                                 "border": "1px solid #2a7f86"}],
    )
    return html.Section(id="insight-card", className="card wide-card insight", children=[
        html.H2(id="insight-title", className="card-title", children="Where the water comes from"),
        html.P("Options below are part of the budget computation: changing them computes the "
               "region's budget again.", className="muted small"),
        options,
        html.Div(id="insight-message", className="notice", role="alert",
                 **{"aria-live": "polite"}),
        html.Div(className="insight-grid", children=[
            html.Div([dcc.Graph(id="insight-layers-graph", config=PLOT_CONFIG,
                                style={"height": "340px"})]),
            html.Div([
                dcc.Graph(id="insight-eddy-graph", config=PLOT_CONFIG, style={"height": "340px"}),
                html.P(id="insight-eddy-note", className="muted small"),
            ]),
        ]),
        html.Div(className="insight-grid", children=[
            html.Div([html.H3(id="insight-ar-title", children="Atmospheric-river share"),
                      html.Div(id="insight-ar-share"),
                      html.P(AR_HELP, className="muted small")]),
            html.Div([html.H3(id="insight-recycling-title", children="Recycling"),
                      html.P(id="insight-recycling"),
                      html.P(RECYCLING_HELP, className="muted small", id="insight-recycling-help")]),
        ]),
        html.H3(id="insight-events-title", children="Events"),
        html.P(EVENT_HELP, className="muted small"),
        html.Div(id="insight-events-note", className="muted small"),
        table,
        html.Div(className="row downloads", children=[
            html.Button("Event catalogue as CSV", id="insight-dl-events", className="btn", disabled=True),
            html.Span(id="insight-dl-events-reason", className="muted small"),
        ]),
        dcc.Download(id="insight-download-events"),
        _datasets_block(sources),
        dcc.Store(id="insight-options", data={"layers": "", "ar": AR_IVT_THRESHOLD}),
    ])
