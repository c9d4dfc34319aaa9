"""Budget series summed over periods a water balance uses: days, months, seasons, years, water
years, the whole record; and the mean annual cycle (climatology).

One integration rule serves means and totals (``INTEGRATION_RULE``): each time step stands for
the interval from its time to the next step's time, over which its value holds. A step
followed by a gap longer than 1.5 nominal steps (the median spacing) covers one nominal step
only; the last step covers one nominal step. Intervals are cut at period boundaries, so a
period's total is the exact integral of that step function over the period, its coverage is
the covered fraction of the period, and its mean is the total divided by the covered time:
mean × covered time = total to round-off, and with full coverage the covered time is the
period's length. A period covered less than ``min_coverage`` is flagged (``complete`` False)
and its totals and means are left empty rather than averaged from part of the period.

Periods follow the record's calendar (standard, noleap, 360_day ... through cftime): a
360_day February has 30 days, a noleap year 365. A water year starting in month M of year
Y − 1 is named after year Y, the year it ends in (the USGS practice for 1 October starts).

Pure functions of the budget Dataset (budget.ledger.compute, or a Dataset with a ``region``
dimension); nothing here reads files.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from .constants import SECONDS_PER_DAY, WATER_DENSITY
from .errors import RequestError
from . import terms
from .units import kg_m2_to_mm

KINDS = ("record", "day", "month", "season", "year", "water-year")

INTEGRATION_RULE = (
    "time steps as intervals: each value holds from its time to the next step's time (one median "
    "step after the last step, and after a step followed by a gap longer than 1.5 median steps); "
    "intervals are cut at period boundaries; total = integral over the covered time, "
    "mean = total / covered time"
)

#: Rate terms of the catalogue (budget.terms, kg m-2 s-1) summed over periods; missing ones are
#: skipped. Their period columns are named ``<term>_<statistic>_<unit>`` (PERIOD_STATS).
RATE_TERMS = (
    "p_minus_e", "vapour_convergence", "pw_tendency", "p_minus_e_uncorrected",
    "precipitation", "evaporation", "p_minus_e_observed",
)

#: State terms of the catalogue (kg m-2) averaged over periods, shown in mm.
STATE_TERMS = ("precipitable_water",)

#: Column suffixes of a rate term in a period table: (suffix, statistic, display unit).
PERIOD_STATS = (
    ("total_mm", "total", "mm"), ("total_m3", "total", "m3"), ("total_km3", "total", "km3"),
    ("mean_mm_day", "mean", "mm/day"), ("mean_m3_s", "mean", "m3/s"),
)

SEASON_NAMES = {12: "DJF", 3: "MAM", 6: "JJA", 9: "SON"}

_STANDARD = ("standard", "gregorian", "proleptic_gregorian")


@dataclass(frozen=True)
class PeriodRule:
    """How a record is cut into periods."""

    kind: str = "month"
    water_year_start: int = 10
    min_coverage: float = 0.9

    def __post_init__(self):
        if self.kind not in KINDS:
            raise RequestError(f"Unknown period {self.kind!r}; choose one of {', '.join(KINDS)}.")
        if not (isinstance(self.water_year_start, (int, np.integer)) and 1 <= self.water_year_start <= 12):
            raise RequestError(f"The water year must start in a month 1..12, got {self.water_year_start!r}; for example 10 for 1 October.")
        if not 0.0 <= float(self.min_coverage) <= 1.0:
            raise RequestError(f"The minimum coverage must be a fraction between 0 and 1, got {self.min_coverage!r}; for example 0.9.")

    def months(self) -> tuple[int, int]:
        """(anchor month, months per period) for month-based kinds."""
        return {
            "month": (1, 1), "season": (12, 3), "year": (1, 12), "water-year": (self.water_year_start, 12),
        }[self.kind]


@dataclass
class TimeAxis:
    """A record's times in its own calendar: cftime dates and seconds since 1970-01-01."""

    dates: np.ndarray  # cftime.datetime objects
    seconds: np.ndarray  # float64
    calendar: str

    def date(self, y: int, m: int, d: int = 1):
        import cftime

        return cftime.datetime(y, m, d, calendar=self.calendar)

    def to_seconds(self, dates) -> np.ndarray:
        import cftime

        return np.asarray(cftime.date2num(list(dates), "seconds since 1970-01-01", calendar=self.calendar), float)

    def iso(self, seconds) -> list[str]:
        import cftime

        ds = cftime.num2date(np.asarray(seconds, float), "seconds since 1970-01-01", calendar=self.calendar)
        return [d.strftime("%Y-%m-%dT%H:%M:%S") + "Z" for d in np.atleast_1d(ds)]


def time_axis(times, calendar: str | None = None) -> TimeAxis:
    """The time axis of ``times`` (datetime64 or cftime objects) in ``calendar``.

    Datetime64 times that were converted from a model calendar (noleap) are read back into it
    when ``calendar`` names it; cftime objects keep their own calendar.
    """
    import cftime

    t = np.asarray(times)
    if t.size == 0:
        raise RequestError("The budget has no time steps to sum over periods; widen --start/--end.")
    if t.dtype.kind == "M":
        cal = (calendar or "standard").lower()
        idx = pd.DatetimeIndex(t)
        cal = "proleptic_gregorian" if cal in _STANDARD else cal
        try:
            dates = np.array([
                cftime.datetime(y, m, d, hh, mm, ss, calendar=cal)
                for y, m, d, hh, mm, ss in zip(idx.year, idx.month, idx.day, idx.hour, idx.minute, idx.second)
            ])
        except ValueError as exc:
            raise RequestError(f"The budget's times do not exist in the {cal!r} calendar ({exc}); give the record's own calendar.") from None
    else:
        first = t.flat[0]
        if not isinstance(first, cftime.datetime):
            raise RequestError(f"The budget's time coordinate holds {type(first).__name__} values, not dates; pass a budget from compute().")
        cal = calendar or first.calendar or "standard"
        cal = "proleptic_gregorian" if cal in _STANDARD else cal
        dates = t
    axis = TimeAxis(dates, np.empty(0), cal)
    axis.seconds = axis.to_seconds(dates)
    if np.any(np.diff(axis.seconds) <= 0):
        raise RequestError("The budget's times are not strictly increasing; sort the record and drop repeated steps.")
    return axis


def step_intervals(seconds: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """(start, end, nominal step) of each step's interval, in seconds (INTEGRATION_RULE)."""
    s = np.asarray(seconds, float)
    if s.size < 2:
        raise RequestError("Summing over periods needs at least two time steps (one step has no length); widen --start/--end.")
    gaps = np.diff(s)
    nominal = float(np.median(gaps))
    length = np.where(gaps > 1.5 * nominal, nominal, gaps)
    return s, s + np.append(length, nominal), nominal


def _month_index(y, m) -> int:
    return int(y) * 12 + int(m) - 1


def period_bounds(axis: TimeAxis, rule: PeriodRule, last_end: float) -> tuple[np.ndarray, list[str]]:
    """Period boundaries (seconds, n + 1 of them) covering the record, and a label per period."""
    first = axis.dates[0]
    if rule.kind == "record":
        return np.array([axis.seconds[0], last_end]), ["record"]
    if rule.kind == "day":
        d0 = axis.to_seconds([axis.date(first.year, first.month, first.day)])[0]
        n = int(np.ceil((last_end - d0) / SECONDS_PER_DAY))
        edges = d0 + SECONDS_PER_DAY * np.arange(n + 1)
        labels = [s[:10] for s in axis.iso(edges[:-1])]
        return edges, labels
    anchor, step = rule.months()
    k = (_month_index(first.year, first.month) - (anchor - 1)) // step
    starts, edges = [], []
    while not edges or edges[-1] < last_end:  # up to the period holding the last interval's end
        i = k * step + anchor - 1
        starts.append(axis.date(i // 12, i % 12 + 1))
        edges.append(axis.to_seconds(starts[-1:])[0])
        k += 1
    edges = np.asarray(edges)
    labels = []
    for d in starts[:-1]:
        end_y = (_month_index(d.year, d.month) + step - 1) // 12  # year of the period's last month
        if rule.kind == "month":
            labels.append(f"{d.year:04d}-{d.month:02d}")
        elif rule.kind == "season":
            labels.append(f"{end_y:04d}-{SEASON_NAMES[d.month]}")
        elif rule.kind == "year":
            labels.append(f"{d.year:04d}")
        else:
            labels.append(f"WY{end_y:04d}")
    return edges, labels


def _integrals(a, b, values, edges):
    """∫ over each [edges[k], edges[k+1]) of the step function (values on [a, b)) and the
    covered time; steps holding NaN cover no time."""
    values = np.asarray(values, float)
    ok = np.isfinite(values)
    b = np.where(ok, b, a)
    values = np.where(ok, values, 0.0)
    knots = np.empty(2 * a.size)
    knots[0::2], knots[1::2] = a, b
    area = np.zeros(2 * a.size)
    area[1::2] = np.cumsum(values * (b - a))
    area[2::2] = area[1:-1:2]
    cov = np.zeros(2 * a.size)
    cov[1::2] = np.cumsum(b - a)
    cov[2::2] = cov[1:-1:2]
    e = np.clip(edges, knots[0], knots[-1])
    return np.diff(np.interp(e, knots, area)), np.diff(np.interp(e, knots, cov))


@dataclass
class PeriodGrid:
    """A record's steps as intervals and the periods covering it (INTEGRATION_RULE)."""

    rule: PeriodRule
    axis: TimeAxis
    a: np.ndarray  # interval starts, s
    b: np.ndarray  # interval ends, s
    nominal: float  # median step, s
    edges: np.ndarray  # period bounds, s (one more than periods)
    labels: list

    def integrate(self, values) -> tuple[np.ndarray, np.ndarray]:
        """(integral over each period, covered seconds of each period) of a per-step series."""
        return _integrals(self.a, self.b, values, self.edges)

    def head(self) -> dict:
        """The leading columns of a period table: period, start, end, steps."""
        steps = np.diff(np.searchsorted(self.a, self.edges, side="left"))
        return {"period": self.labels, "start": self.axis.iso(self.edges[:-1]), "end": self.axis.iso(self.edges[1:]), "steps": steps}

    @property
    def lengths(self) -> np.ndarray:
        return np.diff(self.edges)


def period_grid(times, rule: PeriodRule, calendar: str | None = None) -> PeriodGrid:
    """The periods of ``rule`` over a record with these ``times`` (datetime64 or cftime)."""
    axis = time_axis(times, calendar)
    a, b, nominal = step_intervals(axis.seconds)
    edges, labels = period_bounds(axis, rule, b[-1])
    return PeriodGrid(rule, axis, a, b, nominal, edges, labels)


def region_views(ds: xr.Dataset):
    """(name, area m², one-region Dataset) for each region of ``ds``."""
    if "region" in ds.dims:
        areas = ds["region_area_m2"].values if "region_area_m2" in ds.coords else np.full(ds.sizes["region"], float(ds.attrs["region_area_m2"]))
        for k in range(ds.sizes["region"]):
            yield str(ds["region"].values[k]), float(areas[k]), ds.isel(region=k)
    else:
        yield str(ds.attrs.get("region_name", "region")), float(ds.attrs["region_area_m2"]), ds


def calendar_of(ds: xr.Dataset, calendar):
    return calendar or ds["time"].attrs.get("calendar") or ds["time"].encoding.get("calendar") or ds.attrs.get("calendar")


def aggregate(ds: xr.Dataset, kind: str = "month", water_year_start: int = 10, min_coverage: float = 0.9,
              calendar: str | None = None) -> pd.DataFrame:
    """One row per region and period: start, end, steps, coverage, totals and means.

    Columns: ``region``, ``period``, ``start``/``end`` (ISO 8601 UTC, end exclusive), ``steps``
    (steps starting in the period), ``coverage`` (0..1), ``complete``; for each rate term
    ``<term>_total_mm``, ``_total_m3``, ``_total_km3``, ``_mean_mm_day``, ``_mean_m3_s``; and
    ``precipitable_water_mean_mm``. The rule and calendar are in ``DataFrame.attrs``.
    """
    rule = PeriodRule(kind, water_year_start, min_coverage)
    grid = period_grid(ds["time"].values, rule, calendar_of(ds, calendar))
    frames = []
    for name, area, one in region_views(ds):
        cols = {"region": name, **grid.head()}
        covered = None
        values = {}
        for var in RATE_TERMS + STATE_TERMS:
            if var not in one:
                continue
            total, cov = grid.integrate(one[var].values)
            covered = cov if covered is None else covered  # the first term (P - E) sets the coverage
            values[var] = total  # kg m-2 (rates) or kg m-2 s (states)
        if covered is None:
            raise RequestError("The budget holds none of the terms summed over periods (p_minus_e, precipitable_water ...); pass a budget from compute().")
        coverage = covered / grid.lengths
        complete = coverage >= rule.min_coverage - 1e-12
        cols["coverage"] = coverage
        cols["complete"] = complete
        with np.errstate(invalid="ignore", divide="ignore"):
            for var, total in values.items():
                total = np.where(complete, total, np.nan)
                mean = total / covered
                if var in STATE_TERMS:  # time mean of kg m-2, as mm
                    cols[f"{var}_mean_mm"] = terms.to_display(var, mean, "mm")
                    continue
                for suffix, stat, unit in PERIOD_STATS:
                    cols[f"{var}_{suffix}"] = _period_value(var, stat, unit, total, mean, area)
        frames.append(pd.DataFrame(cols))
    out = pd.concat(frames, ignore_index=True)
    out.attrs.update({
        "integration_rule": INTEGRATION_RULE, "calendar": grid.axis.calendar, "period": rule.kind,
        "water_year_start_month": rule.water_year_start, "min_coverage": rule.min_coverage,
        "nominal_step_s": grid.nominal,
    })
    return out


def _period_value(var, stat, unit, total, mean, area):
    """A rate term's period total (kg m-2) or mean (kg m-2 s-1) in a display unit."""
    if stat == "mean":
        return terms.to_display(var, mean, unit, area)
    water = total * area / WATER_DENSITY  # m3 of liquid water
    return {"mm": kg_m2_to_mm(total), "m3": water, "km3": water / 1e9}[unit]


def _year_of(period: str, kind: str) -> int:
    return int(period[2:6]) if kind == "water-year" else int(period[:4])


def climatology(ds: xr.Dataset, years: tuple[int, int] | None = None, water_year_start: int = 10,
                min_coverage: float = 0.9, calendar: str | None = None) -> pd.DataFrame:
    """The mean annual cycle by month and the water-year statistics, per region.

    Rows: ``month`` 1..12 (calendar months) and one ``water-year`` row (``month`` empty); for each
    rate term the interannual mean and standard deviation (ddof = 1) of the period mean
    (mm/day) and total (mm), and ``years``, the number of complete periods used. ``years`` =
    (first, last) keeps calendar years (for months) and water years named first..last.
    """
    monthly = aggregate(ds, "month", water_year_start, min_coverage, calendar)
    yearly = aggregate(ds, "water-year", water_year_start, min_coverage, calendar)
    stems = [s for s in RATE_TERMS if f"{s}_mean_mm_day" in monthly]
    rows = []
    for name in monthly["region"].unique():
        for table, kind in ((monthly, "month"), (yearly, "water-year")):
            t = table[(table["region"] == name) & table["complete"]].copy()
            t["year"] = [_year_of(p, kind) for p in t["period"]]
            if years is not None:
                t = t[(t["year"] >= years[0]) & (t["year"] <= years[1])]
            month_of = t["period"].str[5:7].astype(int)
            groups = [(m, t[month_of == m]) for m in range(1, 13)] if kind == "month" else [(None, t)]
            for month, g in groups:
                row = {"region": name, "period": kind, "month": month, "years": len(g),
                       "first_year": g["year"].min() if len(g) else np.nan, "last_year": g["year"].max() if len(g) else np.nan}
                for s in stems:
                    for col, unit in ((f"{s}_mean_mm_day", "mm_day"), (f"{s}_total_mm", "mm")):
                        row[f"{s}_mean_{unit}"] = g[col].mean()
                        row[f"{s}_std_{unit}"] = g[col].std(ddof=1)
                rows.append(row)
    out = pd.DataFrame(rows)
    out.attrs.update(monthly.attrs)
    out.attrs["period"] = "climatology"
    return out
