"""Plotly builders for where the water comes from: layers by edge, mean flow against transient
eddies, the event catalogue and datasets side by side.

Pure functions of data (a budget Dataset from budget.ledger.compute, the split of
budget.eddies.decompose, the catalogue of budget.events.find_events, a stack of
budget.compare.stack); no Dash imports.  Units are in every axis title.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from app.figures import ACCENT, FONT, GRID, INK, MUTED, PAPER, WARM, empty_figure

#: Layer colours, surface (dark) to top (light): a sequential ramp of our own, readable when
#: stacked.
LAYER_COLOURS = ["#1f3b4d", "#2a5a6e", "#35798a", "#4d979c", "#74b3a5", "#a3cdb0", "#d2e5c6", "#eef3dc"]
DATASET_COLOURS = [ACCENT, WARM, "#5d4b8a", "#6b8e23", "#8c564b", "#3b4a57"]

SAMPLING_NOTE = (
    "The split depends on the sampling interval: fields sampled daily instead of 6-hourly miss "
    "much of the transient-eddy part (Seager and Henderson 2013, J. Climate 26)."
)


SHORT_SAMPLING_NOTE = "period means; the split depends on the sampling interval (Seager and Henderson 2013)"


def _layout(fig: go.Figure, title: str, **extra) -> go.Figure:
    fig.update_layout(
        title=dict(text=title, x=0.01, font=dict(size=14)),
        font=dict(family=FONT, color=INK, size=12), paper_bgcolor=PAPER, plot_bgcolor=PAPER,
        margin=dict(l=70, r=20, t=60, b=90), legend=dict(orientation="h", y=-0.32, x=0),
        **extra,
    )
    fig.update_xaxes(gridcolor=GRID, zerolinecolor=MUTED)
    fig.update_yaxes(gridcolor=GRID, zerolinecolor=MUTED)
    return fig


def _period_mean(da, start: int, end: int | None):
    sub = da.isel(time=slice(start, end))
    return sub.mean("time", skipna=True)


def layer_edge_figure(budget, start: int = 0, end: int | None = None, name: str | None = None) -> go.Figure:
    """Stacked bars: the period-mean import of each layer through each edge (kg/s)."""
    if "layer_edge_import" not in budget:
        return empty_figure("No layers in this budget: choose layer bounds to see the import by height.")
    mean = _period_mean(budget["layer_edge_import"], start, end)  # (layer, edge)
    edges = [str(e) for e in budget["edge"].values]
    fig = go.Figure()
    for i, layer in enumerate(budget["layer"].values):
        fig.add_bar(x=edges, y=mean.sel(layer=layer).values, name=str(layer),
                    marker_color=LAYER_COLOURS[i % len(LAYER_COLOURS)],
                    hovertemplate="edge %{x}<br>" + str(layer) + ": %{y:.3s} kg/s<extra></extra>")
    who = f" — {name}" if name else ""
    return _layout(fig, f"Period-mean import by layer and edge{who}", barmode="relative",
                   xaxis_title="", yaxis_title="import (kg/s, + in)")


def eddy_figure(split, name: str | None = None) -> go.Figure:
    """Bars of the mean-flow and transient-eddy parts of the import, per edge and in total."""
    edges = [str(e) for e in split["edge"].values] + ["total"]
    fig = go.Figure()
    for part, colour, label in (("mean_flow", ACCENT, "mean flow"), ("transient_eddy", WARM, "transient eddies")):
        vals = list(split["edge_import"].sel(part=part).values) + [float(split["vapour_import"].sel(part=part))]
        fig.add_bar(x=edges, y=vals, name=label, marker_color=colour,
                    hovertemplate="%{x}: %{y:.3s} kg/s<extra>" + label + "</extra>")
    who = f" — {name}" if name else ""
    fig = _layout(fig, f"Mean flow and transient eddies{who}", barmode="group",
                  xaxis_title="", yaxis_title="import (kg/s, + in)")
    fig.add_annotation(text=SHORT_SAMPLING_NOTE, xref="paper", yref="paper", x=0, y=1.0, yanchor="bottom",
                       showarrow=False, font=dict(size=10, color=MUTED), align="left")
    return fig


def event_rows(events) -> list[dict]:
    """Rows for a sortable table of the event catalogue (numbers rounded for reading)."""
    rows = []
    for i, r in enumerate(events.to_dict("records")):
        rows.append({
            "event": i + 1,
            "start": r["start"], "end": r["end"],
            "duration_h": round(float(r["duration_h"]), 1),
            "total_p_minus_e_mm": round(float(r["total_p_minus_e_mm"]), 2),
            "peak_p_minus_e_mm_day": round(float(r["peak_p_minus_e_mm_day"]), 2),
            "mean_boundary_ivt_kg_m_s": None if not np.isfinite(r["mean_boundary_ivt_kg_m_s"]) else round(float(r["mean_boundary_ivt_kg_m_s"]), 1),
            "top_edge": r["top_edge"], "top_layer": r["top_layer"],
            "ar_share_percent": None if not np.isfinite(r["ar_share"]) else round(100 * float(r["ar_share"]), 1),
        })
    return rows


EVENT_COLUMNS = [
    ("event", "#"), ("start", "start (UTC)"), ("end", "end (UTC)"), ("duration_h", "duration (h)"),
    ("total_p_minus_e_mm", "total P − E (mm)"), ("peak_p_minus_e_mm_day", "peak P − E (mm/day)"),
    ("mean_boundary_ivt_kg_m_s", "mean boundary IVT (kg m⁻¹ s⁻¹)"), ("top_edge", "main edge"),
    ("top_layer", "main layer"), ("ar_share_percent", "AR share (%)"),
]


def datasets_figure(stacked, variable: str = "p_minus_e", unit: str | None = None) -> go.Figure:
    """One line per dataset on the common time axis (named by the dataset), with the spread
    between them shaded; values in ``unit`` (default: the term's CSV unit) through the term
    catalogue (budget.terms)."""
    from budget import terms

    if variable not in stacked:
        return empty_figure(f"No {variable} in these budgets.")
    t = stacked["time"].values
    names = [str(d) for d in stacked["dataset"].values]
    areas = (stacked["region_area_m2"].values if "region_area_m2" in stacked.coords
             else np.full(len(names), float(stacked.attrs.get("region_area_m2", np.nan))))
    unit = unit or terms.term(variable).columns[0].unit  # the CSV's display unit
    v = np.array([terms.to_display(variable, stacked[variable].sel(dataset=d).values, unit, float(a))
                  for d, a in zip(stacked["dataset"].values, areas)])
    fig = go.Figure()
    lo, hi = np.nanmin(v, axis=0), np.nanmax(v, axis=0)
    fig.add_scatter(x=np.concatenate([t, t[::-1]]), y=np.concatenate([hi, lo[::-1]]), fill="toself",
                    fillcolor="rgba(107,119,128,0.18)", line=dict(width=0), name="spread (range)",
                    hoverinfo="skip")
    for i, name in enumerate(names):
        fig.add_scatter(x=t, y=v[i], mode="lines", name=name,
                        line=dict(color=DATASET_COLOURS[i % len(DATASET_COLOURS)], width=2))
    label = terms.term(variable).label
    return _layout(fig, f"{label} by dataset", xaxis_title="time (UTC)",
                   yaxis_title=terms.axis_title(variable, unit))


# ---------------------------------------------------------------------------------------------
# the selected period: step weights, atmospheric-river share, recycling, events as table rows
# ---------------------------------------------------------------------------------------------
def period_weights(budget, start: int, end: int) -> np.ndarray:
    """Interval length (s) of each step inside steps ``start..end`` (inclusive), 0 outside:
    steps are intervals as in budget.events (a value at tᵢ stands for [tᵢ, tᵢ₊₁))."""
    from budget.events import step_seconds

    dt = step_seconds(budget["time"].values)
    w = np.zeros_like(dt)
    w[int(start):int(end) + 1] = dt[int(start):int(end) + 1]
    return w


def ar_share_summary(budget, start: int, end: int) -> dict | None:
    """The atmospheric-river share of the period's inflow: in total and by the edge where it
    crossed (each edge's AR inflow over the region's whole inflow, so the edges add up to the
    total).  None when the budget carries no AR inflow."""
    if "ar_inflow" not in budget or "inflow" not in budget:
        return None
    from budget.attribution import ar_share

    w = period_weights(budget, start, end)
    total_in = float(np.nansum(budget["inflow"].values * w))
    edges = []
    if "ar_edge_inflow" in budget:
        ar_edge = budget["ar_edge_inflow"].transpose("time", "edge").values
        for k, e in enumerate(budget["edge"].values):
            part = float(np.nansum(ar_edge[:, k] * w))
            edges.append({"edge": str(e),
                          "share_percent": 100.0 * part / total_in if total_in > 0 else None})
    share = ar_share(budget, w)
    return {
        "share_percent": 100.0 * share if np.isfinite(share) else None,
        "threshold": budget["ar_inflow"].attrs.get("ar_ivt_threshold", ""),
        "mean_inflow_kg_s": total_in / float(w.sum()) if w.sum() > 0 else None,
        "edges": edges,
    }


def recycling_summary(budget, start: int, end: int) -> dict:
    """The bulk recycling ratio of the period (budget.recycling.period_ratio), or why there is
    none: {"ratio": float | None, "text": one sentence, "assumptions": text}."""
    from budget.errors import FluxfenceError
    from budget.recycling import ASSUMPTIONS, period_ratio

    try:
        out = period_ratio(budget, period_weights(budget, start, end))
    except FluxfenceError:
        return {"ratio": None, "assumptions": ASSUMPTIONS,
                "text": "No recycling ratio: it needs evaporation, and these fields carry "
                        "neither evaporation nor precipitation; serve field files that include "
                        "one of them."}
    ratio = out["recycling_ratio"]
    if not np.isfinite(ratio):
        return {"ratio": None, "assumptions": ASSUMPTIONS,
                "text": "No recycling ratio for this period: no water entered or evaporated "
                        "(E·A + 2·F_in is not positive)."}
    return {"ratio": float(ratio), "assumptions": ASSUMPTIONS,
            "text": f"Bulk recycling ratio ρ = {ratio:.3f} ({out['evaporation_source']}; mean "
                    f"E {out['mean_evaporation_kg_m2_s'] * 86400:.2f} mm/day, mean inflow "
                    f"{out['mean_inflow_kg_s']:.3g} kg/s)."}


def event_steps(times, start_iso: str, end_iso: str) -> tuple[int, int]:
    """First and last step index of an event from its ISO 8601 start and (interval) end."""
    t = np.asarray(times, dtype="datetime64[ns]")
    a = np.datetime64(start_iso.rstrip("Z"), "ns")
    b = np.datetime64(end_iso.rstrip("Z"), "ns")
    first = int(np.searchsorted(t, a, side="left"))
    last = int(np.searchsorted(t, b, side="left")) - 1
    first = min(max(first, 0), t.size - 1)
    return first, min(max(last, first), t.size - 1)


def event_table(budget, events) -> list[dict]:
    """``event_rows`` with the step range of each event (``first``, ``last``) and a row id, so
    that a click on a row can set the period."""
    rows = event_rows(events)
    times = budget["time"].values
    for row in rows:
        row["id"] = row["event"]
        row["first"], row["last"] = event_steps(times, row["start"], row["end"])
    return rows
