"""The dashboard's "Report figure" buttons: the same one-page report as `fluxfence figure
--layout report`, for the chosen region and the table's period, as PDF or PNG.

One code path with the command line: app.figure_cmd.figure_data gathers the data from the
finished budget (nothing is computed again) and the opened fields; app.report draws it.
"""

from __future__ import annotations

from dash import Input, Output, State, callback, ctx, dcc, no_update

from budget.errors import FluxfenceError

from .messages import problem, slug
from .state import current

REPORT_DPI = 150  # the command line's default --dpi


@callback(
    Output("download-report", "data"),
    Output("report-message", "children"),
    Input("dl-report-pdf", "n_clicks"),
    Input("dl-report-png", "n_clicks"),
    State("want", "data"),
    State("period", "value"),
    prevent_initial_call=True,
)
def download_report(_pdf, _png, want, period):
    """The report page of the chosen region's finished budget over the table's period."""
    if not want or not want.get("key"):
        return no_update, "Choose a region first; the report shows its budget."
    fmt = "png" if ctx.triggered_id == "dl-report-png" else "pdf"
    try:
        state = current()
        key = state.budget_key(want["source"], want["geojson"], want["method"], want["correction"],
                               want.get("attribution"))
        ds = state.results.get(key)
        if ds is None:
            return no_update, "The budget is still being computed; ask for the report once it is on screen."
        return dcc.send_bytes(report_bytes(state, want, ds, period, fmt), f"{slug(want.get('name'))}_report.{fmt}"), ""
    except (FluxfenceError, KeyError, TypeError, ValueError) as exc:
        return no_update, problem(exc, "drawing the report figure")


def report_bytes(state, want, ds, period, fmt: str) -> bytes:
    """The report page as PDF or PNG bytes, through the command line's own functions."""
    from app import report
    from app.figure_cmd import figure_data

    if period and len(period) == 2:
        lo, hi = sorted(int(i) for i in period)
        ds = ds.isel(time=slice(max(lo, 0), hi + 1))
    fields = state.fields(want["source"])
    data, _ = figure_data(fields, budget=ds, with_map=True, source_paths=state.checked_paths(want["source"]))
    fig = report.render("report", data, report.get_style("paper"))
    return report.to_bytes(fig, fmt, dpi=REPORT_DPI)
