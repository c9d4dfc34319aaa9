"""Whole figures: one layout per figure, or every layout on one A4 / letter page; saving."""

from __future__ import annotations

from pathlib import Path

from matplotlib.figure import Figure  # a bare Figure: no pyplot state, no GUI backend
from matplotlib.lines import Line2D

from . import style as st
from .mapview import draw_map
from .panels import draw_boundary, draw_climatology, draw_series

LAYOUTS = ("map", "series", "boundary", "climatology", "report")
FORMATS = {".png": "png", ".pdf": "pdf", ".svg": "svg"}


def render(layout: str, data, style: st.Style, page: str = "a4", convergence: bool = False) -> Figure:
    """The matplotlib Figure of one layout (pure: data in, figure out, nothing written)."""
    from budget.errors import RequestError

    if layout not in LAYOUTS:
        raise RequestError(f"Unknown layout {layout!r}; choose one of {', '.join(LAYOUTS)}.")
    with style.context():
        if layout == "report":
            return _report(data, style, page, convergence)
        w, h = style.map_size if layout == "map" else style.single
        if layout == "map" and convergence:
            w *= 1.5
        if layout == "boundary":
            h *= 1.25
        fig = Figure(figsize=(w, h))
        rect = (0.0, 0.05, 1.0, 0.93)
        {"map": lambda: draw_map(fig, data, style, convergence, rect),
         "series": lambda: draw_series(fig, data, style, rect),
         "boundary": lambda: draw_boundary(fig, data, style, rect),
         "climatology": lambda: draw_climatology(fig, data, style, rect)}[layout]()
        st.add_caption(fig, data, style)
        return fig


def _report(data, style: st.Style, page: str, convergence: bool) -> Figure:
    """Every layout on one portrait page: title, map and annual cycle, series, boundary."""
    fig = Figure(figsize=st.page_size(page))
    fig.text(0.03, 0.985, f"Water-vapour budget: {data.region_name}", fontsize=style.title_size * 1.5,
             fontweight="bold", va="top", color=st.INK)
    area_km2 = data.area_m2 / 1e6
    fig.text(0.03, 0.962, f"{data.period_text()} · area {area_km2:,.0f} km² · import and convergence positive "
             "when the region gains water", fontsize=style.font_size, va="top", color=st.MUTED)
    fig.add_artist(Line2D([0.03, 0.97], [0.948, 0.948], color=st.OUTLINE, linewidth=1.2))
    draw_map(fig, data, style, False, (0.0, 0.665, 0.56, 0.285), compact=True)
    draw_climatology(fig, data, style, (0.54, 0.69, 0.46, 0.25), compact=True)
    draw_series(fig, data, style, (0.0, 0.35, 1.0, 0.285), compact=True)
    draw_boundary(fig, data, style, (0.0, 0.04, 1.0, 0.31), compact=True)
    st.add_caption(fig, data, style)
    return fig


def output_format(path) -> str:
    from budget.errors import RequestError

    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise RequestError(f"Cannot tell the figure format of {str(path)!r}; end the name in .png, .pdf or .svg.")
    return FORMATS[suffix]


def save(fig: Figure, path, dpi: int = 150, stage=None) -> Path:
    """Write the figure by extension, atomically (budget.outputs.atomic_write: temporary file
    beside it, fsync, rename, 0644 under umask 022).  ``stage(path, write)``: a run's output
    transaction (budget.outputs.Outputs.stage) instead, so the file lands with the others."""
    from budget.outputs import atomic_write

    fmt = output_format(path)
    write = lambda tmp: fig.savefig(str(tmp), format=fmt, dpi=dpi, metadata=_metadata(fmt))  # noqa: E731
    if stage is not None:
        return stage(Path(path), write)
    return atomic_write(path, write, keep_suffix=True)


def to_bytes(fig: Figure, fmt: str = "png", dpi: int = 150) -> bytes:
    """The figure as PNG, PDF or SVG bytes (for the dashboard's download)."""
    import io

    buffer = io.BytesIO()
    fig.savefig(buffer, format=fmt, dpi=dpi, metadata=_metadata(fmt))
    return buffer.getvalue()


def _metadata(fmt: str) -> dict:
    if fmt == "png":
        return {"Software": "Fluxfence"}
    if fmt == "pdf":
        return {"Creator": "Fluxfence", "Title": "Fluxfence water-vapour budget"}
    return {"Creator": "Fluxfence"}
