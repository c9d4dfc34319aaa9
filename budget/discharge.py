"""The river's discharge set against the atmosphere's long-term P − E over the basin.

Over a basin, P − E equals runoff plus the change of water stored on and under the land. The
storage change averages out only over whole water years, so the comparison is made on whole
water years that both records cover: per water year (both series and their difference) and
as a long-term mean with the ratio. Oki et al. (1995, Hydrological Processes 9, 655–678) found
that the long-term atmospheric vapour convergence of large basins agrees with their river
runoff within the analyses' errors, which is why the comparison is meaningful; for small
basins, short records or managed rivers (reservoirs, diversions, irrigation) it may not be.

Gauge series and budget are summed by the same rule (budget.periods.INTEGRATION_RULE).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from .errors import RequestError
from .periods import PeriodRule, calendar_of, period_grid, region_views
from . import terms

#: The budget's P − E column in m³/s (the term catalogue's CSV column, written there once).
PME_M3_S = next(c.name for c in terms.term("p_minus_e").columns if c.unit == "m3/s")

ASSUMPTION = (
    "storage change on and under the land is taken to average out over whole water years; "
    "long-term basin P - E and river discharge agree within the analyses' errors for large "
    "basins (Oki et al. 1995, Hydrological Processes 9, 655-678)"
)

_TIME_NAMES = ("time", "date", "datetime", "timestamp", "day")


@dataclass
class Gauge:
    """A river gauge record: times (datetime64, UTC) and discharge (m³ s-1, NaN where missing)."""

    times: np.ndarray
    discharge: np.ndarray
    source: str
    column: str


def _time_column(df: pd.DataFrame, where: str) -> str:
    for c in df.columns:
        if str(c).strip().lower() in _TIME_NAMES:
            return c
    if len(df.columns):
        return df.columns[0]
    raise RequestError(f"The gauge file {where} has no columns; give a CSV with a time column and a discharge column in m3/s.")


def _discharge_column(df: pd.DataFrame, tcol: str, column: str | None, where: str) -> str:
    others = [c for c in df.columns if c != tcol]
    if column is not None:
        if column not in df.columns:
            raise RequestError(f"The gauge file {where} has no column {column!r}; its columns are {', '.join(map(str, df.columns))}.")
        return column
    if len(others) == 1:
        return others[0]
    if not others:
        raise RequestError(f"The gauge file {where} has only a time column; add the discharge in m3/s.")
    raise RequestError(f"The gauge file {where} has several columns ({', '.join(map(str, others))}); say which holds discharge with --discharge-column.")


def discharge_columns(path) -> list[str]:
    """The columns of a gauge CSV that may hold discharge (all but its time column), for a
    column picker; reads the header only."""
    where = repr(str(path))
    try:
        df = pd.read_csv(path, dtype=str, nrows=0, comment="#")
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise RequestError(f"The gauge file {where} could not be read as CSV ({str(exc).splitlines()[0]}); give a CSV with a time column and a discharge column in m3/s.") from None
    tcol = _time_column(df, where)
    return [str(c) for c in df.columns if c != tcol]


def read_gauge(path, column: str | None = None) -> Gauge:
    """Read a gauge CSV: a time column (ISO 8601; named time/date or the first) and discharge in m³/s.

    Empty cells are missing values. Bad dates, repeated or unordered dates, non-numbers and
    negative discharge are refused with one sentence naming the row.
    """
    where = repr(str(path))
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False, comment="#")
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise RequestError(f"The gauge file {where} could not be read as CSV ({str(exc).splitlines()[0]}); give a CSV with a time column and a discharge column in m3/s.") from None
    tcol = _time_column(df, where)
    qcol = _discharge_column(df, tcol, column, where)
    if any(u in str(qcol).lower() for u in ("cfs", "ft3", "ft^3", "l/s", "l_s")):
        raise RequestError(f"The gauge column {qcol!r} in {where} looks like it is not in m3/s; convert it to m3/s first.")
    if df.empty:
        raise RequestError(f"The gauge file {where} has no rows; give at least two dated discharge values.")
    raw_t = df[tcol].str.strip()
    times = pd.to_datetime(raw_t, errors="coerce", utc=True, format="mixed")
    bad = np.flatnonzero(times.isna().to_numpy())
    if bad.size:
        k = int(bad[0])
        raise RequestError(f"Row {k + 2} of the gauge file {where} has the date {raw_t.iloc[k]!r}, which is not a date; write ISO 8601 such as 2021-10-01 or 2021-10-01T06:00.")
    t = times.dt.tz_localize(None).to_numpy().astype("datetime64[ns]")
    step = np.diff(t)
    if np.any(step <= np.timedelta64(0)):
        k = int(np.flatnonzero(step <= np.timedelta64(0))[0]) + 1
        raise RequestError(f"Row {k + 2} of the gauge file {where} ({raw_t.iloc[k]}) repeats or goes back before the row above it; sort the file by time and drop repeated dates.")
    raw_q = df[qcol].str.strip()
    q = pd.to_numeric(raw_q.replace({"": np.nan, "NA": np.nan, "NaN": np.nan, "nan": np.nan}), errors="coerce").to_numpy(float)
    nonnum = np.flatnonzero(np.isnan(q) & ~raw_q.isin(["", "NA", "NaN", "nan"]).to_numpy())
    if nonnum.size:
        k = int(nonnum[0])
        raise RequestError(f"Row {k + 2} of the gauge file {where} has the discharge {raw_q.iloc[k]!r}, which is not a number; leave a missing value empty.")
    neg = np.flatnonzero(q < 0)
    if neg.size:
        k = int(neg[0])
        raise RequestError(f"Row {k + 2} of the gauge file {where} has negative discharge ({q[k]:g} m3/s); a river's discharge is zero or more, so fix or blank that value.")
    if np.isfinite(q).sum() < 2:
        raise RequestError(f"The gauge file {where} holds fewer than two discharge values; give a longer record.")
    return Gauge(t, q, str(path), str(qcol))


def _water_years(times, values, rule: PeriodRule, calendar=None) -> pd.DataFrame:
    """Per water year: start, end, coverage and mean of a per-step series (same rule as periods)."""
    grid = period_grid(times, rule, calendar)
    total, covered = grid.integrate(values)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / covered
    df = pd.DataFrame({**grid.head(), "coverage": covered / grid.lengths, "mean": mean, "total": total, "covered_s": covered,
                       "length_s": grid.lengths})
    df["complete"] = df["coverage"] >= rule.min_coverage - 1e-12
    return df


def compare(ds: xr.Dataset, gauge: Gauge, water_year_start: int = 10, min_coverage: float = 0.9,
            calendar: str | None = None) -> pd.DataFrame:
    """P − E (m³/s) of the basin against river discharge, per water year and over the record.

    One row per water year of the common period (``period`` WYnnnn) with ``p_minus_e_m3_s``,
    ``discharge_m3_s``, their ``difference_m3_s`` (P − E minus discharge) and ``ratio``
    (discharge / P − E), both coverages and ``complete``; then one ``long-term`` row: the means
    over the water years complete in both records, the ratio, ``first``/``last`` water year,
    ``years`` and the gauge's ``missing_fraction`` (time without gauge data over the water years both records reach).
    """
    rule = PeriodRule("water-year", water_year_start, min_coverage)
    q = _water_years(gauge.times, gauge.discharge, rule)
    t = ds["time"].values
    g0, g1 = gauge.times[0], gauge.times[-1]
    rows = []
    for name, area, one in region_views(ds):
        b = _water_years(t, terms.to_display("p_minus_e", one["p_minus_e"].values, "m3/s", area), rule, calendar_of(ds, calendar))
        both = b.merge(q, on="period", suffixes=("_budget", "_gauge"))
        both = both[(both["covered_s_budget"] > 0) & (both["covered_s_gauge"] > 0)]
        if both.empty:
            t0 = np.datetime_as_string(np.asarray(t[0], "datetime64[s]"), unit="D") if np.asarray(t).dtype.kind == "M" else str(t[0])[:10]
            t1 = np.datetime_as_string(np.asarray(t[-1], "datetime64[s]"), unit="D") if np.asarray(t).dtype.kind == "M" else str(t[-1])[:10]
            raise RequestError(
                f"The gauge record ({np.datetime_as_string(g0, unit='D')} to {np.datetime_as_string(g1, unit='D')}) does not overlap "
                f"the budget ({t0} to {t1}); give a gauge file for the same years or widen --start/--end."
            )
        ok = both["complete_budget"] & both["complete_gauge"]
        for _, r in both.iterrows():
            done = bool(r["complete_budget"] and r["complete_gauge"])
            pme, dis = (r["mean_budget"], r["mean_gauge"]) if done else (np.nan, np.nan)
            rows.append({"region": name, "period": r["period"], "start": r["start_budget"], "end": r["end_budget"],
                         "budget_coverage": r["coverage_budget"], "gauge_coverage": r["coverage_gauge"], "complete": done,
                         PME_M3_S: pme, "discharge_m3_s": dis, "difference_m3_s": pme - dis,
                         "ratio": dis / pme if done and pme != 0 else np.nan})
        rows.append(_long_term(name, both, ok))
    out = pd.DataFrame(rows)
    out.attrs.update({"assumption": ASSUMPTION, "water_year_start_month": water_year_start, "gauge": gauge.source, "gauge_column": gauge.column})
    return out


def _long_term(name: str, both: pd.DataFrame, ok: pd.Series) -> dict:
    """The long-term row: means over the water years complete in both records."""
    use = both[ok]
    gauge_missing = 1.0 - both["covered_s_gauge"].sum() / both["length_s_gauge"].sum()  # over the common water years
    row = {"region": name, "period": "long-term", "start": use["start_budget"].min() if len(use) else "",
           "end": use["end_budget"].max() if len(use) else "", "complete": bool(len(use)), "years": int(len(use)),
           "first": use["period"].min() if len(use) else "", "last": use["period"].max() if len(use) else "",
           "missing_fraction": float(np.clip(gauge_missing, 0.0, 1.0))}
    if len(use):
        pme = use["total_budget"].sum() / use["covered_s_budget"].sum()
        dis = use["total_gauge"].sum() / use["covered_s_gauge"].sum()
        row.update({PME_M3_S: pme, "discharge_m3_s": dis, "difference_m3_s": pme - dis, "ratio": dis / pme if pme != 0 else np.nan})
    return row


def summary_text(table: pd.DataFrame) -> str:
    """A few lines for the terminal: the long-term comparison of each region and its assumption."""
    lines = []
    for _, r in table[table["period"] == "long-term"].iterrows():
        if not r["complete"]:
            lines.append(f"{r['region']}: no water year is complete in both the budget and the gauge record; no long-term comparison.")
            continue
        lines.append(
            f"{r['region']}: {r['first']}..{r['last']} ({r['years']} water years): mean P - E {r[PME_M3_S]:.4g} m3/s, "
            f"mean discharge {r['discharge_m3_s']:.4g} m3/s, ratio {r['ratio']:.3f}, gauge missing {100 * r['missing_fraction']:.1f} %"
        )
    lines.append(f"assumption: {ASSUMPTION}")
    return "\n".join(lines)
