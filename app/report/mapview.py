"""Map panels: period-mean IVT (colour and arrows), optionally convergence, the region with
numbered edges, shipped coastlines and borders, in a projection suited to the region."""

from __future__ import annotations

import numpy as np

from . import style as st
from .cartography import choose_frame, configure_cartopy, lines_near, thin_arrows


def ring_lines(region, per_edge: int = 16):
    """Each exterior and hole ring of the region, densified along its lon-lat straight edges.

    Yields (lon, lat, ring) with closed, densified coordinates and the budget.region Ring.
    """
    for part in region.parts:
        for ring in [part.exterior, *part.holes]:
            lon = np.append(ring.lon, ring.lon[0])
            lat = np.append(ring.lat, ring.lat[0])
            t = np.linspace(0.0, 1.0, per_edge, endpoint=False)
            dlon = np.concatenate([lon[i] + t * (lon[i + 1] - lon[i]) for i in range(lon.size - 1)] + [lon[-1:]])
            dlat = np.concatenate([lat[i] + t * (lat[i + 1] - lat[i]) for i in range(lat.size - 1)] + [lat[-1:]])
            yield dlon, dlat, ring


def frame_for(data):
    """The map frame for a figure's region, limited to the mapped grid."""
    west, south, east, north = data.region.bounds
    grid = None
    if data.mean_map is not None:
        lon, lat = data.mean_map["lon"].values, data.mean_map["lat"].values
        grid = (float(lon.min()), float(lat.min()), float(lon.max()), float(lat.max()))
    return choose_frame(west, south, east, north, grid)


def base_axes(fig, rect, frame, style):
    """A GeoAxes with the shipped coastlines and borders and light graticule labels."""
    import cartopy.crs as ccrs

    configure_cartopy()
    ax = fig.add_axes(rect, projection=frame.projection())
    if frame.kind == "global":
        ax.set_global()
    else:
        ax.set_extent(frame.extent, crs=ccrs.PlateCarree())
    ax.set_facecolor("#f4f2ee")
    pc = ccrs.PlateCarree()
    ax.add_geometries(lines_near(frame.scale, "coastline", frame.extent), pc, facecolor="none", edgecolor=st.LAND_LINE,
                      linewidth=0.55 * style.line_width, zorder=3)
    ax.add_geometries(lines_near(frame.scale, "borders", frame.extent), pc, facecolor="none", edgecolor=st.BORDER_LINE,
                      linewidth=0.4 * style.line_width, linestyle=(0, (4, 2)), zorder=3)
    grid = ax.gridlines(crs=pc, draw_labels=True, linewidth=0.4, color="#ffffff", alpha=0.7, linestyle="-", zorder=2)
    grid.top_labels = grid.right_labels = False
    grid.xlabel_style = grid.ylabel_style = {"size": style.font_size * 0.75, "color": st.MUTED}
    return ax


def draw_region(ax, region, style, numbers: bool = True) -> None:
    """The region outline in its own colour, with edge numbers just outside each edge."""
    import cartopy.crs as ccrs

    pc = ccrs.PlateCarree()
    for lon, lat, ring in ring_lines(region):
        ax.plot(lon, lat, transform=pc, color="#ffffff", linewidth=style.outline_width + 1.6, zorder=5,
                solid_capstyle="round")
        ax.plot(lon, lat, transform=pc, color=st.OUTLINE, linewidth=style.outline_width, zorder=6,
                solid_capstyle="round")
        if numbers:
            _edge_numbers(ax, ring, style)


def _edge_numbers(ax, ring, style) -> None:
    import cartopy.crs as ccrs

    n = len(ring.lon)
    every = max(1, int(np.ceil(n / 24)))  # at most about two dozen labels
    span = max(np.ptp(ring.lon), np.ptp(ring.lat), 0.5)
    for i in range(0, n, every):
        j = (i + 1) % n
        mx, my = 0.5 * (ring.lon[i] + ring.lon[j]), 0.5 * (ring.lat[i] + ring.lat[j])
        dx = (ring.lon[j] - ring.lon[i]) * np.cos(np.radians(my))
        dy = ring.lat[j] - ring.lat[i]
        norm = np.hypot(dx, dy) or 1.0
        # exterior rings run counter-clockwise, so (dy, -dx) points out of the region
        ox, oy = dy / norm, -dx / norm
        off = 0.045 * span
        name = str(ring.edge_names[i]) if i < len(ring.edge_names) else str(i + 1)
        ax.text(mx + ox * off / max(np.cos(np.radians(my)), 0.2), my + oy * off, name.removeprefix("edge "),
                transform=ccrs.PlateCarree(), ha="center", va="center", fontsize=style.font_size * 0.72,
                color=st.INK, zorder=7,
                bbox={"boxstyle": "circle,pad=0.18", "facecolor": "#ffffff", "edgecolor": st.OUTLINE, "linewidth": 0.6})


def ivt_layer(ax, snap, style, vmax: float):
    """IVT magnitude as colour and thinned arrows; returns (mesh, quiver)."""
    import cartopy.crs as ccrs

    pc = ccrs.PlateCarree()
    lon, lat = snap["lon"].values, snap["lat"].values
    mesh = ax.pcolormesh(lon, lat, snap["ivt"].values, transform=pc, cmap=st.IVT_CMAP, vmin=0.0, vmax=vmax,
                         shading="auto", zorder=1, rasterized=True)
    sx, sy = thin_arrows(lon, lat, style.arrows)
    q = ax.quiver(lon[sx], lat[sy], snap["ivt_u"].values[sy, sx], snap["ivt_v"].values[sy, sx], transform=pc,
                  color="#ffffff", edgecolor="#1b1b1b", linewidth=0.35, scale=vmax * 8, width=0.0045 * (style.line_width / 1.1) ** 0.5,
                  zorder=4)
    return mesh, q


def arrow_key(ax, quiver, ref: float, style) -> None:
    """The arrow scale in the lower right corner of the map, on a white card."""
    from matplotlib.patches import FancyBboxPatch

    ax.add_patch(FancyBboxPatch((0.62, 0.015), 0.365, 0.075, boxstyle="round,pad=0.005", transform=ax.transAxes,
                                facecolor="#ffffff", edgecolor=st.MUTED, linewidth=0.5, alpha=0.9, zorder=8))
    key = ax.quiverkey(quiver, 0.94, 0.052, ref, f"{ref:g} kg m⁻¹ s⁻¹", labelpos="W", coordinates="axes",
                       color=st.INK, fontproperties={"size": style.font_size * 0.75})
    key.set_zorder(9)


def nice_reference(vmax: float) -> float:
    """A round arrow-key value near half the colour range (1, 2 or 5 x 10^k)."""
    target = max(vmax * 0.5, 1e-9)
    k = 10 ** np.floor(np.log10(target))
    return float(max(m * k for m in (1, 2, 5) if m * k <= target))


def ivt_limit(values) -> float:
    finite = np.asarray(values, float)[np.isfinite(values)]
    return float(np.quantile(finite, 0.99)) if finite.size else 1.0


def signed_limit(values) -> float:
    finite = np.abs(np.asarray(values, float)[np.isfinite(values)])
    return float(np.quantile(finite, 0.98)) if finite.size and finite.max() > 0 else 1.0


def draw_map(fig, data, style, convergence: bool = False, rect=(0.0, 0.0, 1.0, 1.0), compact: bool = False) -> None:
    """Period-mean IVT map (and a convergence map beside it when asked) into ``rect`` of fig."""
    import cartopy.crs as ccrs

    x0, y0, w, h = rect
    frame = frame_for(data)
    panels = 2 if convergence and data.mean_map is not None else 1
    width = w / panels
    snap = data.mean_map
    for k in range(panels):
        ax = base_axes(fig, (x0 + k * width + 0.04 * width, y0 + 0.1 * h, 0.78 * width, 0.8 * h), frame, style)
        if snap is None:
            ax.set_title(f"{data.region_name}: region and edges (no fields given, so no IVT)", loc="left")
        elif k == 0:
            vmax = ivt_limit(snap["ivt"].values)
            mesh, q = ivt_layer(ax, snap, style, vmax)
            ref = nice_reference(vmax)
            arrow_key(ax, q, ref, style)
            _colourbar(fig, ax, mesh, "IVT (integrated vapour transport), kg m⁻¹ s⁻¹", style)
            text = f"vapour transport, mean of {data.map_steps} steps"
            ax.set_title(text[0].upper() + text[1:] if compact else f"{data.region_name}: {text}", loc="left")
        else:
            conv = snap["convergence"].values * 86400.0
            lim = signed_limit(conv)
            mesh = ax.pcolormesh(snap["lon"].values, snap["lat"].values, conv, transform=ccrs.PlateCarree(),
                                 cmap=st.SIGNED_CMAP, vmin=-lim, vmax=lim, shading="auto", zorder=1, rasterized=True)
            _colourbar(fig, ax, mesh, "vapour-flux convergence, mm/day (> 0: column gains water)", style)
            ax.set_title("convergence, same period", loc="left")
        draw_region(ax, data.region, style, numbers=(k == 0))


def _colourbar(fig, ax, mappable, label, style):
    """A vertical colour bar right of the map, as tall as the drawn map."""
    cax = ax.inset_axes((1.035, 0.0, 0.035, 1.0))
    bar = fig.colorbar(mappable, cax=cax, orientation="vertical", extend="max" if "IVT" in label else "both")
    bar.set_label(label, fontsize=style.font_size * 0.9)
    bar.outline.set_linewidth(0.5)
    cax.grid(False)
    return bar
