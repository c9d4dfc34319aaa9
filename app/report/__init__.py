"""Report figures (matplotlib + cartopy) and event animations: pure functions of data.

``render(layout, data, style)`` returns a matplotlib Figure for one of LAYOUTS; ``save`` writes
it by extension (PNG, PDF, SVG); ``animate`` writes an MP4 or GIF of an event.  The data come
in as one ``FigureData`` (app/figure_cmd.py builds it from fields or a saved budget); nothing
here imports Dash or plotly, and nothing reads files except the shipped cartography.
"""

from .data import FigureData, monthly_cycle
from .motion import ANIMATION_FORMATS, animate, ffmpeg_program
from .page import FORMATS, LAYOUTS, output_format, render, save, to_bytes
from .style import STYLES, Style, get_style

__all__ = [
    "ANIMATION_FORMATS", "FORMATS", "FigureData", "LAYOUTS", "STYLES", "Style", "animate", "ffmpeg_program",
    "get_style", "monthly_cycle", "output_format", "render", "save", "to_bytes",
]
