"""Event animations: one frame per time step, the IVT map with the region above and the
running budget series below; MP4 through ffmpeg or an animated GIF through Pillow."""

from __future__ import annotations

import shutil
from pathlib import Path

import matplotlib.dates as mdates
import numpy as np
from matplotlib.figure import Figure

from . import style as st
from .data import series_label
from .mapview import base_axes, draw_region, frame_for, ivt_layer, ivt_limit, nice_reference

FRAME_SIZE = (12.8, 7.2)  # inches at 100 dpi: 1280 x 720 pixels, even sides for H.264
FRAME_DPI = 100
ANIMATION_FORMATS = (".mp4", ".gif")


def ffmpeg_program() -> tuple[str, str]:
    """(path, origin) of the ffmpeg to encode with: the system's (Debian package) when present,
    else the binary of the imageio-ffmpeg wheel."""
    found = shutil.which("ffmpeg")
    if found:
        return found, "system ffmpeg"
    try:
        import imageio_ffmpeg
    except ImportError:
        from budget.errors import RequestError

        raise RequestError(
            "MP4 needs ffmpeg: install it (apt-get install ffmpeg) or pip install imageio-ffmpeg, "
            "or write a .gif instead."
        ) from None
    return imageio_ffmpeg.get_ffmpeg_exe(), "imageio-ffmpeg wheel"


def animate(data, snapshots, path, style, fps: float = 4.0, stage=None) -> Path:
    """Write one frame per snapshot (budget.maps.column_snapshot, one per budget time step),
    atomically (budget.outputs.atomic_write), or through ``stage(path, write)``: a run's output
    transaction (budget.outputs.Outputs.stage)."""
    from budget.outputs import atomic_write

    from budget.errors import RequestError

    path = Path(path)
    if path.suffix.lower() not in ANIMATION_FORMATS:
        raise RequestError(f"Cannot tell the animation format of {str(path)!r}; end the name in .mp4 or .gif.")
    if not snapshots:
        raise RequestError("The time window holds no steps to animate; widen --start/--end.")
    if not fps > 0:
        raise RequestError(f"--fps must be a positive number of frames per second, got {fps!r}.")
    with style.context():
        fig, update = _frame_figure(data, snapshots, style)
        writer = _writer(path, fps)
        write = lambda tmp: _write_frames(fig, update, len(snapshots), writer, str(tmp))  # noqa: E731
        if stage is not None:
            return stage(path, write)
        return atomic_write(path, write, keep_suffix=True)


def _writer(path: Path, fps: float):
    from matplotlib import animation, rcParams

    if path.suffix.lower() == ".gif":
        return animation.PillowWriter(fps=fps)
    rcParams["animation.ffmpeg_path"] = ffmpeg_program()[0]
    return animation.FFMpegWriter(fps=fps, codec="libx264", extra_args=["-pix_fmt", "yuv420p"],
                                  metadata={"title": "Fluxfence event animation"})


def _write_frames(fig, update, count: int, writer, tmp) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    with writer.saving(fig, tmp, dpi=FRAME_DPI):
        for i in range(count):
            update(i)
            writer.grab_frame()


def _frame_figure(data, snapshots, style):
    """The figure drawn once; ``update(i)`` moves it to step i."""
    fig = Figure(figsize=FRAME_SIZE)
    frame = frame_for(data)
    ax = base_axes(fig, (0.03, 0.4, 0.6, 0.52), frame, style)
    vmax = max(ivt_limit(s["ivt"].values) for s in snapshots)
    mesh, quiv = ivt_layer(ax, snapshots[0], style, vmax)
    ref = nice_reference(vmax)
    fig.text(0.7, 0.47, "arrow scale:", fontsize=style.font_size * 0.8, color=st.MUTED, va="center")
    key = ax.quiverkey(quiv, 0.85, 0.47, ref, f"{ref:g} kg m⁻¹ s⁻¹", labelpos="E", coordinates="figure",
                       color=st.INK, fontproperties={"size": style.font_size * 0.8})
    key.set_zorder(9)
    draw_region(ax, data.region, style, numbers=False)
    cax = ax.inset_axes((1.04, 0.0, 0.035, 1.0))
    bar = fig.colorbar(mesh, cax=cax, extend="max")
    bar.set_label("IVT, kg m⁻¹ s⁻¹")
    title = fig.text(0.03, 0.975, "", fontsize=style.title_size, fontweight="bold", va="top")
    # running series below the map
    sax = fig.add_axes((0.07, 0.14, 0.86, 0.2))
    times = data.times
    lines = {}
    for name in ("p_minus_e", "boundary_convergence", "pw_tendency"):
        values = data.series(name)
        sax.plot(times, values, color=st.SERIES_COLOURS[name], alpha=0.15)
        lines[name] = (sax.plot([], [], color=st.SERIES_COLOURS[name], label=series_label(name))[0], values)
    sax.axhline(0.0, color=st.MUTED, linewidth=0.6 * style.line_width)
    sax.set_xlim(times[0], times[-1])
    sax.set_ylabel("mm/day")
    locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
    sax.xaxis.set_major_locator(locator)
    sax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    sax.legend(loc="upper left", ncol=3)
    marker = sax.axvline(times[0], color=st.OUTLINE, linewidth=style.line_width)
    _side_notes(fig, data, style)

    def update(i: int) -> None:
        snap = snapshots[i]
        mesh.set_array(np.asarray(snap["ivt"].values))
        sx, sy = _strides(snap, style)
        quiv.set_UVC(*_projected(ax, snap["lon"].values[sx], snap["lat"].values[sy],
                                 snap["ivt_u"].values[sy, sx], snap["ivt_v"].values[sy, sx]))
        for line, values in lines.values():
            line.set_data(times[: i + 1], values[: i + 1])
        marker.set_xdata([times[i], times[i]])
        title.set_text(f"{data.region_name} · {times[i]:%Y-%m-%d %H:%M} UTC · step {i + 1} of {len(snapshots)}")

    update(0)
    return fig, update


def _strides(snap, style):
    from .cartography import thin_arrows

    return thin_arrows(snap["lon"].values, snap["lat"].values, style.arrows)


def _projected(ax, lon, lat, u, v):
    """Vectors rotated into the map projection, as cartopy's quiver does when it first draws."""
    import cartopy.crs as ccrs

    x, y = np.meshgrid(lon, lat)
    return ax.projection.transform_vectors(ccrs.PlateCarree(), x, y, np.asarray(u, float), np.asarray(v, float))


def _side_notes(fig, data, style) -> None:
    pme = data.series("p_minus_e")
    text = (f"area {data.area_m2 / 1e6:,.0f} km²\nmean P − E {np.nanmean(pme):.2f} mm/day\n"
            f"mean W {np.nanmean(data.series('precipitable_water')):.1f} mm\n\n"
            "outline: the region\narrows: IVT direction")
    fig.text(0.7, 0.88, text, fontsize=style.font_size, va="top", color=st.INK, linespacing=1.5)
    st.add_caption(fig, data, style)
