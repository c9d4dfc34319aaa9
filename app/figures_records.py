"""Plotly builders of the dashboard's long-record card: periods, climatology, river, overlay.

Pure functions of data, like app/figures.py: they take a budget Dataset (budget.ledger.compute)
or the tables of budget.periods / budget.discharge, and return a Plotly figure or plain rows
for a table.  All period arithmetic (intervals, coverage, totals, means, the interannual
spread) comes from budget.periods and budget.discharge; nothing here re-derives it.  Every
axis title and column header carries its unit, and every title names the region whose
numbers it shows.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from budget import terms

from .figures import ACCENT, FONT, GRID, INK, MUTED, PAPER, UNIT_LABELS, WARM, empty_figure, number

#: the period selector: (value, label); "event" is the whole loaded record
PERIODS = (("event", "event"), ("day", "day"), ("month", "month"), ("season", "season"),
           ("year", "year"), ("water-year", "water year"))

#: the engine's period kind behind each choice (budget.periods.KINDS)
KIND_OF = {"event": "record", "day": "day", "month": "month", "season": "season",
           "year": "year", "water-year": "water-year"}

#: colours of overlaid regions, in order (distinct hues of our own; the legend names them)
OVERLAY_COLOURS = ("#2a7f86", "#b5651d", "#5b4f9e", "#3f8f3a", "#b23a5e", "#8a7a1f",
                   "#2f5f9e", "#7a4a2a")

CLIMATE_YEARS = 3  # fewer years of complete months than this: "needs several years" (common practice, no source)
MONTH_NAMES = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov",
               "Dec")


class _Fig:
    """Traces and a layout as plain dicts, handed to Plotly once without property validation
    (as app/figures.py does: validation dominated the dashboard's redraws)."""

    def __init__(self):
        self.traces: list[dict] = []
        self.layout: dict = {}

    def add_trace(self, trace: dict) -> None:
        self.traces.append(trace)

    def update_xaxes(self, title_text: str, **values) -> None:
        self.layout["xaxis"] = {**self.layout.get("xaxis", {}), "title": {"text": title_text}, **values}

    def update_yaxes(self, title_text: str, **values) -> None:
        self.layout["yaxis"] = {**self.layout.get("yaxis", {}), "title": {"text": title_text}, **values}

    def done(self) -> go.Figure:
        return go.Figure({"data": self.traces, "layout": self.layout}, _validate=False)


def _base_layout(fig: _Fig, **extra) -> None:
    fig.layout.update(font=dict(family=FONT, color=INK, size=12), paper_bgcolor=PAPER,
                      plot_bgcolor=PAPER, hoverlabel=dict(font=dict(family=FONT)), **extra)


def _hline(y: float) -> dict:
    """A thin horizontal line across the plot at ``y`` (the zero line)."""
    return dict(type="line", x0=0, x1=1, y0=y, y1=y, xref="x domain", yref="y",
                line=dict(color=GRID, width=1), layer="below")


def _panel_title(what: str, name: str | None) -> dict:
    """A title naming the region on a second, smaller line (the look of app/figures.py)."""
    return dict(text=f"{what}<br><span style='font-size:12px'>{_escape(name or 'the region')}</span>",
                x=0.01, y=1.0, yref="container", yanchor="top", pad=dict(t=24),
                font=dict(size=14))


def period_terms(ds) -> list[tuple[str, str]]:
    """(variable, label) of the rate terms this budget can sum over periods."""
    from budget.periods import RATE_TERMS

    return [(v, terms.term(v).legend) for v in RATE_TERMS if v in ds]


def period_table(ds, choice: str, water_year_start: int = 10, min_coverage: float = 0.9):
    """budget.periods.aggregate of one region's budget for a selector choice."""
    from budget.periods import aggregate

    if choice not in KIND_OF:
        raise ValueError(f"unknown period {choice!r}")
    return aggregate(ds, KIND_OF[choice], water_year_start=water_year_start,
                     min_coverage=min_coverage)


def _volume_unit(frame, term: str) -> str:
    """km³ when the largest period total reaches 0.1 km³, else m³."""
    big = np.nanmax(np.abs(frame[f"{term}_total_km3"].to_numpy(float)), initial=0.0)
    return "km3" if big >= 0.1 else "m3"


def period_rows(frame, term: str = "p_minus_e") -> tuple[list[str], list[dict]]:
    """(column headers with units, rows) of the period table for one term.

    Each row: ``cells`` (text per column), ``flagged`` (coverage below the minimum: totals and
    means are left empty by budget.periods, not averaged from part of the period) and
    ``values`` (the floats shown, in the displayed units)."""
    vol = _volume_unit(frame, term)
    vol_label = {"km3": "km³", "m3": "m³"}[vol]
    legend = terms.term(term).legend
    head = ["period", "start (UTC)", "end (UTC)", "steps", "coverage (%)",
            f"{legend} total (mm)", f"{legend} total ({vol_label})",
            f"{legend} mean (mm/day)", f"{legend} mean (m³/s)"]
    rows = []
    for _, r in frame.iterrows():
        values = {"total_mm": float(r[f"{term}_total_mm"]),
                  f"total_{vol}": float(r[f"{term}_total_{vol}"]),
                  "mean_mm_day": float(r[f"{term}_mean_mm_day"]),
                  "mean_m3_s": float(r[f"{term}_mean_m3_s"]),
                  "coverage": float(r["coverage"])}
        flagged = not bool(r["complete"])
        cells = [str(r["period"]), _when(r["start"]), _when(r["end"]), str(int(r["steps"])),
                 number(100 * values["coverage"], 3) + (" — low coverage" if flagged else "")]
        cells += [number(values[k]) for k in ("total_mm", f"total_{vol}", "mean_mm_day",
                                              "mean_m3_s")]
        rows.append({"cells": cells, "flagged": flagged, "values": values})
    return head, rows


def _when(iso_text: str) -> str:
    """'2025-01-15T00:00:00Z' → '2025-01-15 00:00'."""
    return str(iso_text).replace("T", " ")[:16]


def flagged_counts(ds) -> list[tuple[str, int]]:
    """(input variable, values flagged and accepted) from the budget's ``flagged_values``
    attribute (budget.plausible: e.g. small negative humidities), largest first."""
    raw = ds.attrs.get("flagged_values") or "{}"
    try:
        counts = json.loads(raw) if isinstance(raw, str) else dict(raw)
    except (TypeError, ValueError):
        return []
    return sorted(((str(k), int(n)) for k, n in counts.items()), key=lambda kv: (-kv[1], kv[0]))


def flagged_text(ds) -> str:
    """The line under a period table: values the plausibility checks flagged and accepted,
    per input variable, over the whole computed record."""
    counts = flagged_counts(ds)
    return ("Values flagged by the plausibility checks and accepted (whole record): "
            + (", ".join(f"{var}: {n:,}" for var, n in counts) if counts else "none"))


def period_figure(ds, frame, term: str, name: str, choice: str) -> go.Figure:
    """The chosen term by period: bars of the period means (mm/day); periods with low coverage
    are marked, not drawn as values.  For "event", the per-step series and its record mean."""
    legend = terms.term(term).legend
    area = float(ds.attrs["region_area_m2"])
    fig = _Fig()
    unit = "mm/day"
    if choice == "event":
        times = pd.to_datetime(ds["time"].values)
        y = np.asarray(terms.to_display(term, ds[term].values, unit, area), float)
        fig.add_trace(dict(type="scatter", x=times, y=y, mode="lines", name=f"{legend}, each step",
                           line=dict(color=WARM, width=2),
                           hovertemplate=f"%{{x|%Y-%m-%d %H:%M}}<br>%{{y:.4g}} {unit}<extra></extra>"))
        mean = float(frame[f"{term}_mean_mm_day"].iloc[0])
        fig.add_trace(dict(type="scatter", x=[times[0], times[-1]], y=[mean, mean], mode="lines",
                           name=f"record mean {number(mean)} {unit}",
                           line=dict(color=INK, width=1.4, dash="dash")))
        xtitle = "time (UTC)"
    else:
        labels = frame["period"].astype(str).tolist()
        means = frame[f"{term}_mean_mm_day"].to_numpy(float)
        ok = frame["complete"].to_numpy(bool)
        fig.add_trace(dict(type="bar", x=labels, y=np.where(ok, means, np.nan), name=f"{legend}, period mean",
                           marker=dict(color=[ACCENT if v >= 0 else WARM for v in np.nan_to_num(means)]),
                           hovertemplate=f"%{{x}}<br>%{{y:.4g}} {unit}<extra></extra>"))
        if not ok.all():
            cov = frame["coverage"].to_numpy(float)
            fig.add_trace(dict(type="scatter", x=[lab for lab, k in zip(labels, ok) if not k],
                               y=[0.0] * int((~ok).sum()), mode="markers+text",
                               marker=dict(symbol="x-thin-open", size=10, color=MUTED),
                               text=[f"{number(100 * c, 2)} %" for c, k in zip(cov, ok) if not k],
                               textposition="top center", textfont=dict(color=MUTED, size=10),
                               name="low coverage: not averaged (coverage shown)"))
        xtitle = {"day": "day", "month": "month", "season": "season (named by its last month's year)",
                  "year": "calendar year", "water-year": "water year (named by the year it ends in)"}[choice]
    what = (f"{legend} through the record, each step and its mean (mm/day)" if choice == "event"
            else f"{legend} by {dict(PERIODS)[choice]}, period means (mm/day)")
    title = _panel_title(what, name)
    _base_layout(fig, title=title, showlegend=True, margin=dict(l=60, r=20, t=88, b=50),
                 shapes=[_hline(0)],
                 legend=dict(orientation="h", x=0, y=1.0, yanchor="bottom", font=dict(size=11),
                             bgcolor="rgba(0,0,0,0)"), bargap=0.15)
    fig.update_xaxes(title_text=xtitle, gridcolor=GRID)
    fig.update_yaxes(title_text=f"{legend} ({unit})", gridcolor=GRID, zeroline=False)
    return fig.done()


def climatology_note(clim, term: str) -> str:
    """One plain sentence on how many years the monthly climatology rests on."""
    months = clim[clim["period"] == "month"]
    years = int(months["years"].max()) if len(months) else 0
    if years == 0:
        return ("No month of this record is complete, so there is no climatology yet: a mean "
                "annual cycle needs several years of data.")
    if years < CLIMATE_YEARS:
        return (f"Only {years} year{'s' if years > 1 else ''} of complete months: a climatology "
                "needs several years, so read these bars as single months, not a mean cycle.")
    wy = clim[clim["period"] == "water-year"]
    text = f"Mean annual cycle from up to {years} years of complete months."
    if len(wy) and int(wy["years"].iloc[0]) > 0:
        r = wy.iloc[0]
        text += (f" Water years: {number(r[f'{term}_mean_mm_day'])} ± "
                 f"{number(r[f'{term}_std_mm_day'])} mm/day ({int(r['years'])} years).")
    return text


def climatology_figure(clim, term: str, name: str) -> go.Figure:
    """Bars per calendar month: the interannual mean of the monthly means (mm/day) with ±1
    interannual standard deviation as error bars, and the number of years above each bar
    (budget.periods.climatology).  The note on the record's length sits in the title block,
    above the plot area, so it never covers a bar."""
    legend = terms.term(term).legend
    months = clim[clim["period"] == "month"].sort_values("month")
    mean = months[f"{term}_mean_mm_day"].to_numpy(float)
    std = months[f"{term}_std_mm_day"].to_numpy(float)
    years = months["years"].to_numpy(int)
    # the years behind each bar under its month name (clear of the bars and error bars)
    labels = [f"{MONTH_NAMES[int(m) - 1]}<br>{n} yr" for m, n in zip(months["month"], years)]
    note = climatology_note(clim, term)
    if not (years > 0).any():  # no complete month: the note alone, no empty axes
        return empty_figure(f"{_escape(name)}: {note}")
    title = _panel_title(f"{legend}, mean by calendar month (mm/day)", name)
    title["text"] += f"<br><span style='font-size:11px;color:{MUTED}'>{_wrap(note)}</span>"
    fig = _Fig()
    fig.add_trace(dict(type="bar", x=labels, y=mean, name=f"{legend}, interannual mean",
                       marker=dict(color=[ACCENT if v >= 0 else WARM for v in np.nan_to_num(mean)]),
                       error_y=dict(type="data", array=np.nan_to_num(std), visible=True,
                                    color=INK, thickness=1.2, width=4),
                       customdata=np.stack([np.nan_to_num(std), years], axis=-1),
                       hovertemplate=("%{x}: %{y:.4g} mm/day ± %{customdata[0]:.3g}"
                                      " (%{customdata[1]} years)<extra></extra>")))
    _base_layout(fig, title=title, showlegend=False, margin=dict(l=60, r=20, t=110, b=45),
                 shapes=[_hline(0)], bargap=0.2)
    fig.update_xaxes(title_text="calendar month; error bars: ±1 standard deviation between years",
                     gridcolor=GRID)
    fig.update_yaxes(title_text=f"{legend} ({'mm/day'})", gridcolor=GRID, zeroline=False)
    return fig.done()


def _wrap(text: str, width: int = 150) -> str:
    """Break a long note into title lines (Plotly titles do not wrap on their own)."""
    words, lines, line = text.split(), [], ""
    for w in words:
        if line and len(line) + 1 + len(w) > width:
            lines.append(line)
            line = w
        else:
            line = f"{line} {w}".strip()
    return "<br>".join(lines + [line])


def pme_m3_s(ds) -> np.ndarray:
    """P − E of the region in m³/s of liquid water (budget.terms.to_display)."""
    return np.asarray(terms.to_display("p_minus_e", ds["p_minus_e"].values, "m3/s",
                                       float(ds.attrs["region_area_m2"])), float)


def discharge_summary(table) -> str:
    """One sentence: the long-term comparison of budget.discharge.compare, or why there is none."""
    lt = table[table["period"] == "long-term"]
    if lt.empty or not bool(lt["complete"].iloc[0]):
        missing = float(lt["missing_fraction"].iloc[0]) if len(lt) else float("nan")
        return ("No water year is complete in both the budget and the gauge record, so there is "
                "no long-term ratio yet (gauge missing over the common water years: "
                f"{number(100 * missing, 3)} %).")
    r = lt.iloc[0]
    return (f"{r['first']}–{r['last']} ({int(r['years'])} water years): mean P − E "
            f"{number(r['p_minus_e_m3_s'])} m³/s, mean discharge {number(r['discharge_m3_s'])} m³/s, "
            f"ratio discharge / (P − E) {number(r['ratio'], 3)}; gauge missing "
            f"{number(100 * r['missing_fraction'], 3)} %.")


def discharge_rows(table) -> tuple[list[str], list[list[str]]]:
    """(headers with units, cells) of the per-water-year comparison and its long-term row."""
    head = ["water year", "P − E (m³/s)", "discharge (m³/s)", "difference (m³/s)",
            "discharge / (P − E)", "budget coverage (%)", "gauge coverage (%)"]
    rows = []
    for _, r in table.iterrows():
        long_term = r["period"] == "long-term"
        cov = ("—", "—") if long_term else (number(100 * r["budget_coverage"], 3),
                                           number(100 * r["gauge_coverage"], 3))
        label = f"long-term ({int(r['years'])} years)" if long_term else str(r["period"])
        rows.append([label, number(r.get("p_minus_e_m3_s", np.nan)),
                     number(r.get("discharge_m3_s", np.nan)),
                     number(r.get("difference_m3_s", np.nan)), number(r.get("ratio", np.nan), 3),
                     *cov])
    return head, rows


def discharge_figure(ds, gauge, table, name: str) -> go.Figure:
    """P − E of the region and the river's discharge on one axis (m³/s), over the budget's time
    span, with the long-term means when whole water years are common to both records."""
    times = pd.to_datetime(ds["time"].values)
    pme = pme_m3_s(ds)
    gt = pd.to_datetime(gauge.times)
    inside = (gt >= times[0]) & (gt <= times[-1])
    fig = _Fig()
    fig.add_trace(dict(type="scatter", x=times, y=pme, mode="lines", name="P − E over the region",
                       line=dict(color=WARM, width=1.6),
                       hovertemplate="%{x|%Y-%m-%d %H:%M}<br>P − E %{y:.4g} m³/s<extra></extra>"))
    fig.add_trace(dict(type="scatter", x=gt[inside], y=np.asarray(gauge.discharge)[inside],
                       mode="lines+markers" if inside.sum() <= 60 else "lines",
                       name=f"discharge ({gauge.column})", line=dict(color="#2f5f9e", width=1.8),
                       marker=dict(size=4),
                       hovertemplate="%{x|%Y-%m-%d}<br>discharge %{y:.4g} m³/s<extra></extra>"))
    lt = table[table["period"] == "long-term"]
    if len(lt) and bool(lt["complete"].iloc[0]):
        r = lt.iloc[0]
        x0, x1 = pd.Timestamp(str(r["start"]).rstrip("Z")), pd.Timestamp(str(r["end"]).rstrip("Z"))
        for value, colour, label in ((r["p_minus_e_m3_s"], WARM, "long-term P − E"),
                                     (r["discharge_m3_s"], "#2f5f9e", "long-term discharge")):
            fig.add_trace(dict(type="scatter", x=[x0, x1], y=[value, value], mode="lines",
                               name=f"{label} {number(value)} m³/s",
                               line=dict(color=colour, width=1.2, dash="dash")))
    title = _panel_title("P − E and river discharge (m³/s)", name)
    title["text"] += (f"<br><span style='font-size:11px;color:{MUTED}'>"
                      f"{_wrap(discharge_summary(table))}</span>")
    _base_layout(fig, title=title, showlegend=True, hovermode="x unified",
                 margin=dict(l=60, r=20, t=130, b=45),
                 shapes=[_hline(0)],
                 legend=dict(orientation="h", x=0, y=1.0, yanchor="bottom", font=dict(size=11),
                             bgcolor="rgba(0,0,0,0)"))
    fig.update_xaxes(title_text="time (UTC)", gridcolor=GRID)
    fig.update_yaxes(title_text="P − E and discharge (m³/s)", gridcolor=GRID, zeroline=False)
    return fig.done()


def overlay_figure(series: list[tuple[str, object]], term: str = "p_minus_e",
                   units: str = "mm/day", pending: list[str] | None = None,
                   failed: list[str] | None = None) -> go.Figure:
    """Several regions' series of one term on one axis, one colour each, each under its own
    name (``series``: (region name, that region's budget Dataset)).  ``pending``: ticked
    regions whose budgets are still computing; ``failed``: those that could not be computed
    (with the reason) — both said in the title, never drawn."""
    legend = terms.term(term).legend
    unit = UNIT_LABELS[units]
    notes = ([f"still computing, not drawn yet: {', '.join(pending)}"] if pending else [])
    notes += ([f"not computed: {'; '.join(failed)}"] if failed else [])
    if not series:
        return empty_figure(" · ".join(notes) or
                            "Tick regions in the list above to overlay their series.")
    fig = _Fig()
    for k, (name, ds) in enumerate(series):
        y = np.asarray(terms.to_display(term, ds[term].values, units,
                                        float(ds.attrs["region_area_m2"])), float)
        colour = OVERLAY_COLOURS[k % len(OVERLAY_COLOURS)]
        dash = ("solid", "dash", "dot")[(k // len(OVERLAY_COLOURS)) % 3]
        fig.add_trace(dict(type="scatter", x=pd.to_datetime(ds["time"].values), y=y,
                           mode="lines", name=name, line=dict(color=colour, width=2, dash=dash),
                           hovertemplate=f"{_escape(name)}<br>%{{x|%Y-%m-%d %H:%M}}<br>"
                                         f"%{{y:.4g}} {unit}<extra></extra>"))
    title = _panel_title(f"{legend} of {len(series)} region{'s' if len(series) != 1 else ''} "
                         f"({unit})", ", ".join(n for n, _ in series))
    if notes:
        title["text"] += (f"<br><span style='font-size:11px;color:{MUTED}'>"
                          f"{_wrap(_escape(' · '.join(notes)))}</span>")
    _base_layout(fig, title=title, showlegend=True, hovermode="x unified",
                 margin=dict(l=60, r=20, t=110 if notes else 96, b=45),
                 shapes=[_hline(0)],
                 legend=dict(orientation="h", x=0, y=1.0, yanchor="bottom", font=dict(size=11),
                             bgcolor="rgba(0,0,0,0)"))
    fig.update_xaxes(title_text="time (UTC)", gridcolor=GRID)
    fig.update_yaxes(title_text=f"{legend} ({unit})", gridcolor=GRID, zeroline=False)
    return fig.done()


def _escape(text: str) -> str:
    """Region names are user text: no markup reaches Plotly's HTML-like labels."""
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
