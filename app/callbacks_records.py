"""Behaviour of the long-record card (app/layout_records.py).

Every panel reads the chosen region's finished budget from the server's results (the key is
derived again here, as the downloads do) and sums it through budget.periods and
budget.discharge; nothing is computed twice and no arithmetic is re-derived here.  While a
budget computes, the panels say so under the region's name; a panel never shows one region's
numbers under another's name.  Gauge uploads obey the server's upload cap and every problem
with them is one sentence in the card's gauge message.
"""

from __future__ import annotations

import base64
import binascii
import io
import uuid
from pathlib import Path

from dash import Input, Output, State, callback, html, no_update
from dash.exceptions import PreventUpdate

from budget.errors import FluxfenceError, RequestError

from . import figures_records as fr
from .figures import empty_figure, number
from .jobs import CANCELLED, FAILED
from .messages import problem
from .state import current


# ---------------------------------------------------------------------------------------------
# the chosen region's finished budget
# ---------------------------------------------------------------------------------------------
def finished(want) -> tuple[object, str]:
    """(the finished budget of ``want`` or None, a sentence saying why there is none)."""
    if not want:
        return None, "Draw or choose a region to see its long record."
    name = want.get("name") or "the region"
    if want.get("problem"):
        return None, f"No budget for {name}: {want['problem']}"
    state = current()
    try:
        key = state.budget_key(want["source"], want["geojson"], want["method"],
                               want["correction"], want.get("attribution"))
    except (FluxfenceError, KeyError, TypeError, AttributeError) as exc:
        return None, problem(exc, "checking the request")
    if key != want.get("key"):
        return None, f"No budget for {name}: the page is older than the server's fields."
    ds = state.results.get(key)
    if ds is not None:
        return ds, ""
    job = state.jobs.get(key)
    if job is not None and job.status == FAILED:
        return None, f"No budget for {name}: {job.message}"
    if job is not None and job.status == CANCELLED:
        return None, f"The budget of {name} was cancelled."
    return None, f"Computing the budget of {name}…"


# ---------------------------------------------------------------------------------------------
# periods and climatology
# ---------------------------------------------------------------------------------------------
RECORDS_OUT = dict(
    series=Output("records-series", "figure"),
    table=Output("records-table", "children"),
    climatology=Output("records-climatology", "figure"),
    note=Output("records-climatology-note", "children"),
    message=Output("records-message", "children"),
    message_class=Output("records-message", "className"),
    term_options=Output("records-term", "options"),
)


@callback(
    output=RECORDS_OUT,
    inputs=dict(want=Input("want", "data"), _drawn=Input("period-label", "children"),
                choice=Input("records-period", "value"), term=Input("records-term", "value"),
                wy=Input("records-wy-start", "value")),
)
def show_records(want, _drawn, choice, term, wy):
    """The period series and table, and the climatology, of the chosen region."""
    ds, why = finished(want)
    if ds is None:
        blank = empty_figure(why)
        return dict(series=blank, table=None, climatology=blank, note="", message="",
                    message_class="notice", term_options=no_update)
    name = want.get("name") or "the region"
    options = [{"label": label, "value": v} for v, label in fr.period_terms(ds)]
    if term not in {o["value"] for o in options}:
        term = "p_minus_e"
    try:
        frame = fr.period_table(ds, choice or "event", water_year_start=int(wy or 10))
        series = fr.period_figure(ds, frame, term, name, choice or "event")
        table = period_table_view(ds, frame, term, name, choice or "event")
    except Exception as exc:  # noqa: BLE001 - one sentence, never a traceback
        blank = empty_figure(f"No periods for {name}.")
        return dict(series=blank, table=None, climatology=blank, note="",
                    message=problem(exc, "summing the budget over periods"),
                    message_class="notice error", term_options=options)
    try:
        from budget.periods import climatology

        clim = climatology(ds, water_year_start=int(wy or 10))
        clim_fig, note = fr.climatology_figure(clim, term, name), fr.climatology_note(clim, term)
    except Exception as exc:  # noqa: BLE001
        clim_fig = empty_figure(f"No climatology for {name}.")
        note = problem(exc, "computing the climatology")
    return dict(series=series, table=table, climatology=clim_fig, note=note, message="",
                message_class="notice", term_options=options)


def period_table_view(ds, frame, term, name, choice):
    """The period table: one row per period, low coverage flagged, and the values the
    plausibility checks flagged (counted per input variable) in its footer."""
    head, rows = fr.period_rows(frame, term)
    minimum = float(frame.attrs.get("min_coverage", 0.9))
    caption = html.Caption(f"{name} · by {dict(fr.PERIODS)[choice]} · periods covered less "
                           f"than {number(100 * minimum, 3)} % are flagged and not averaged")
    body = html.Tbody([
        html.Tr([html.Td(c, className="num" if k >= 3 else None) for k, c in enumerate(r["cells"])],
                className="flagged" if r["flagged"] else None,
                title="low coverage: totals and means left empty" if r["flagged"] else None)
        for r in rows
    ])
    foot = html.Tfoot(html.Tr(html.Td(fr.flagged_text(ds), colSpan=len(head),
                                      className="flag-counts")))
    return html.Table([caption, html.Thead(html.Tr([html.Th(h) for h in head])), body, foot],
                      className="totals records-periods")


# ---------------------------------------------------------------------------------------------
# the river: gauge upload, column, comparison
# ---------------------------------------------------------------------------------------------
class UploadedText(io.StringIO):
    """An uploaded CSV in memory that is named by its file name in the engine's messages."""

    def __init__(self, text: str, name: str):
        super().__init__(text)
        self.name = name

    def __str__(self) -> str:
        return self.name


def decode_gauge(contents: str, filename: str) -> str:
    """The text of an uploaded gauge CSV, within the server's upload cap."""
    try:
        _, b64 = contents.split(",", 1)
        data = base64.b64decode(b64, validate=True)
    except (ValueError, binascii.Error):
        raise RequestError(f"The upload of '{filename}' arrived damaged; upload the file "
                           "again.") from None
    limit = current().settings.upload_limit
    if len(data) > limit:
        raise RequestError(f"The gauge file '{filename}' is {len(data) / 2**20:.1f} MB, more "
                           f"than the {limit / 2**20:g} MB allowed for an upload; keep the "
                           "years you need or daily values only.")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise RequestError(f"The gauge file '{filename}' is not a text CSV (UTF-8); export it "
                           "from the spreadsheet as CSV.") from None


def read_held(held: dict, column: str | None):
    """The held gauge upload read through budget.discharge.read_gauge."""
    from budget.discharge import read_gauge

    stored = current().held_uploads.get(held.get("token"))
    if stored is None:
        raise RequestError("The uploaded gauge file has expired; upload it again.")
    name, text = stored
    return read_gauge(UploadedText(text, name), column=column)


GAUGE_IN = dict(
    held=Output("gauge-held", "data"),
    options=Output("gauge-column", "options"),
    value=Output("gauge-column", "value"),
    row=Output("gauge-column-row", "style"),
    message=Output("gauge-message", "children"),
    message_class=Output("gauge-message", "className"),
    contents=Output("gauge-upload", "contents"),
)


@callback(output=GAUGE_IN, inputs=dict(contents=Input("gauge-upload", "contents")),
          state=dict(filename=State("gauge-upload", "filename")), prevent_initial_call=True)
def gauge_uploaded(contents, filename):
    """Check an uploaded gauge CSV and hold it; several candidate columns offer a chooser."""
    from budget.discharge import discharge_columns

    if not contents:
        raise PreventUpdate
    name = Path(filename or "gauge.csv").name
    try:
        text = decode_gauge(contents, name)
        columns = discharge_columns(UploadedText(text, name))
        token = uuid.uuid4().hex
        current().held_uploads.put(token, (name, text))
        held = {"token": token, "name": name}
        read_held(held, columns[0] if len(columns) > 1 else None)  # bad rows: refused now
    except Exception as exc:  # noqa: BLE001 - one sentence, never a traceback
        return dict(held=None, options=[], value=None, row={"display": "none"},
                    message=problem(exc, "reading the gauge file"),
                    message_class="notice error", contents=None)
    several = len(columns) > 1
    return dict(held=held, options=[{"label": c, "value": c} for c in columns],
                value=columns[0] if columns else None,
                row={"display": "flex"} if several else {"display": "none"},
                message=(f"'{name}' has {len(columns)} columns besides its time; choose the "
                         "one holding discharge in m³/s.") if several else "",
                message_class="notice", contents=None)


@callback(
    output=dict(figure=Output("discharge-graph", "figure"),
                summary=Output("discharge-summary", "children"),
                table=Output("discharge-table", "children"),
                message=Output("gauge-message", "children", allow_duplicate=True),
                message_class=Output("gauge-message", "className", allow_duplicate=True)),
    inputs=dict(held=Input("gauge-held", "data"), column=Input("gauge-column", "value"),
                want=Input("want", "data"), _drawn=Input("period-label", "children"),
                wy=Input("records-wy-start", "value")),
    prevent_initial_call=True,
)
def show_discharge(held, column, want, _drawn, wy):
    """P − E of the chosen region against the held gauge record (budget.discharge.compare)."""
    from budget.discharge import compare

    if not held:
        raise PreventUpdate
    ds, why = finished(want)
    if ds is None:
        return dict(figure=empty_figure(why), summary="", table=None, message=no_update,
                    message_class=no_update)
    name = want.get("name") or "the region"
    try:
        gauge = read_held(held, column)
        table = compare(ds, gauge, water_year_start=int(wy or 10))
        table = table[table["region"] == table["region"].iloc[0]]
        figure = fr.discharge_figure(ds, gauge, table, name)
    except Exception as exc:  # noqa: BLE001 - bad dates, negative values, no overlap ...
        return dict(figure=empty_figure(f"No comparison for {name}."), summary="", table=None,
                    message=problem(exc, "comparing with the gauge record"),
                    message_class="notice error")
    head, rows = fr.discharge_rows(table)
    view = html.Table([html.Caption(f"{name} · {held.get('name')} · by water year"),
                       html.Thead(html.Tr([html.Th(h) for h in head])),
                       html.Tbody([html.Tr([html.Td(c, className="num" if k else None)
                                            for k, c in enumerate(r)]) for r in rows])],
                      className="totals records-discharge")
    return dict(figure=figure, summary=f"{name}: {fr.discharge_summary(table)}", table=view,
                message="", message_class="notice")


# ---------------------------------------------------------------------------------------------
# several regions at once
# ---------------------------------------------------------------------------------------------
@callback(Output("overlay-regions", "options"), Output("overlay-regions", "value"),
          Input("regions", "data"), State("overlay-regions", "value"))
def overlay_choices(regions, ticked):
    """The region list as tick boxes; removed regions drop out of the overlay."""
    ids = [r["id"] for r in regions or []]
    options = [{"label": r["name"], "value": r["id"]} for r in regions or []]
    return options, [i for i in (ticked or []) if i in ids]


@callback(
    Output("overlay-graph", "figure"),
    Output("overlay-poll", "disabled"),
    Input("overlay-regions", "value"),
    Input("overlay-poll", "n_intervals"),
    Input("units", "value"),
    Input("source", "value"),
    Input("method", "value"),
    Input("correction", "value"),
    Input("insight-options", "data"),
    State("regions", "data"),
)
def show_overlay(ticked, _tick, units, source_id, method, correction, attribution, regions):
    """The ticked regions' P − E on one axis, each under its own name; budgets not yet
    computed are started (the same jobs and cache as the chosen region's)."""
    from .callbacks import start_budget

    state = current()
    by_id = {r["id"]: r for r in regions or []}
    series, pending, failed = [], [], []
    for rid in ticked or []:
        rec = by_id.get(rid)
        if rec is None:
            continue
        want = {"source": str(source_id), "method": method, "correction": correction,
                "region": rid, "name": rec["name"], "geojson": rec["geojson"],
                "attribution": attribution}
        try:
            key = state.budget_key(source_id, rec["geojson"], method, correction, attribution)
        except FluxfenceError as exc:
            failed.append(f"{rec['name']} ({exc})")
            continue
        ds = state.results.get(key)
        if ds is None:
            job = state.jobs.get(key) or start_budget(state, want, key)
            if job.status in (FAILED, CANCELLED):
                failed.append(f"{rec['name']} ({job.message or 'cancelled'})")
            else:
                pending.append(rec["name"])
            continue
        series.append((rec["name"], ds))
    try:
        figure = fr.overlay_figure(series, "p_minus_e", units or "mm/day", pending=pending,
                                   failed=failed)
    except Exception as exc:  # noqa: BLE001
        figure = empty_figure(problem(exc, "overlaying the regions"))
    return figure, not pending
