"""Plotly figure builders for the dashboard.

Pure functions of data: each takes xarray objects (following the contracts in DEVELOPERS.md)
and plain Python values, and returns a ``plotly.graph_objects.Figure`` (or plain rows for the
period table).  No Dash imports, no callbacks, no files read here except through arguments;
the coastline lines come in as an argument (see :func:`load_coastline`).

Sign conventions follow the engine: import and convergence are positive when the region gains
moisture.  Units are written into every axis and colour-bar title.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

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
def _scale(name: str) -> list:
    """A named Plotly colour scale as explicit [position, colour] pairs (the figures skip
    Plotly's validation, which is what would expand a name)."""
    from plotly.colors import get_colorscale

    return [[float(p), c] for p, c in get_colorscale(name)]


IVT_SCALE = _scale("cividis")
PW_SCALE = [
    [0.0, "#fdfdcc"], [0.125, "#c9ebb1"], [0.25, "#91d8a3"], [0.375, "#66c2a3"],
    [0.5, "#51a8a2"], [0.625, "#488d9d"], [0.75, "#407598"], [0.875, "#3d5a92"],
    [1.0, "#2a3a6b"],
]  # after cmocean "deep" (perceptually uniform, light = dry, dark = moist)
CONVERGENCE_SCALE = _scale("BrBG")

UNIT_LABELS = {"mm/day": "mm/day", "kg/s": "kg/s", "m3/s": "m³/s"}
# the total over a period of a rate in these units, and the time base of the rate
TOTAL_LABELS = {"mm/day": ("mm", 86400.0), "kg/s": ("kg", 1.0), "m3/s": ("m³", 1.0)}

MAP_FIELDS = {
    "ivt": ("Integrated vapour transport", "kg m⁻¹ s⁻¹"),
    "pw": ("Precipitable water", "kg m⁻² (= mm)"),
    "convergence": ("Vapour-flux convergence", "mm/day"),
}


class _Fig:
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


def _base_layout(fig: _Fig, **extra) -> None:
    layout = dict(
        font=dict(family=FONT, color=INK, size=12),
        paper_bgcolor=PAPER,
        plot_bgcolor=PAPER,
        margin=dict(l=60, r=20, t=40, b=45),
        hoverlabel=dict(font=dict(family=FONT)),
    )
    layout.update(extra)
    fig.update_layout(**layout)


def _convert(values, unit: str, area_m2: float):
    """Display conversion through the engine's single converter."""
    from budget.units import convert

    return convert(values, unit, area_m2)


# ---------------------------------------------------------------------------------------------
# Coastline
# ---------------------------------------------------------------------------------------------
def load_coastline(path: str | Path) -> list[np.ndarray]:
    """Read the shipped coastline GeoJSON into a list of (n, 2) lon/lat arrays."""
    with open(path, encoding="utf-8") as handle:
        collection = json.load(handle)
    lines = []
    for feature in collection["features"]:
        geometry = feature["geometry"]
        parts = (
            geometry["coordinates"]
            if geometry["type"] == "MultiLineString"
            else [geometry["coordinates"]]
        )
        lines.extend(np.asarray(part, dtype=float) for part in parts)
    return lines


def _coastline_xy(lines: Sequence[np.ndarray], lon_min: float, lon_max: float):
    """Coastline in the data's longitude frame, as x/y lists with None between lines.

    The shipped lines are in −180..180; a grid in 0..360 (or running past 180) gets the lines
    shifted by ±360 as needed, and a line is broken wherever a shift makes it jump.
    """
    xs: list = []
    ys: list = []
    shifts = [s for s in (-360.0, 0.0, 360.0) if lon_min <= 180 + s and lon_max >= -180 + s]
    for shift in shifts:
        for line in lines:
            lon = line[:, 0] + shift
            lat = line[:, 1]
            keep = (lon >= lon_min - 5) & (lon <= lon_max + 5)
            if not keep.any():
                continue
            lon = np.where(keep, lon, np.nan)
            xs.extend(lon.tolist())
            ys.extend(lat.tolist())
            xs.append(None)
            ys.append(None)
    xs = [None if (v is not None and math.isnan(v)) else v for v in xs]
    ys = [None if x is None else y for x, y in zip(xs, ys)]
    return xs, ys


# ---------------------------------------------------------------------------------------------
# Map
# ---------------------------------------------------------------------------------------------
def symmetric_limit(values, quantile: float = 0.99) -> float:
    """A zero-centred colour limit: a high quantile of |values| (robust to single spikes)."""
    finite = np.abs(np.asarray(values, dtype=float))
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return 1.0
    limit = float(np.quantile(finite, quantile))
    return limit if limit > 0 else (float(finite.max()) or 1.0)


def field_values(snapshot, field: str) -> np.ndarray:
    """The displayed values of a map field (convergence in mm/day)."""
    if field == "ivt":
        return np.asarray(snapshot["ivt"].values, dtype=float)
    if field == "pw":
        return np.asarray(snapshot["precipitable_water"].values, dtype=float)
    return np.asarray(_convert(snapshot["convergence"].values, "mm/day", 1.0), dtype=float)


def color_limits(values, field: str) -> tuple[float, float]:
    """Robust colour limits of one snapshot: 1st–99th percentile, or ±99th of |x| (convergence)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return (0.0, 1.0)
    if field == "convergence":
        lim = symmetric_limit(v)
        return (-lim, lim)
    return (float(np.quantile(v, 0.01)), float(np.quantile(v, 0.99)))


def _arrows(lon, lat, u, v, target: int = 16):
    """Quiver arrows as line segments: subsample to about `target` arrows across the map."""
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    step_x = max(1, int(round(lon.size / target)))
    step_y = max(1, int(round(lat.size / (target * max(lat.size / lon.size, 0.3)))))
    step_y = max(step_y, 1)
    sub_lon = lon[::step_x]
    sub_lat = lat[::step_y]
    su = np.asarray(u, dtype=float)[::step_y, ::step_x]
    sv = np.asarray(v, dtype=float)[::step_y, ::step_x]
    speed = np.hypot(su, sv)
    ref = float(np.nanquantile(speed, 0.95)) if np.isfinite(speed).any() else 0.0
    if not ref > 0:
        return [], [], 0.0, 0.0
    spacing = min(
        abs(float(np.median(np.diff(sub_lon)))) if sub_lon.size > 1 else 1.0,
        abs(float(np.median(np.diff(sub_lat)))) if sub_lat.size > 1 else 1.0,
    )
    scale = 0.9 * spacing / ref  # degrees per (kg m-1 s-1)
    xs: list = []
    ys: list = []
    glon, glat = np.meshgrid(sub_lon, sub_lat)
    for x0, y0, du, dv in zip(glon.ravel(), glat.ravel(), su.ravel(), sv.ravel()):
        if not (np.isfinite(du) and np.isfinite(dv)) or math.hypot(du, dv) < 0.05 * ref:
            continue
        x1, y1 = x0 + du * scale, y0 + dv * scale
        ang = math.atan2(dv, du)
        head = 0.3 * math.hypot(x1 - x0, y1 - y0)
        hx1 = x1 + head * math.cos(ang + math.pi + 0.45)
        hy1 = y1 + head * math.sin(ang + math.pi + 0.45)
        hx2 = x1 + head * math.cos(ang + math.pi - 0.45)
        hy2 = y1 + head * math.sin(ang + math.pi - 0.45)
        xs.extend([x0, x1, hx1, None, x1, hx2, None])
        ys.extend([y0, y1, hy1, None, y1, hy2, None])
    return xs, ys, ref, scale


def _ring_copies(lon, lat, lon_min: float, lon_max: float):
    """A closed ring, plus copies shifted by ±360° when those fall on the map."""
    lon = list(lon) + [lon[0]]
    lat = list(lat) + [lat[0]]
    out = []
    for shift in (-360.0, 0.0, 360.0):
        shifted = [x + shift for x in lon]
        if max(shifted) >= lon_min and min(shifted) <= lon_max:
            out.append((shifted, lat))
    return out


def short_edge_name(name: str) -> str:
    """"edge 7" → "7"; box edges keep their letters (S, E, N, W)."""
    name = str(name)
    return name[5:] if name.startswith("edge ") else name


def edge_labels(record: dict, most: int = 40) -> list[tuple[float, float, str]]:
    """(lon, lat, label) at the middle of each edge of a region record (the same names as
    the edge table); with more than ``most`` edges every k-th is labelled."""
    out = []
    names = record.get("edge_names") or []
    for k, (rlon, rlat) in enumerate(record.get("rings", [])):
        ring_names = names[k] if k < len(names) else []
        n = len(rlon)
        for i in range(n):
            label = ring_names[i] if i < len(ring_names) else f"{i + 1}"
            j = (i + 1) % n
            out.append(((rlon[i] + rlon[j]) / 2, (rlat[i] + rlat[j]) / 2,
                        short_edge_name(label)))
    step = max(1, int(math.ceil(len(out) / most)))
    return out[::step]


def map_figure(
    snapshot,
    field: str = "ivt",
    *,
    coastline: Sequence[np.ndarray] = (),
    regions: Iterable[dict] = (),
    active_region: str | None = None,
    vertices: Sequence[Sequence[float]] = (),
    time_label: str = "",
    arrows: bool = True,
    dragmode: str = "drawrect",
    uirevision: str = "map",
    color_range: tuple[float, float] | None = None,
) -> go.Figure:
    """The map of one column field at one time.

    snapshot: a Dataset on (lat, lon) with ivt_u, ivt_v, ivt, precipitable_water, convergence
    (budget.maps.column_snapshot).  field: "ivt", "pw" or "convergence".  regions: dicts with
    "id", "name" and "rings" (a list of (lon list, lat list) rings, exterior first).  vertices:
    points clicked so far for a region being built.  color_range: fixed colour limits in
    the displayed units (so the scale holds still while stepping through time); for
    convergence only its larger magnitude is used, centred on zero.
    """
    if field not in MAP_FIELDS:
        raise ValueError(f"unknown map field {field!r}")
    lon = np.asarray(snapshot["lon"].values, dtype=float)
    lat = np.asarray(snapshot["lat"].values, dtype=float)
    title, unit = MAP_FIELDS[field]
    colorbar = dict(
        title=dict(text=unit, side="right"), thickness=12, len=0.85, outlinewidth=0
    )
    if field == "ivt":
        z = np.asarray(snapshot["ivt"].values, dtype=float)
        heat = dict(type="heatmap", 
            x=lon, y=lat, z=z, colorscale=IVT_SCALE, zmin=0,
            zmax=color_range[1] if color_range else None, colorbar=colorbar,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>IVT %{z:.0f} kg m⁻¹ s⁻¹<extra></extra>",
            name="ivt",
        )
    elif field == "pw":
        z = np.asarray(snapshot["precipitable_water"].values, dtype=float)
        heat = dict(type="heatmap", 
            x=lon, y=lat, z=z, colorscale=PW_SCALE, colorbar=colorbar,
            zmin=color_range[0] if color_range else None,
            zmax=color_range[1] if color_range else None,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>PW %{z:.1f} kg m⁻²<extra></extra>",
            name="pw",
        )
    else:
        z = np.asarray(_convert(snapshot["convergence"].values, "mm/day", 1.0), dtype=float)
        limit = (max(abs(color_range[0]), abs(color_range[1])) if color_range
                 else symmetric_limit(z))
        heat = dict(type="heatmap", 
            x=lon, y=lat, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit, zmax=limit,
            colorbar=colorbar,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>convergence %{z:.1f} mm/day"
            "<extra></extra>",
            name="convergence",
        )
    fig = _Fig(heat)

    lon_min, lon_max = float(lon.min()), float(lon.max())
    lat_min, lat_max = float(lat.min()), float(lat.max())
    if coastline:
        cx, cy = _coastline_xy(coastline, lon_min, lon_max)
        for width, color in ((2.6, "rgba(255,255,255,0.55)"), (1.0, "rgba(25,32,40,0.9)")):
            fig.add_trace(
                dict(type="scatter", 
                    x=cx, y=cy, mode="lines", line=dict(color=color, width=width),
                    hoverinfo="skip", name="coastline", showlegend=False,
                )
            )
    # the grid's extent (half a cell beyond the outer centres)
    dx = float(np.median(np.diff(lon))) / 2 if lon.size > 1 else 0.5
    dy = float(np.median(np.diff(lat))) / 2 if lat.size > 1 else 0.5
    fig.add_trace(
        dict(type="scatter", 
            x=[lon_min - dx, lon_max + dx, lon_max + dx, lon_min - dx, lon_min - dx],
            y=[lat_min - dy, lat_min - dy, lat_max + dy, lat_max + dy, lat_min - dy],
            mode="lines", line=dict(color=MUTED, width=1, dash="dot"), hoverinfo="skip",
            name="data extent", showlegend=False,
        )
    )
    if arrows:
        ax, ay, ref, _ = _arrows(lon, lat, snapshot["ivt_u"].values, snapshot["ivt_v"].values)
        if ax:
            for width, color in ((3.0, "rgba(255,255,255,0.8)"), (1.2, "#1d2733")):
                fig.add_trace(
                    dict(type="scatter", 
                        x=ax, y=ay, mode="lines", line=dict(color=color, width=width),
                        hoverinfo="skip", name="transport arrows", showlegend=False,
                    )
                )
            fig.add_annotation(
                text=f"longest arrows ≈ {ref:,.0f} kg m⁻¹ s⁻¹", xref="paper", yref="paper",
                x=0.0, y=-0.075, showarrow=False, font=dict(size=11, color=MUTED),
                xanchor="left",
            )
    regions = list(regions)
    for region in regions:
        active = region.get("id") == active_region
        for i, (rlon, rlat) in enumerate(region.get("rings", [])):
            for xs, ys in _ring_copies(rlon, rlat, lon_min - 2 * dx, lon_max + 2 * dx):
                # a pale halo keeps the outline visible on every colour scale
                fig.add_trace(dict(type="scatter", 
                    x=xs, y=ys, mode="lines", hoverinfo="skip", name="region halo",
                    line=dict(color="rgba(255,255,255,0.85)", width=6 if active else 3.5),
                    showlegend=False,
                ))
                fig.add_trace(
                    dict(type="scatter", 
                        x=xs, y=ys, mode="lines+markers" if active else "lines",
                        line=dict(color=ACCENT if active else REGION_OTHER,
                                  width=3 if active else 1.5,
                                  dash="solid" if active else "dash"),
                        marker=dict(size=6, color=ACCENT),
                        name=f"region: {region.get('name', '')}",
                        hovertemplate=f"{region.get('name', '')}<extra></extra>",
                        showlegend=False,
                    )
                )
    active = next((r for r in regions if r.get("id") == active_region), None)
    if active is not None:
        labels = edge_labels(active)
        if labels:
            fig.add_trace(dict(type="scatter", 
                x=[p[0] for p in labels], y=[p[1] for p in labels], mode="text",
                text=[p[2] for p in labels], textposition="middle center",
                textfont=dict(color="#0f3f44", size=11, weight="bold",
                              shadow="0px 0px 2px #ffffff, 0px 0px 4px #ffffff"),
                hoverinfo="skip", name="edge numbers", showlegend=False,
            ))
    if len(vertices):
        vx = [p[0] for p in vertices]
        vy = [p[1] for p in vertices]
        fig.add_trace(
            dict(type="scatter", 
                x=vx, y=vy, mode="lines+markers", name="vertices so far",
                line=dict(color=WARM, width=2, dash="dot"),
                marker=dict(size=9, color=WARM, line=dict(color="white", width=1)),
                hoverinfo="skip", showlegend=False,
            )
        )
    _base_layout(
        fig,
        title=dict(text=f"{title}{' · ' + time_label if time_label else ''}", x=0.01,
                   font=dict(size=14)),
        dragmode=dragmode,
        margin=dict(l=60, r=10, t=34, b=40),
        uirevision=uirevision,
        newshape=dict(line=dict(color=WARM, width=2), fillcolor="rgba(181,101,29,0.12)"),
        shapes=[],
        showlegend=False,
    )
    fig.update_xaxes(
        title_text="longitude (°E)", range=[lon_min - dx, lon_max + dx], showgrid=False,
        zeroline=False, ticksuffix="°", constrain="domain",
    )
    fig.update_yaxes(
        title_text="latitude (°N)", range=[lat_min - dy, lat_max + dy], showgrid=False,
        zeroline=False, ticksuffix="°", scaleanchor="x", constrain="domain",
        # degrees of latitude drawn 1/cos(mid-latitude) times longer: shapes look right locally
        scaleratio=min(3.0, 1.0 / max(math.cos(math.radians((lat_min + lat_max) / 2)), 0.33)),
    )
    return fig.done()


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


def _view(kind: str) -> BudgetView:
    if kind not in VIEWS:
        raise ValueError(f"unknown budget {kind!r}")
    return VIEWS[kind]


def _pressure_rate(values):
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


def _rate_in(budget, var: str, units: str, kind: str, area: float):
    """A rate series (kg m-2 s-1) for display in ``rate_unit(units, kind)``."""
    values = budget[var].values
    if kind == "dry":
        if rate_unit(units, kind) == "kg/s":
            return np.asarray(values, float) * area
        return np.asarray(_pressure_rate(values), float)
    return np.asarray(_convert(values, units, area), float)


def _rate_unit(units: str, kind: str) -> str:
    return terms.unit_label(rate_unit(units, kind))


def _panel_title(what: str, name: str | None, time_label: str | None = None) -> dict:
    """A panel title naming the region (and the time shown) on a second, smaller line."""
    where = f"{name or 'the region'}" + (f" · {time_label}" if time_label else "")
    return dict(text=f"{what}<br><span style='font-size:12px'>{where}</span>", x=0.01,
                y=1.0, yref="container", yanchor="top", pad=dict(t=24), font=dict(size=14))


def _note_figure(text: str, title: dict | None = None) -> go.Figure:
    fig = _Fig()
    fig.add_annotation(text=text, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5,
                       font=dict(color=MUTED))
    _base_layout(fig, xaxis=dict(visible=False), yaxis=dict(visible=False),
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
    view = _view(kind)
    title = _panel_title(f"{view.noun.capitalize()} crossing the boundary", name, time_label)
    if view.density not in budget:
        return _note_figure(f"the engine does not yet give the {view.noun} import along the "
                            "boundary; see the table for its total", title)
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    dens = np.asarray(budget[view.density].isel(time=time_index).values, float)
    fig = _Fig()
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
    _base_layout(fig, showlegend=False, margin=dict(l=60, r=20, t=64, b=40),
                 shapes=[_hline(0, dict(color=MUTED, width=1))] + shapes, annotations=notes,
                 title=title)
    fig.update_xaxes(title_text="distance along the boundary (km); dotted: vertices",
                     gridcolor=GRID, zeroline=False)
    fig.update_yaxes(title_text="in (+) / out (−), kg m⁻¹ s⁻¹", gridcolor=GRID, zeroline=False)
    return fig.done()


def curtain_figure(budget, time_index: int, name: str | None = None,
                   time_label: str | None = None, kind: str = "vapour") -> go.Figure:
    """Inward flux by distance along the boundary × pressure (level inputs only)."""
    view = _view(kind)
    title = _panel_title(f"Inward {view.noun} flux by height", name, time_label)
    if view.curtain not in budget:
        if "normal_flux_density" not in budget:
            return _note_figure("the height profile needs inputs on levels (u, v, q); "
                                "these fields are column totals", title)
        return _note_figure(f"the engine does not yet give the {view.noun} flux by height",
                            title)
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    level_hpa = np.asarray(budget["level"].values, dtype=float) / 100.0
    da = budget[view.curtain].isel(time=time_index).transpose("level", "piece")
    z = np.asarray(da.values, dtype=float) * 100.0  # per Pa -> per hPa
    limit = symmetric_limit(z)
    fig = _Fig(dict(type="heatmap", 
        x=dist, y=level_hpa, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit,
        zmax=limit,
        colorbar=dict(title=dict(text="kg m⁻¹ s⁻¹ hPa⁻¹ (in > 0)", side="right"),
                      thickness=12, outlinewidth=0),
        hovertemplate="%{x:.0f} km, %{y:.0f} hPa<br>%{z:.3g} kg m⁻¹ s⁻¹ hPa⁻¹"
        "<extra></extra>",
        name="inward flux",
    ))
    shapes, notes = _vertex_marks(budget)
    _base_layout(fig, title=title, margin=dict(l=60, r=20, t=64, b=40), shapes=shapes,
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
    view = _view(kind)
    region = name or budget.attrs.get("region_name") or "the region"
    unit = _rate_unit(units, kind)
    title = _panel_title(f"{view.title.capitalize()} (rates in {unit})", region)
    if view.content not in budget:
        return _note_figure(f"this result has no {view.title}", title)
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values)
    fig = _Fig()  # two rows sharing the time axis
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
        y = _rate_in(budget, rate.var, units, kind, area)
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
    _base_layout(fig, showlegend=True, hovermode="x unified", title=title, shapes=shapes,
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
def number(value: float, digits: int = 4) -> str:
    """One format for every number on screen: ``digits`` significant digits, thousands
    grouped with commas, never an exponent ("44,195,550" → "44,200,000"; 0.000123 →
    "0.000123")."""
    v = float(value)
    if not math.isfinite(v):
        return "—"
    if v == 0:
        return "0"
    exponent = math.floor(math.log10(abs(v)))
    places = digits - 1 - exponent  # negative: round to tens, hundreds, …
    rounded = round(v, places)
    decimals = max(0, places)
    if decimals > 12:  # below a millionth of a millionth: zero for every purpose here
        return "0"
    text = f"{rounded:,.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def _window(budget, start: int, end: int | None):
    n = budget.sizes["time"]
    end = n - 1 if end is None else min(end, n - 1)
    return max(0, min(start, end)), end


def _integral(values, seconds, base: float) -> float:
    """The period total of a sampled rate by the rule of budget.periods (time steps as
    intervals, INTEGRATION_RULE), so that mean × length = total (0 for a single step)."""
    from budget.periods import step_intervals

    if values.size < 2:
        return 0.0
    a, b, _ = step_intervals(seconds)
    return float(np.sum(values * (b - a)) / base)


def _row(term: str, mean: str, total: str, mean_value=float("nan"), total_value=float("nan")):
    return {"term": term, "mean": mean, "total": total, "mean_value": float(mean_value),
            "total_value": float(total_value)}


#: Rate rows of the period table, (variable, label) from the term catalogue (budget/terms.py)
WATER_TERMS = {
    "vapour": [(t.name, t.label) for t in terms.table_terms() if t.family != "total_water"],
    "total": [(n, terms.term(n).label) for n in (
        "total_water_convergence", "total_water_tendency", "p_minus_e_total_water",
        "p_minus_e_total_water_uncorrected")],
}
PERIOD_TERMS = WATER_TERMS["vapour"]


_CORRECTION_WORDS = {
    "applied": "applied",
    "switched_off": "off: the files' winds are used as they are",
    "unavailable": "not available (column inputs carry no dry-air flux)",
}


def correction_state(budget) -> str:
    """Whether the mass correction changed this result: the engine's status attribute (data,
    budget.closure.CorrectionState), or else the numbers themselves."""
    status = budget.attrs.get("mass_correction_status")
    if status in _CORRECTION_WORDS:
        return _CORRECTION_WORDS[status]
    if "mass_correction_convergence" not in budget:
        return _CORRECTION_WORDS["unavailable"]
    # the corrected and uncorrected P − E differ only when it was applied
    applied = not np.allclose(budget["p_minus_e"].values,
                              budget["p_minus_e_uncorrected"].values, equal_nan=True)
    return _CORRECTION_WORDS["applied" if applied else "switched_off"]


def period_rows(budget, units: str = "mm/day", start: int = 0, end: int | None = None,
                kind: str = "vapour"):
    """Period means and totals of the chosen budget over time steps start..end (inclusive).

    Totals follow budget.periods' rule, time steps as intervals (mm, kg or m³ for water; hPa
    for dry air).  Returns dicts with term, mean, total (text for the table) and
    mean_value / total_value (floats in the displayed units).
    """
    units = rate_unit(units, kind)
    _view(kind)
    start, end = _window(budget, start, end)
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values[start:end + 1])
    seconds = (times - times[0]).total_seconds().to_numpy(dtype=float)
    if kind == "dry":
        return _dry_rows(budget, start, end, seconds, area)
    total_unit, base = TOTAL_LABELS[units]
    rows = []
    for var, label in WATER_TERMS[kind]:
        if var not in budget:
            continue
        rate = np.asarray(_convert(budget[var].values[start:end + 1], units, area), float)
        mean, total = float(np.mean(rate)), _integral(rate, seconds, base)
        rows.append(_row(label, f"{number(mean)} {UNIT_LABELS[units]}",
                         f"{number(total)} {total_unit}", mean, total))
    if kind == "vapour":
        rows += _correction_rows(budget, start, end)
    content = VIEWS[kind].content
    if content in budget:
        w = np.asarray(budget[content].values[start:end + 1], float)
        label = "Precipitable water" if kind == "vapour" else "Total-water column"
        rows.append(_row(f"{label} (mean; start → end)", f"{number(np.mean(w))} kg m⁻²",
                         f"{number(w[0])} → {number(w[-1])} kg m⁻²", np.mean(w), w[-1] - w[0]))
    return rows


def _correction_rows(budget, start, end):
    rows = []
    if "dry_air_residual_pressure" in budget:
        r = np.asarray(terms.to_display("dry_air_residual_pressure",
                                        budget["dry_air_residual_pressure"].values[start:end + 1],
                                        "hPa/day"), float)
        rows.append(_row(terms.term("dry_air_residual_pressure").label,
                         f"{number(np.mean(r))} hPa/day",
                         "", np.mean(r)))
    if "mass_correction_speed" in budget:
        c = np.asarray(budget["mass_correction_speed"].values[start:end + 1], float) * 100
        rows.append(_row(terms.term("mass_correction_speed").label,
                         f"{number(np.mean(c))} cm/s", "", np.mean(c)))
    rows.append(_row("Mass correction", correction_state(budget), ""))
    return rows


def _dry_rows(budget, start, end, seconds, area):
    """Dry air: import in kg/s and as hPa/day; convergence; tendencies; residual; correction."""
    from budget.constants import STANDARD_GRAVITY

    if "dry_air_import" not in budget:
        return [_row("Dry-air budget", "not available (column inputs carry no dry-air "
                     "flux)", "")]
    sl = slice(start, end + 1)
    rows = []
    imp = np.asarray(budget["dry_air_import"].values[sl], float)
    rows.append(_row(terms.term("dry_air_import").label, f"{number(np.mean(imp))} kg/s",
                     f"{number(_integral(imp, seconds, 1.0))} kg", np.mean(imp),
                     _integral(imp, seconds, 1.0)))

    def hpa(label, values):
        v = np.asarray(_pressure_rate(values), float)
        total = _integral(v, seconds, 86400.0)
        rows.append(_row(label, f"{number(np.mean(v))} hPa/day", f"{number(total)} hPa",
                         np.mean(v), total))

    hpa("Dry-air import as surface-pressure change", imp / area)
    hpa(terms.term("dry_air_convergence").label, budget["dry_air_convergence"].values[sl])
    if "pw_tendency" in budget:
        hpa("Surface-pressure tendency (dry air + vapour)",
            budget["dry_air_tendency"].values[sl] + budget["pw_tendency"].values[sl])
    hpa(terms.term("dry_air_tendency").label, budget["dry_air_tendency"].values[sl])
    hpa(f"{terms.term('dry_air_residual').label} (tendency − convergence)",
        budget["dry_air_residual"].values[sl])
    r = np.asarray(_pressure_rate(budget["dry_air_residual"].values[sl]), float)
    rows.append(_row("Typical size of the residual (mean of |residual|)",
                     f"{number(np.mean(np.abs(r)))} hPa/day", "", np.mean(np.abs(r))))
    c = np.asarray(budget["mass_correction_speed"].values[sl], float) * 100
    rows.append(_row(terms.term("mass_correction_speed").label, f"{number(np.mean(c))} cm/s",
                     "", np.mean(c)))
    rows.append(_row("Mass correction", correction_state(budget), ""))
    mu = np.asarray(budget["dry_air_mass"].values[sl], float) * STANDARD_GRAVITY / 100
    rows.append(_row(f"{terms.term('dry_air_mass').label} (mean; start → end)", f"{number(np.mean(mu))} hPa",
                     f"{number(mu[0])} → {number(mu[-1])} hPa", np.mean(mu), mu[-1] - mu[0]))
    return rows


def empty_figure(text: str) -> go.Figure:
    """A blank panel carrying one line of text (no data yet, or why there is none)."""
    return _note_figure(text)


def edge_rows(budget, units: str = "kg/s", start: int = 0, end: int | None = None,
              kind: str = "vapour"):
    """Mean import through every edge over steps start..end (positive = coming in).

    Water: kg/s and m³/s are the transport itself; mm/day is the transport spread over the
    region's area (what this edge alone adds to the convergence).  Dry air: kg/s, or hPa/day
    (the surface-pressure tendency this edge alone would give the region).  Returns
    dicts with edge, mean (text), mean_value (displayed units), direction ("in" / "out"),
    one per edge in boundary order.
    """
    from budget.units import transport_to_rate

    units = rate_unit(units, kind)
    view = _view(kind)
    if view.edge not in budget:
        return []
    start, end = _window(budget, start, end)
    kg_s = np.asarray(budget[view.edge].values[start:end + 1], float).mean(axis=0)
    area = float(budget.attrs["region_area_m2"])
    if kind == "dry":
        unit = terms.unit_label(units)
        values = kg_s if units == "kg/s" else np.asarray(_pressure_rate(kg_s / area), float)
    else:
        values = np.asarray(_convert(transport_to_rate(kg_s, area), units, area), float)
        unit = UNIT_LABELS[units]
    names = [str(e) for e in budget["edge"].values]
    return [{"edge": names[i], "mean_value": float(values[i]),
             "mean": f"{number(values[i])} {unit}",
             "direction": "in" if values[i] > 0 else "out"} for i in range(len(names))]
