"""The dashboard's map: one column field at one time, coastlines, transport arrows, regions.

A pure function of data (see app/figures.py for the shared look): the snapshot comes from
budget.maps (lon-lat, or a display view of a projected grid), the coastline lines as an
argument (:func:`load_coastline`).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
import plotly.graph_objects as go

from .figures import (ACCENT, CONVERGENCE_SCALE, MUTED, REGION_OTHER, WARM, Fig, base_layout,
                      convert, named_scale, short_edge_name, symmetric_limit)

# Magnitudes: perceptually uniform sequential scales (the diverging convergence scale is shared
# with the curtain, in app/figures.py).
IVT_SCALE = named_scale("cividis")
PW_SCALE = [
    [0.0, "#fdfdcc"], [0.125, "#c9ebb1"], [0.25, "#91d8a3"], [0.375, "#66c2a3"],
    [0.5, "#51a8a2"], [0.625, "#488d9d"], [0.75, "#407598"], [0.875, "#3d5a92"],
    [1.0, "#2a3a6b"],
]  # after cmocean "deep" (perceptually uniform, light = dry, dark = moist)

MAP_FIELDS = {
    "ivt": ("Integrated vapour transport", "kg m⁻¹ s⁻¹"),
    "pw": ("Precipitable water", "kg m⁻² (= mm)"),
    "convergence": ("Vapour-flux convergence", "mm/day"),
}



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
def field_values(snapshot, field: str) -> np.ndarray:
    """The displayed values of a map field (convergence in mm/day)."""
    if field == "ivt":
        return np.asarray(snapshot["ivt"].values, dtype=float)
    if field == "pw":
        return np.asarray(snapshot["precipitable_water"].values, dtype=float)
    return np.asarray(convert(snapshot["convergence"].values, "mm/day", 1.0), dtype=float)


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
        z = np.asarray(convert(snapshot["convergence"].values, "mm/day", 1.0), dtype=float)
        limit = (max(abs(color_range[0]), abs(color_range[1])) if color_range
                 else symmetric_limit(z))
        heat = dict(type="heatmap", 
            x=lon, y=lat, z=z, colorscale=CONVERGENCE_SCALE, zmid=0, zmin=-limit, zmax=limit,
            colorbar=colorbar,
            hovertemplate="%{x:.2f}°E %{y:.2f}°N<br>convergence %{z:.1f} mm/day"
            "<extra></extra>",
            name="convergence",
        )
    fig = Fig(heat)

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
    base_layout(
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

