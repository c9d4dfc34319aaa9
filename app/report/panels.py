"""Budget panels: time series, the boundary (import along it and the height curtain) and the
mean annual cycle.  Each ``draw_*`` takes a figure (or sub-figure), a FigureData, a Style and
the rectangle (x0, y0, width, height, in figure fractions) to fill."""

from __future__ import annotations

import matplotlib.dates as mdates
import numpy as np
from matplotlib.colors import TwoSlopeNorm

from . import style as st
from .data import discharge_cycle, monthly_cycle, series_label

CLOSURE_TERMS = ("precipitation", "evaporation", "closure_residual", "mass_correction_convergence")


def _grid(fig, rect, rows, ratios=None, hspace=0.35, right=0.97):
    x0, y0, w, h = rect
    return fig.add_gridspec(rows, 1, left=x0 + 0.11 * w, right=x0 + right * w, bottom=y0 + 0.1 * h,
                            top=y0 + 0.9 * h, hspace=hspace, height_ratios=ratios)


def _time_axis(ax, last: bool) -> None:
    locator = mdates.AutoDateLocator(minticks=3, maxticks=8)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    if last:
        ax.set_xlabel("time (UTC)")
    else:
        ax.tick_params(labelbottom=False)


def _line(ax, data, name, **kw):
    values = data.series(name)
    if values is None:
        return False
    ax.plot(data.times, values, color=st.SERIES_COLOURS[name], label=series_label(name), **kw)
    return True


def _title(data, text: str, compact: bool) -> str:
    """Panel titles name the region, except on the report page whose heading already does."""
    return text[0].upper() + text[1:] if compact else f"{data.region_name}: {text}"


def draw_series(fig, data, style, rect=(0.0, 0.0, 1.0, 1.0), upto: int | None = None, compact: bool = False) -> list:
    """W; convergence by both methods, dW/dt and P − E; the closure terms where present."""
    closure = [c for c in CLOSURE_TERMS if c in data.budget]
    gs = _grid(fig, rect, 3 if closure else 2, [1, 1.6, 1.2] if closure else [1, 1.6])
    axes = [fig.add_subplot(gs[i]) for i in range(gs.nrows)]
    for ax in axes[1:]:
        ax.sharex(axes[0])
    ax = axes[0]
    _line(ax, data, "precipitable_water")
    ax.set_ylabel("W, mm")
    ax.set_title(_title(data, "water-vapour budget, area means", compact))
    ax = axes[1]
    pme = data.series("p_minus_e")
    ax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
    ax.fill_between(data.times, pme, 0, where=pme >= 0, color=st.IMPORT, alpha=0.18, linewidth=0, interpolate=True)
    ax.fill_between(data.times, pme, 0, where=pme < 0, color=st.EXPORT, alpha=0.18, linewidth=0, interpolate=True)
    _line(ax, data, "p_minus_e", linewidth=style.line_width * 1.5)
    _line(ax, data, "boundary_convergence")
    _line(ax, data, "area_convergence", linestyle=(0, (5, 2)))
    _line(ax, data, "pw_tendency", linestyle=(0, (1, 1.5)))
    ax.set_ylabel("rate, mm/day")
    ax.legend(loc="upper left", ncol=2)
    if closure:
        ax = axes[2]
        ax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
        for name in closure:
            _line(ax, data, name)
        ax.set_ylabel("closure terms, mm/day")
        ax.legend(loc="upper left", ncol=2)
    for i, ax in enumerate(axes):
        _time_axis(ax, i == len(axes) - 1)
    if upto is not None:
        for ax in axes:
            ax.axvline(data.times[upto], color=st.OUTLINE, linewidth=style.line_width)
    return axes


def _edge_ticks(ax, data, style) -> None:
    """Vertical lines at the vertices and the edge numbers above the panel."""
    b = data.budget
    if "vertex_distance" not in b.coords:
        return
    vd = np.asarray(b["vertex_distance"].values, float) / 1000.0
    total = float(np.asarray(b["edge_length"].values).sum()) / 1000.0
    bounds = np.append(vd, total)
    names = [str(e).removeprefix("edge ") for e in b["edge"].values]
    n = len(names)
    every = max(1, int(np.ceil(n / 24)))
    for x in vd:
        ax.axvline(x, color=st.GRID, linewidth=0.8 * style.line_width, zorder=0)
    for i in range(0, min(n, bounds.size - 1), every):
        ax.text(0.5 * (bounds[i] + bounds[i + 1]), 1.01, names[i], transform=ax.get_xaxis_transform(),
                ha="center", va="bottom", fontsize=style.font_size * 0.7, color=st.OUTLINE)


def draw_boundary(fig, data, style, rect=(0.0, 0.0, 1.0, 1.0), compact: bool = False) -> list:
    """Period-mean import along the boundary, the height curtain, and the import per edge
    (the per-edge bars only where the first two are missing, when compact)."""
    b = data.budget
    has_density = "boundary_import_density" in b
    has_curtain = "normal_flux_density" in b and "layer_thickness" in b
    bars = not (compact and has_density)
    rows = bars + has_density + has_curtain
    ratios = ([1.0] if has_density else []) + ([1.5] if has_curtain else []) + ([1.0] if bars else [])
    gs = _grid(fig, rect, rows, ratios, hspace=0.55)
    axes = []
    k = 0
    if has_density:
        ax = fig.add_subplot(gs[k])
        k += 1
        x = b["piece_distance"].values / 1000.0
        y = b["boundary_import_density"].mean("time").values
        ax.fill_between(x, y, 0, where=y >= 0, color=st.IMPORT, alpha=0.35, linewidth=0, interpolate=True, label="import")
        ax.fill_between(x, y, 0, where=y < 0, color=st.EXPORT, alpha=0.35, linewidth=0, interpolate=True, label="export")
        ax.plot(x, y, color=st.INK, linewidth=0.8 * style.line_width)
        ax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
        _edge_ticks(ax, data, style)
        ax.set_xlim(0, x.max() * 1.0 + 1e-9)
        ax.set_ylabel("import, kg m⁻¹ s⁻¹")
        if not (compact and has_curtain):  # the curtain below carries the same distance axis
            ax.set_xlabel("distance along the boundary from vertex 1, km")
        ax.set_title(_title(data, "import along the boundary, period mean", compact), pad=14)
        ax.legend(loc="lower right", ncol=2)
        axes.append(ax)
    if has_curtain:
        axes.append(_curtain(fig, gs[k], data, style))
        k += 1
    if not bars:
        return axes
    ax = fig.add_subplot(gs[k])
    edges = [str(e).removeprefix("edge ") for e in b["edge"].values]
    imp = b["edge_import"].mean("time").values / 1e6
    ax.bar(np.arange(len(edges)), imp, color=np.where(imp >= 0, st.IMPORT, st.EXPORT), width=0.75)
    ax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
    ax.set_xticks(np.arange(len(edges)), edges, fontsize=style.font_size * (0.8 if len(edges) < 30 else 0.5))
    ax.set_xlabel("edge")
    ax.set_ylabel("net import, 10⁶ kg s⁻¹")
    ax.set_title("period-mean net import per edge (> 0 into the region)")
    axes.append(ax)
    if not has_curtain:
        ax.text(0.99, 0.97, "no height curtain: it needs per-level fluxes, kept when drawing from level fields of up to 2000 steps",
                transform=ax.transAxes, ha="right", va="top", fontsize=style.caption_size, color=st.MUTED)
    return axes


def _curtain(fig, spec, data, style):
    b = data.budget
    flux = b["normal_flux_density"].mean("time").values * 1e4  # per Pa -> per 100 hPa
    thick = b["layer_thickness"].mean("time").values
    flux = np.where(thick > 0, flux, np.nan)  # below ground: no air, no value
    x = b["piece_distance"].values / 1000.0
    p = b["level"].values / 100.0
    ax = fig.add_subplot(spec)
    finite = np.abs(flux[np.isfinite(flux)])
    lim = float(np.quantile(finite, 0.98)) if finite.size and finite.max() > 0 else 1.0
    mesh = ax.pcolormesh(x, p, flux, cmap=st.SIGNED_CMAP, norm=TwoSlopeNorm(0.0, -lim, lim), shading="nearest",
                         rasterized=True)
    ax.set_ylim(p.max(), p.min())
    ax.set_facecolor("#d9d5cc")  # ground shows as grey
    ax.set_ylabel("pressure, hPa")
    ax.set_xlabel("distance along the boundary from vertex 1, km")
    ax.set_title("height curtain: import per 100 hPa layer (grey: below ground)", pad=14)
    _edge_ticks(ax, data, style)
    ax.grid(False)
    bar = fig.colorbar(mesh, ax=ax, pad=0.015, fraction=0.04, extend="both")
    bar.set_label("import, kg m⁻¹ s⁻¹ per 100 hPa", fontsize=style.font_size * 0.85)
    return ax


MONTHS = "J F M A M J J A S O N D".split()


def draw_climatology(fig, data, style, rect=(0.0, 0.0, 1.0, 1.0), compact: bool = False) -> list:
    """Mean annual cycle of P − E with its spread, on mm/day and m³/s axes, with discharge."""
    gs = _grid(fig, rect, 1, right=0.8 if compact else 0.86)
    ax = fig.add_subplot(gs[0])
    cyc, spread = monthly_cycle(data, "p_minus_e")
    m = cyc["month"].values
    ax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
    ax.fill_between(m, cyc["low"], cyc["high"], color=st.IMPORT, alpha=0.2, linewidth=0)
    ax.errorbar(m, cyc["mean"], yerr=[cyc["mean"] - cyc["low"], cyc["high"] - cyc["mean"]], color=st.IMPORT,
                marker="o", markersize=3 * style.line_width, capsize=3, label=f"P − E (bars and band: {spread})")
    if data.discharge is not None and len(data.discharge):
        dc = discharge_cycle(data.discharge)
        ax.plot(dc["month"], data.from_m3_s(dc["mean"]), color=st.SERIES_COLOURS["discharge"], marker="s",
                markersize=3 * style.line_width, linestyle=(0, (4, 1.5)), label="river discharge (right axis, m³/s)")
    ax.set_xlim(0.5, 12.5)
    ax.set_xticks(range(1, 13), MONTHS)
    ax.set_xlabel("calendar month")
    ax.set_ylabel("P − E, mm/day")
    right = ax.secondary_yaxis("right", functions=(data.to_m3_s, data.from_m3_s))
    right.set_ylabel("P − E over the region, m³/s")
    years = int(cyc["years"].max()) if len(cyc) else 0
    short = None
    if "daily" in spread or years < 10:
        short = ("short record: the months present, no complete month in two years" if "daily" in spread
                 else f"{years} years of complete months: a short climatology")
    # the note sits in a band between the plot and its title (the title is raised to make room),
    # so it never covers a bar, the band or the legend
    pad = 6.0 + (1.6 * style.caption_size if short else 0.0)
    ax.set_title(_title(data, "mean annual cycle of P − E", compact), pad=pad)
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.16) if compact else None)
    if short:
        ax.annotate(short, xy=(0.0, 1.0), xycoords="axes fraction", xytext=(0, 3), textcoords="offset points",
                    ha="left", va="bottom", fontsize=style.caption_size, color=st.MUTED)
    return [ax]
