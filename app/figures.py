"""Plotly figure builders for the dashboard: the shared look, and the budget's panels.

Pure functions of data: each takes xarray objects (following the contracts in DEVELOPERS.md)
and plain Python values, and returns a ``plotly.graph_objects.Figure`` (or plain rows for the
period table).  No Dash imports, no callbacks, no files read here except through arguments;
the coastline lines come in as an argument.  The map is in app/figures_map.py, the numbers
and the period and edge tables in app/figures_table.py; both share this module's look.

Sign conventions follow the engine: import and convergence are positive when the region gains
moisture.  Units are written into every axis and colour-bar title.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from budget import terms

# ---------------------------------------------------------------------------------------------
# Look: a calm palette of our own
# ---------------------------------------------------------------------------------------------
INK = "#23303b"
MUTED = "#6b7780"
PAPER = "#fbfaf7"
GRID = "#e4e1da"
ACCENT = "#2a7f86"  # teal: the active region, import
WARM = "#b5651d"  # warm brown: export / divergence
REGION_OTHER = "#3b4a57"
FONT = "system-ui, -apple-system, 'Segoe UI', 'Noto Sans', 'DejaVu Sans', sans-serif"

# Magnitudes: perceptually uniform sequential scales.  Convergence: a diverging scale,
# brown where the column dries (divergence), blue-green where it gains moisture.
def named_scale(name: str) -> list:
    """A named Plotly colour scale as explicit [position, colour] pairs (the figures skip
    Plotly's validation, which is what would expand a name)."""
    from plotly.colors import get_colorscale

    return [[float(p), c] for p, c in get_colorscale(name)]


CONVERGENCE_SCALE = named_scale("BrBG")

UNIT_LABELS = {"mm/day": "mm/day", "kg/s": "kg/s", "m3/s": "m³/s"}
# the total over a period of a rate in these units, and the time base of the rate
TOTAL_LABELS = {"mm/day": ("mm", 86400.0), "kg/s": ("kg", 1.0), "m3/s": ("m³", 1.0)}

class Fig:
    """A figure assembled as plain dicts and handed to Plotly once, without its property
    validation (which costs ~0.1 s per figure and dominated the dashboard's response)."""

    def __init__(self, *traces):
        self.traces = list(traces)
        self.layout: dict = {}

    def add_trace(self, trace: dict, row: int | None = None, col: int | None = None):
        if row and row > 1:
            trace = dict(trace, xaxis=f"x{row}", yaxis=f"y{row}")
        self.traces.append(trace)

    def add_annotation(self, **note):
        self.layout.setdefault("annotations", []).append(note)

    def update_layout(self, **values):
        for key, value in values.items():
            if key == "annotations":
                self.layout.setdefault("annotations", []).extend(value)
            elif isinstance(value, dict) and isinstance(self.layout.get(key), dict):
                self.layout[key] = {**self.layout[key], **value}
            else:
                self.layout[key] = value

    def _axes(self, which, row, values):
        name = which if not row or row == 1 else f"{which}{row}"
        names = [name] if row else [k for k in self.layout if k.startswith(which)] or [which]
        for n in names:
            axis = dict(self.layout.get(n, {}))
            if "title_text" in values:
                values = dict(values)
                axis["title"] = dict(text=values.pop("title_text"))
            axis.update(values)
            self.layout[n] = axis

    def update_xaxes(self, row=None, col=None, **values):
        self._axes("xaxis", row, values)

    def update_yaxes(self, row=None, col=None, **values):
        self._axes("yaxis", row, values)

    def done(self) -> go.Figure:
        return go.Figure({"data": self.traces, "layout": self.layout}, _validate=False)


def base_layout(fig: Fig, **extra) -> None:
    layout = dict(
        font=dict(family=FONT, color=INK, size=12),
        paper_bgcolor=PAPER,
        plot_bgcolor=PAPER,
        margin=dict(l=60, r=20, t=40, b=45),
        hoverlabel=dict(font=dict(family=FONT)),
    )
    layout.update(extra)
    fig.update_layout(**layout)


def convert(values, unit: str, area_m2: float):
    """Display conversion through the engine's single converter."""
    from budget.units import convert

    return convert(values, unit, area_m2)


def symmetric_limit(values, quantile: float = 0.99) -> float:
    """A zero-centred colour limit: a high quantile of |values| (robust to single spikes)."""
    finite = np.abs(np.asarray(values, dtype=float))
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return 1.0
    limit = float(np.quantile(finite, quantile))
    return limit if limit > 0 else (float(finite.max()) or 1.0)


def short_edge_name(name: str) -> str:
    """"edge 7" → "7"; box edges keep their letters (S, E, N, W)."""
    name = str(name)
    return name[5:] if name.startswith("edge ") else name


# ---------------------------------------------------------------------------------------------
# The budgets on screen: which variables each one reads
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Rate:
    var: str
    color: str
    dash: str = "solid"

    @property
    def label(self) -> str:  # the legend entry of the term catalogue (budget/terms.py)
        return terms.term(self.var).legend


@dataclass(frozen=True)
class BudgetView:
    """What the series, tables, profile and curtain show for one budget."""

    title: str
    noun: str  # what crosses the boundary
    content: str  # area-mean column content (kg m-2)
    content_label: str
    rates: tuple[Rate, ...]
    edge: str  # import through each edge (kg s-1), time × edge
    density: str  # import per unit boundary length (kg m-1 s-1), time × piece
    curtain: str  # per unit length and pressure (kg m-1 s-1 Pa-1), time × level × piece


VIEWS = {
    "vapour": BudgetView(
        "water-vapour budget", "moisture", "precipitable_water", "W (area mean)",
        (Rate("boundary_convergence", ACCENT), Rate("area_convergence", "#6fa8b0", "dash"),
         Rate("pw_tendency", MUTED, "dot"), Rate("p_minus_e", WARM)),
        "edge_import", "boundary_import_density", "normal_flux_density"),
    "dry": BudgetView(
        "dry-air mass budget", "dry air", "dry_air_mass", "dry-air mass (area mean)",
        (Rate("dry_air_convergence", ACCENT), Rate("dry_air_tendency", MUTED, "dot"),
         Rate("dry_air_residual", WARM)),
        "dry_air_edge_import", "dry_air_import_density", "dry_air_normal_flux_density"),
    "total": BudgetView(
        "total-water budget", "water", "total_water_content", "total water (area mean)",
        (Rate("total_water_convergence", ACCENT), Rate("total_water_tendency", MUTED, "dot"),
         Rate("p_minus_e_total_water", WARM)),
        "total_water_edge_import", "total_water_import_density", "total_water_normal_flux_density"),
}


def available_views(budget) -> list[str]:
    """The budgets this result can show (dry air needs level inputs, total water condensate)."""
    return [k for k, v in VIEWS.items() if v.content in budget]


def budget_view(kind: str) -> BudgetView:
    if kind not in VIEWS:
        raise ValueError(f"unknown budget {kind!r}")
    return VIEWS[kind]


def pressure_rate(values):
    """kg m-2 s-1 → the equivalent surface-pressure tendency (budget.mass, Pa s-1) shown in
    hPa/day (budget.units)."""
    from budget.mass import residual_as_pressure_tendency
    from budget.units import pa_s_to_hpa_day

    return pa_s_to_hpa_day(residual_as_pressure_tendency(values))


#: Rate units of the dry-air budget: the equivalent surface-pressure tendency, or the mass
#: per second over the whole region (mm/day and m³/s are liquid water, not air).
DRY_UNITS = ("hPa/day", "kg/s")


def rate_unit(units: str, kind: str) -> str:
    """The unit the rates of budget ``kind`` are shown in, from the selector's ``units``.

    Water: mm/day, kg/s or m3/s; dry air: hPa/day or kg/s.  A unit of the other budget (the
    selector not yet switched) falls back to that budget's first unit.
    """
    allowed = DRY_UNITS if kind == "dry" else tuple(UNIT_LABELS)
    if units in allowed:
        return units
    if units in UNIT_LABELS or units in DRY_UNITS:
        return allowed[0]
    raise ValueError(f"unknown units {units!r}")


def rate_in(budget, var: str, units: str, kind: str, area: float):
    """A rate series (kg m-2 s-1) for display in ``rate_unit(units, kind)``."""
    values = budget[var].values
    if kind == "dry":
        if rate_unit(units, kind) == "kg/s":
            return np.asarray(values, float) * area
        return np.asarray(pressure_rate(values), float)
    return np.asarray(convert(values, units, area), float)


def _rate_unit(units: str, kind: str) -> str:
    return terms.unit_label(rate_unit(units, kind))


def panel_title(what: str, name: str | None, time_label: str | None = None) -> dict:
    """A panel title naming the region (and the time shown) on a second, smaller line."""
    where = f"{name or 'the region'}" + (f" · {time_label}" if time_label else "")
    return dict(text=f"{what}<br><span style='font-size:12px'>{where}</span>", x=0.01,
                y=1.0, yref="container", yanchor="top", pad=dict(t=24), font=dict(size=14))


def note_figure(text: str, title: dict | None = None) -> go.Figure:
    fig = Fig()
    fig.add_annotation(text=text, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5,
                       font=dict(color=MUTED))
    base_layout(fig, xaxis=dict(visible=False), yaxis=dict(visible=False),
                 **({"title": title} if title else {}))
    return fig.done()


# ---------------------------------------------------------------------------------------------
# Boundary profile and curtain
# ---------------------------------------------------------------------------------------------
def _vline(x, line: dict, xref: str = "x", yref: str = "y") -> dict:
    """A vertical line across one plot as a layout shape (cheaper than Figure.add_vline)."""
    return dict(type="line", x0=x, x1=x, y0=0, y1=1, xref=xref, yref=f"{yref} domain",
                line=line, layer="above")


def _hline(y, line: dict, xref: str = "x", yref: str = "y") -> dict:
    return dict(type="line", x0=0, x1=1, y0=y, y1=y, xref=f"{xref} domain", yref=yref,
                line=line, layer="below")


def _vertex_marks(budget, most: int = 16) -> tuple[list, list]:
    """(shapes, annotations): dotted lines at the region's vertices and the edge names between
    them (the same names as the map and the edge table); with many edges every k-th is named."""
    if "vertex_distance" not in budget.coords and "vertex_distance" not in budget:
        return [], []
    vd = np.asarray(budget["vertex_distance"].values, dtype=float) / 1000.0
    shapes = [_vline(float(x), dict(color=MUTED, width=1, dash="dot")) for x in vd]
    names = [str(n) for n in budget["edge"].values] if "edge" in budget.coords else []
    if not names or len(names) != len(vd):
        return shapes, []
    if "edge_length" in budget.coords:
        end = float(vd[0] + np.sum(budget["edge_length"].values) / 1000.0)
    else:
        end = float(np.max(budget["piece_distance"].values) / 1000.0)
    stops = list(vd) + [end]
    step = max(1, int(math.ceil(len(names) / most)))
    notes = [dict(x=float((stops[i] + stops[i + 1]) / 2), text=short_edge_name(names[i]),
                  showarrow=False, font=dict(size=11, color=MUTED), yanchor="bottom", y=1.0,
                  yref="paper") for i in range(0, len(names), step)]
    return shapes, notes


def profile_figure(budget, time_index: int, name: str | None = None,
                   time_label: str | None = None, kind: str = "vapour") -> go.Figure:
    """Import across the boundary per unit length, along the boundary, at one time."""
    view = budget_view(kind)
    title = panel_title(f"{view.noun.capitalize()} crossing the boundary", name, time_label)
    if view.density not in budget:
        return note_figure(f"the engine does not yet give the {view.noun} import along the "
                            "boundary; see the table for its total", title)
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    dens = np.asarray(budget[view.density].isel(time=time_index).values, float)
    fig = Fig()
    fig.add_trace(dict(type="scatter", x=dist, y=np.where(dens > 0, dens, 0.0), mode="lines",
                             line=dict(width=0), fill="tozeroy",
                             fillcolor="rgba(42,127,134,0.30)", hoverinfo="skip",
                             name=f"{view.noun} coming in"))
    fig.add_trace(dict(type="scatter", x=dist, y=np.where(dens < 0, dens, 0.0), mode="lines",
                             line=dict(width=0), fill="tozeroy",
                             fillcolor="rgba(181,101,29,0.28)", hoverinfo="skip",
                             name=f"{view.noun} going out"))
    fig.add_trace(dict(type="scatter", 
        x=dist, y=dens, mode="lines", line=dict(color=INK, width=1.6), name="import density",
        hovertemplate="%{x:.0f} km along the boundary<br>%{y:.4g} kg m⁻¹ s⁻¹<extra></extra>",
    ))
    shapes, notes = _vertex_marks(budget)
    # no legend: the fills are named by the axis title, and the edge names sit above the plot
    base_layout(fig, showlegend=False, margin=dict(l=60, r=20, t=64, b=40),
                 shapes=[_hline(0, dict(color=MUTED, width=1))] + shapes, annotations=notes,
                 title=title)
    fig.update_xaxes(title_text="distance along the boundary (km); dotted: vertices",
                     gridcolor=GRID, zeroline=False)
    fig.update_yaxes(title_text="in (+) / out (−), kg m⁻¹ s⁻¹", gridcolor=GRID, zeroline=False)
    return fig.done()


def curtain_figure(budget, time_index: int, name: str | None = None,
                   time_label: str | None = None, kind: str = "vapour") -> go.Figure:
    """Inward flux by distance along the boundary × pressure (level inputs only)."""
    view = budget_view(kind)
    title = panel_title(f"Inward {view.noun} flux by height", name, time_label)
    if view.curtain not in budget:
        if "normal_flux_density" not in budget:
            return note_figure("the height profile needs inputs on levels (u, v, q); "
                                "these fields are column totals", title)
        return note_figure(f"the engine does not yet give the {view.noun} flux by height",
                            title)
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    level_hpa = np.asarray(budget["level"].values, dtype=float) / 100.0
    da = budget[view.curtain].isel(time=time_index).transpose("level", "piece")
    z = np.asarray(da.values, dtype=float) * 100.0  # per Pa -> per hPa
    limit = symmetric_limit(z)
    fig = Fig(dict(type="heatmap", 
        x=dist, y=level_hpa, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit,
        zmax=limit,
        colorbar=dict(title=dict(text="kg m⁻¹ s⁻¹ hPa⁻¹ (in > 0)", side="right"),
                      thickness=12, outlinewidth=0),
        hovertemplate="%{x:.0f} km, %{y:.0f} hPa<br>%{z:.3g} kg m⁻¹ s⁻¹ hPa⁻¹"
        "<extra></extra>",
        name="inward flux",
    ))
    shapes, notes = _vertex_marks(budget)
    base_layout(fig, title=title, margin=dict(l=60, r=20, t=64, b=40), shapes=shapes,
                 annotations=notes)
    fig.update_xaxes(title_text="distance along the boundary (km)", showgrid=False)
    fig.update_yaxes(title_text="pressure (hPa)", autorange="reversed", showgrid=False)
    return fig.done()


# ---------------------------------------------------------------------------------------------
# Budget series
# ---------------------------------------------------------------------------------------------
SERIES_RATES = [(r.var, r.label, r.color, r.dash) for r in VIEWS["vapour"].rates]


def series_figure(budget, units: str = "mm/day", time_index: int | None = None,
                  name: str | None = None, kind: str = "vapour") -> go.Figure:
    """The column content and the budget rates over time (water rates in ``units``; dry air
    in hPa/day, the equivalent surface-pressure tendency)."""
    units = rate_unit(units, kind)
    view = budget_view(kind)
    region = name or budget.attrs.get("region_name") or "the region"
    unit = _rate_unit(units, kind)
    title = panel_title(f"{view.title.capitalize()} (rates in {unit})", region)
    if view.content not in budget:
        return note_figure(f"this result has no {view.title}", title)
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values)
    fig = Fig()  # two rows sharing the time axis
    fig.update_layout(xaxis=dict(anchor="y", matches="x2", showticklabels=False),
                      yaxis=dict(domain=[0.678, 1.0], anchor="x"),
                      xaxis2=dict(anchor="y2"), yaxis2=dict(domain=[0.0, 0.598], anchor="x2"))
    content = np.asarray(budget[view.content].values, float)
    content_unit = "kg m⁻²"
    if kind == "dry":  # dry-air column mass as the pressure it exerts: μ g / 100
        from budget.constants import STANDARD_GRAVITY

        content, content_unit = content * STANDARD_GRAVITY / 100.0, "hPa"
    fig.add_trace(dict(type="scatter", 
        x=times, y=content, mode="lines+markers" if len(times) <= 60 else "lines",
        marker=dict(size=4), line=dict(color="#3d5a92", width=2), name=view.content_label,
        hovertemplate=f"%{{x|%Y-%m-%d %H:%M}}<br>%{{y:.5g}} {content_unit}<extra></extra>",
    ), row=1, col=1)
    for rate in view.rates:
        if rate.var not in budget:
            continue
        y = rate_in(budget, rate.var, units, kind, area)
        fig.add_trace(dict(type="scatter", 
            x=times, y=y, mode="lines", name=rate.label,
            line=dict(color=rate.color, width=2, dash=rate.dash),
            hovertemplate=f"%{{x|%Y-%m-%d %H:%M}}<br>{rate.label} %{{y:.4g}} {unit}"
            "<extra></extra>",
        ), row=2, col=1)
    shapes = [_hline(0, dict(color=GRID, width=1), "x2", "y2")]
    if time_index is not None and len(times):
        t = times[min(max(time_index, 0), len(times) - 1)].isoformat()
        marker = dict(color=INK, width=1.2, dash="dash")
        shapes += [_vline(t, marker, "x", "y"), _vline(t, marker, "x2", "y2")]
    # the legend sits above the plot, right of the title, clear of every axis title
    base_layout(fig, showlegend=True, hovermode="x unified", title=title, shapes=shapes,
                 margin=dict(l=60, r=20, t=88, b=45),
                 legend=dict(orientation="h", x=0, xanchor="left", y=1.0, yanchor="bottom",
                             font=dict(size=11), bgcolor="rgba(0,0,0,0)"))
    fig.update_yaxes(title_text=f"{view.content_label.split(' (')[0]} ({content_unit})",
                     gridcolor=GRID, row=1, col=1)
    fig.update_yaxes(title_text=f"rate ({unit})", gridcolor=GRID, row=2, col=1)
    fig.update_xaxes(gridcolor=GRID)
    fig.update_xaxes(title_text="time (UTC)", row=2, col=1)
    return fig.done()


# ---------------------------------------------------------------------------------------------
# Numbers and the period table
# ---------------------------------------------------------------------------------------------
def empty_figure(text: str) -> go.Figure:
    """A blank panel carrying one line of text (no data yet, or why there is none)."""
    return note_figure(text)
