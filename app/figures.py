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
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

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
IVT_SCALE = "cividis"
PW_SCALE = [
    [0.0, "#fdfdcc"], [0.125, "#c9ebb1"], [0.25, "#91d8a3"], [0.375, "#66c2a3"],
    [0.5, "#51a8a2"], [0.625, "#488d9d"], [0.75, "#407598"], [0.875, "#3d5a92"],
    [1.0, "#2a3a6b"],
]  # after cmocean "deep" (perceptually uniform, light = dry, dark = moist)
CONVERGENCE_SCALE = "BrBG"

UNIT_LABELS = {"mm/day": "mm/day", "kg/s": "kg/s", "m3/s": "m³/s"}
# the total over a period of a rate in these units, and the time base of the rate
TOTAL_LABELS = {"mm/day": ("mm", 86400.0), "kg/s": ("kg", 1.0), "m3/s": ("m³", 1.0)}

MAP_FIELDS = {
    "ivt": ("Integrated vapour transport", "kg m⁻¹ s⁻¹"),
    "pw": ("Precipitable water", "kg m⁻² (= mm)"),
    "convergence": ("Vapour-flux convergence", "mm/day"),
}


def _base_layout(fig: go.Figure, **extra) -> None:
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
        heat = go.Heatmap(
            x=lon, y=lat, z=z, colorscale=IVT_SCALE, zmin=0,
            zmax=color_range[1] if color_range else None, colorbar=colorbar,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>IVT %{z:.0f} kg m⁻¹ s⁻¹<extra></extra>",
            name="ivt",
        )
    elif field == "pw":
        z = np.asarray(snapshot["precipitable_water"].values, dtype=float)
        heat = go.Heatmap(
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
        heat = go.Heatmap(
            x=lon, y=lat, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit, zmax=limit,
            colorbar=colorbar,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>convergence %{z:.1f} mm/day"
            "<extra></extra>",
            name="convergence",
        )
    fig = go.Figure(heat)

    lon_min, lon_max = float(lon.min()), float(lon.max())
    lat_min, lat_max = float(lat.min()), float(lat.max())
    if coastline:
        cx, cy = _coastline_xy(coastline, lon_min, lon_max)
        for width, color in ((2.6, "rgba(255,255,255,0.55)"), (1.0, "rgba(25,32,40,0.9)")):
            fig.add_trace(
                go.Scatter(
                    x=cx, y=cy, mode="lines", line=dict(color=color, width=width),
                    hoverinfo="skip", name="coastline", showlegend=False,
                )
            )
    # the grid's extent (half a cell beyond the outer centres)
    dx = float(np.median(np.diff(lon))) / 2 if lon.size > 1 else 0.5
    dy = float(np.median(np.diff(lat))) / 2 if lat.size > 1 else 0.5
    fig.add_trace(
        go.Scatter(
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
                    go.Scatter(
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
                fig.add_trace(go.Scatter(
                    x=xs, y=ys, mode="lines", hoverinfo="skip", name="region halo",
                    line=dict(color="rgba(255,255,255,0.85)", width=6 if active else 3.5),
                    showlegend=False,
                ))
                fig.add_trace(
                    go.Scatter(
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
        numbered = [(x, y) for rlon, rlat in active.get("rings", []) for x, y in zip(rlon, rlat)]
        if 0 < len(numbered):
            step = max(1, int(math.ceil(len(numbered) / 12)))
            pts = [(i + 1, p) for i, p in enumerate(numbered)][::step]
            fig.add_trace(go.Scatter(
                x=[p[0] for _, p in pts], y=[p[1] for _, p in pts], mode="text",
                text=[str(i) for i, _ in pts], textposition="top right",
                textfont=dict(color="#0f3f44", size=11, weight="bold",
                              shadow="0px 0px 2px #ffffff, 0px 0px 4px #ffffff"),
                hoverinfo="skip",
                name="vertex numbers", showlegend=False,
            ))
    if len(vertices):
        vx = [p[0] for p in vertices]
        vy = [p[1] for p in vertices]
        fig.add_trace(
            go.Scatter(
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
    return fig


# ---------------------------------------------------------------------------------------------
# Boundary profile and curtain
# ---------------------------------------------------------------------------------------------
def _vertex_marks(fig: go.Figure, budget) -> None:
    """Dotted lines at the region's vertices; edge names (a box) or vertex numbers on top.

    Vertex numbers count along the boundary from 1, as on the map's outline of the active
    region; with many vertices only every k-th is numbered so the labels stay legible.
    """
    if "vertex_distance" not in budget.coords and "vertex_distance" not in budget:
        return
    vd = np.asarray(budget["vertex_distance"].values, dtype=float) / 1000.0
    for x in vd:
        fig.add_vline(x=float(x), line=dict(color=MUTED, width=1, dash="dot"))
    names = [str(n) for n in budget["edge"].values] if "edge" in budget.coords else []
    end = None
    if "edge_length" in budget.coords and len(vd):
        end = float(vd[0] + np.sum(budget["edge_length"].values) / 1000.0)
    elif "piece_distance" in budget.coords:
        end = float(np.max(budget["piece_distance"].values) / 1000.0)
    label = dict(showarrow=False, font=dict(size=11, color=MUTED), yanchor="bottom", y=1.0,
                 yref="paper")
    if names and len(names) == len(vd) and len(vd) <= 12 and all(len(n) <= 3 for n in names):
        stops = list(vd) + ([end] if end is not None else [])
        for i, name in enumerate(names):
            if i + 1 < len(stops):
                fig.add_annotation(x=float((stops[i] + stops[i + 1]) / 2), text=name, **label)
        return
    step = max(1, int(math.ceil(len(vd) / 12)))
    for i in range(0, len(vd), step):
        fig.add_annotation(x=float(vd[i]), text=str(i + 1), **label)


def profile_figure(budget, time_index: int) -> go.Figure:
    """Import across the boundary per unit length, along the boundary, at one time."""
    fig = go.Figure()
    if "boundary_import_density" not in budget:
        fig.add_annotation(text="no boundary profile in this result", showarrow=False,
                           xref="paper", yref="paper", x=0.5, y=0.5)
        _base_layout(fig)
        return fig
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    dens = np.asarray(budget["boundary_import_density"].isel(time=time_index).values, float)
    inward = np.where(dens > 0, dens, 0.0)
    outward = np.where(dens < 0, dens, 0.0)
    fig.add_trace(go.Scatter(x=dist, y=inward, mode="lines", line=dict(width=0),
                             fill="tozeroy", fillcolor="rgba(42,127,134,0.30)",
                             hoverinfo="skip", name="moisture coming in"))
    fig.add_trace(go.Scatter(x=dist, y=outward, mode="lines", line=dict(width=0),
                             fill="tozeroy", fillcolor="rgba(181,101,29,0.28)",
                             hoverinfo="skip", name="moisture going out"))
    fig.add_trace(go.Scatter(
        x=dist, y=dens, mode="lines", line=dict(color=INK, width=1.6), name="import density",
        hovertemplate="%{x:.0f} km along the boundary<br>%{y:.1f} kg m⁻¹ s⁻¹<extra></extra>",
    ))
    fig.add_hline(y=0, line=dict(color=MUTED, width=1))
    _vertex_marks(fig, budget)
    _base_layout(fig, showlegend=True,
                 legend=dict(orientation="h", y=-0.28, x=0, font=dict(size=11)),
                 title=dict(text="Import across the boundary", x=0.01, font=dict(size=14)))
    fig.update_xaxes(title_text="distance along the boundary (km), vertices dotted",
                     gridcolor=GRID, zeroline=False)
    fig.update_yaxes(title_text="import (kg m⁻¹ s⁻¹)", gridcolor=GRID, zeroline=False)
    return fig


def curtain_figure(budget, time_index: int) -> go.Figure:
    """Inward flux by distance along the boundary × pressure (level inputs only)."""
    fig = go.Figure()
    if "normal_flux_density" not in budget:
        fig.add_annotation(
            text="the height profile needs inputs on levels (u, v, q); "
            "these fields are column totals",
            showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5,
            font=dict(color=MUTED),
        )
        _base_layout(fig, xaxis=dict(visible=False), yaxis=dict(visible=False))
        return fig
    dist = np.asarray(budget["piece_distance"].values, dtype=float) / 1000.0
    level_hpa = np.asarray(budget["level"].values, dtype=float) / 100.0
    da = budget["normal_flux_density"].isel(time=time_index).transpose("level", "piece")
    z = np.asarray(da.values, dtype=float) * 100.0  # per Pa -> per hPa
    limit = symmetric_limit(z)
    fig.add_trace(go.Heatmap(
        x=dist, y=level_hpa, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit,
        zmax=limit,
        colorbar=dict(title=dict(text="kg m⁻¹ s⁻¹ hPa⁻¹", side="right"), thickness=12,
                      outlinewidth=0),
        hovertemplate="%{x:.0f} km, %{y:.0f} hPa<br>%{z:.2f} kg m⁻¹ s⁻¹ hPa⁻¹"
        "<extra></extra>",
        name="inward flux",
    ))
    _vertex_marks(fig, budget)
    _base_layout(fig, title=dict(text="Inward flux through the boundary, by height "
                                       "(positive = coming in)", x=0.01, font=dict(size=14)))
    fig.update_xaxes(title_text="distance along the boundary (km)", showgrid=False)
    fig.update_yaxes(title_text="pressure (hPa)", autorange="reversed", showgrid=False)
    return fig


# ---------------------------------------------------------------------------------------------
# Budget series and period table
# ---------------------------------------------------------------------------------------------
SERIES_RATES = [  # (variable, legend from the term catalogue, colour, dash)
    (name, terms.term(name).legend, color, dash) for name, color, dash in (
        ("boundary_convergence", ACCENT, "solid"),
        ("area_convergence", "#6fa8b0", "dash"),
        ("pw_tendency", MUTED, "dot"),
        ("p_minus_e", WARM, "solid"),
    )
]


def series_figure(budget, units: str = "mm/day", time_index: int | None = None, name: str | None = None) -> go.Figure:
    """Precipitable water and the budget rates over time, rates in `units`."""
    if units not in UNIT_LABELS:
        raise ValueError(f"unknown units {units!r}")
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values)
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08,
                        row_heights=[0.35, 0.65])
    fig.add_trace(go.Scatter(
        x=times, y=np.asarray(budget["precipitable_water"].values, float),
        mode="lines+markers" if len(times) <= 60 else "lines",
        marker=dict(size=4), line=dict(color="#3d5a92", width=2), name="W (area mean)",
        hovertemplate="%{x|%Y-%m-%d %H:%M}<br>W %{y:.2f} kg m⁻²<extra></extra>",
    ), row=1, col=1)
    for var, label, color, dash in SERIES_RATES:
        if var not in budget:
            continue
        y = np.asarray(_convert(budget[var].values, units, area), dtype=float)
        fig.add_trace(go.Scatter(
            x=times, y=y, mode="lines", name=label, line=dict(color=color, width=2, dash=dash),
            hovertemplate=f"%{{x|%Y-%m-%d %H:%M}}<br>{label} %{{y:.4g}} "
            f"{UNIT_LABELS[units]}<extra></extra>",
        ), row=2, col=1)
    fig.add_hline(y=0, line=dict(color=GRID, width=1), row=2, col=1)
    if time_index is not None and len(times):
        t = times[min(max(time_index, 0), len(times) - 1)]
        for row in (1, 2):
            fig.add_vline(x=t, line=dict(color=INK, width=1.2, dash="dash"), row=row, col=1)
    _base_layout(fig, showlegend=True, hovermode="x unified",
                 legend=dict(orientation="h", y=-0.16, x=0, font=dict(size=11)),
                 title=dict(text=f"Budget of {name or budget.attrs.get('region_name') or 'the region'} (rates in {UNIT_LABELS[units]})",
                            x=0.01, font=dict(size=14)))
    fig.update_yaxes(title_text="W (kg m⁻²)", gridcolor=GRID, row=1, col=1)
    fig.update_yaxes(title_text=f"rate ({UNIT_LABELS[units]})", gridcolor=GRID, row=2, col=1)
    fig.update_xaxes(gridcolor=GRID)
    fig.update_xaxes(title_text="time (UTC)", row=2, col=1)
    return fig


#: Rate rows of the period table: (variable, label), from the term catalogue (budget/terms.py).
PERIOD_TERMS = [(t.name, t.label) for t in terms.table_terms()]

#: Closure terms shown as period means in their own units (not convertible rates).
CLOSURE_MEANS = [
    ("dry_air_residual_pressure", terms.term("dry_air_residual_pressure").label, "hPa day⁻¹",
     float(terms.to_display("dry_air_residual_pressure", 1.0, "hPa/day"))),
    ("mass_correction_speed", terms.term("mass_correction_speed").label, "cm s⁻¹", 100.0),
]


def number(value: float) -> str:
    """A readable number: digits grouped in thousands, scientific only when very large/small."""
    v = float(value)
    if not math.isfinite(v):
        return "—"
    a = abs(v)
    if a == 0:
        return "0"
    if a >= 1e10 or a < 1e-3:
        return f"{v:.3e}"
    if a >= 100:
        return f"{v:,.0f}"
    return f"{v:.3g}" if a < 1 else f"{v:.2f}" if a < 10 else f"{v:.1f}"


def period_rows(budget, units: str = "mm/day", start: int = 0, end: int | None = None):
    """Means and totals of each rate over time steps start..end (inclusive).

    Totals are the trapezoid integral of the sampled rate over the period (mm, kg or m³).
    Returns a list of dicts with keys term, mean, total (strings ready for a table) and
    mean_value / total_value (floats).
    """
    if units not in UNIT_LABELS:
        raise ValueError(f"unknown units {units!r}")
    n = budget.sizes["time"]
    end = n - 1 if end is None else min(end, n - 1)
    start = max(0, min(start, end))
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values[start:end + 1])
    total_unit, base = TOTAL_LABELS[units]
    seconds = (times - times[0]).total_seconds().to_numpy(dtype=float)
    rows = []
    for var, label in PERIOD_TERMS:
        if var not in budget:
            continue
        rate = np.asarray(_convert(budget[var].values[start:end + 1], units, area), float)
        mean = float(np.mean(rate))
        total = float(np.trapezoid(rate, seconds / base)) if rate.size > 1 else 0.0
        rows.append({
            "term": label,
            "mean": f"{number(mean)} {UNIT_LABELS[units]}",
            "total": f"{number(total)} {total_unit}",
            "mean_value": mean,
            "total_value": total,
        })
    for var, label, unit, factor in CLOSURE_MEANS:
        if var not in budget:
            continue
        vals = np.asarray(budget[var].values[start:end + 1], float) * factor
        rows.append({
            "term": label,
            "mean": f"{number(float(np.mean(vals)))} {unit}",
            "total": f"mean |x| {number(float(np.mean(np.abs(vals))))} {unit}",
            "mean_value": float(np.mean(vals)),
            "total_value": float(np.mean(np.abs(vals))),
        })
    if "mass_correction" in budget.attrs and budget.attrs["mass_correction"]:
        state = str(budget.attrs["mass_correction"])
        rows.append({"term": "Mass correction", "mean": state.split(";")[0], "total": "",
                     "mean_value": float("nan"), "total_value": float("nan")})
    w = np.asarray(budget["precipitable_water"].values[start:end + 1], float)
    rows.append({
        "term": "Precipitable water (start → end)",
        "mean": f"{float(np.mean(w)):.3g} kg m⁻²",
        "total": f"{w[0]:.3g} → {w[-1]:.3g} kg m⁻²",
        "mean_value": float(np.mean(w)),
        "total_value": float(w[-1] - w[0]),
    })
    return rows


def empty_figure(text: str) -> go.Figure:
    """A blank panel carrying one line of text (no data yet, or why there is none)."""
    fig = go.Figure()
    fig.add_annotation(text=text, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5,
                       font=dict(color=MUTED, size=13))
    _base_layout(fig, xaxis=dict(visible=False), yaxis=dict(visible=False))
    return fig


def edge_rows(budget, units: str = "kg/s", start: int = 0, end: int | None = None,
              limit: int = 8):
    """Mean import through each edge over steps start..end (positive = coming in).

    `units` as for the series: kg/s and m³/s are the transport itself; mm/day is the
    transport spread over the region's area (what this edge alone adds to the convergence).
    With more than `limit` edges only the largest magnitudes are listed.  Returns dicts with
    edge, mean (text), mean_value (in `units`) and direction ("in" / "out").
    """
    from budget.units import transport_to_rate

    if units not in UNIT_LABELS:
        raise ValueError(f"unknown units {units!r}")
    if "edge_import" not in budget:
        return []
    n = budget.sizes["time"]
    end = n - 1 if end is None else min(end, n - 1)
    start = max(0, min(start, end))
    kg_s = np.asarray(budget["edge_import"].values[start:end + 1], float).mean(axis=0)
    area = float(budget.attrs["region_area_m2"])
    values = np.asarray(_convert(transport_to_rate(kg_s, area), units, area), float)
    names = [str(e) for e in budget["edge"].values]
    order = list(range(len(names)))
    if len(order) > limit:
        order = sorted(order, key=lambda i: -abs(values[i]))[:limit]
        order.sort()
    return [{"edge": names[i], "mean_value": float(values[i]),
             "mean": f"{number(values[i])} {UNIT_LABELS[units]}",
             "direction": "in" if values[i] > 0 else "out"} for i in order]
