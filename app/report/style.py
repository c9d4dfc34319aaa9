"""Look of the report figures: two presets (paper, slide), the palette, labels and captions."""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass

import matplotlib as mpl

# A calm palette of our own, shared in spirit with the dashboard (app/figures.py).
INK = "#23303b"
MUTED = "#6b7780"
GRID = "#e4e1da"
PAPER = "#ffffff"
OUTLINE = "#e0218a"  # the region outline: a magenta that no IVT or convergence colour uses
IMPORT = "#2a7f86"  # teal: gain, import, convergence
EXPORT = "#b5651d"  # warm brown: loss, export, divergence
LAND_LINE = "#2b2b2b"
BORDER_LINE = "#5a5a5a"

# Perceptually uniform sequential scale for magnitudes; a diverging scale centred on zero for
# signed rates (brown where the column dries, blue-green where it gains moisture).
IVT_CMAP = "cividis"
SIGNED_CMAP = "BrBG"

# One colour per series, used the same way on every panel.
SERIES_COLOURS = {
    "precipitable_water": "#3d5a92",
    "boundary_convergence": IMPORT,
    "area_convergence": "#7a9e3a",
    "pw_tendency": "#8c6bb1",
    "p_minus_e": INK,
    "precipitation": "#2f6db5",
    "evaporation": "#d08a2e",
    "closure_residual": "#a33b3b",
    "mass_correction_convergence": MUTED,
    "discharge": "#5b3a1e",
}

PAGES = {"a4": (8.27, 11.69), "letter": (8.5, 11.0)}  # inches, portrait (ISO 216; ANSI letter)

INVENTED_NOTE = "INVENTED SCENARIO: not real weather"
CAUTION = (
    "Reanalysis budgets are estimates, not a substitute for gauge records or official forecasts; "
    "defer to local agencies and licensed practice."
)


@dataclass(frozen=True)
class Style:
    """Fonts, sizes and line widths of one preset."""

    name: str
    font_size: float
    title_size: float
    caption_size: float
    line_width: float
    outline_width: float
    single: tuple[float, float]  # size of a one-layout figure, inches
    map_size: tuple[float, float]
    arrows: int  # arrows along the longer side of a map

    @contextmanager
    def context(self):
        """matplotlib settings for drawing in this style."""
        rc = {
            "font.size": self.font_size,
            "font.family": "DejaVu Sans",
            "axes.titlesize": self.title_size,
            "axes.titleweight": "bold",
            "axes.titlelocation": "left",
            "axes.labelsize": self.font_size,
            "axes.edgecolor": MUTED,
            "axes.labelcolor": INK,
            "axes.spines.top": False,
            "axes.spines.right": False,
            "axes.grid": True,
            "grid.color": GRID,
            "grid.linewidth": 0.6 * self.line_width,
            "xtick.color": INK,
            "ytick.color": INK,
            "xtick.labelsize": self.font_size * 0.9,
            "ytick.labelsize": self.font_size * 0.9,
            "legend.fontsize": self.font_size * 0.85,
            "legend.frameon": False,
            "lines.linewidth": self.line_width,
            "figure.facecolor": PAPER,
            "savefig.facecolor": PAPER,
            "text.color": INK,
            "svg.fonttype": "none",
            "pdf.fonttype": 42,
        }
        with mpl.rc_context(rc):
            yield self


STYLES = {
    "paper": Style("paper", 8.0, 9.0, 6.5, 1.1, 1.6, (7.0, 6.2), (6.5, 5.4), 14),
    "slide": Style("slide", 15.0, 17.0, 11.0, 2.4, 3.2, (13.33, 7.5), (12.0, 7.0), 18),
}


def get_style(name: str) -> Style:
    from budget.errors import RequestError

    if name not in STYLES:
        raise RequestError(f"Unknown figure style {name!r}; choose one of {', '.join(STYLES)}.")
    return STYLES[name]


def page_size(name: str) -> tuple[float, float]:
    from budget.errors import RequestError

    if name not in PAGES:
        raise RequestError(f"Unknown page size {name!r}; choose one of {', '.join(PAGES)}.")
    return PAGES[name]


def add_caption(fig, data, style: Style, extra: str = "") -> None:
    """Period, data source and method in a small caption along the bottom; the invented-data
    label on the figure itself; the caution about reanalysis budgets."""
    text = data.caption() + (f" · {extra}" if extra else "")
    fig.text(0.01, 0.006, text + "\n" + CAUTION, ha="left", va="bottom", fontsize=style.caption_size,
             color=MUTED, wrap=True)
    if data.invented:
        fig.text(0.99, 0.995, INVENTED_NOTE, ha="right", va="top", fontsize=style.caption_size * 1.15,
                 fontweight="bold", color="#ffffff",
                 bbox={"boxstyle": "round,pad=0.3", "facecolor": EXPORT, "edgecolor": "none"})
