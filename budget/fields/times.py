"""Times stage of budget.fields: decode the time axis to datetime64[ns] UTC, sort it, cut the
requested window, and chunk the result in time.

A file without a time dimension takes its time from a scalar time coordinate or a global
attribute holding an ISO 8601 date (`TIME_ATTRIBUTES`); with neither it is refused, so no
result is ever labelled with a missing date.
"""

from __future__ import annotations

import warnings as _warnings

import numpy as np
import pandas as pd
import xarray as xr

from ..errors import FieldsError, RequestError
from .hints import short
from .model import iso

#: Global attributes read, in this order, as the one time of a file without a time axis.
TIME_ATTRIBUTES = ("time", "valid_time", "validity_time", "datetime", "date",
                   "analysis_time", "forecast_valid_time", "time_coverage_start")


def decode_times(index, where: str, notes: list[str]) -> pd.DatetimeIndex:
    from xarray.coding.cftimeindex import CFTimeIndex

    if isinstance(index, CFTimeIndex):
        cal = getattr(index, "calendar", "unknown")
        try:
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                out = index.to_datetimeindex(unsafe=True, time_unit="us")
        except Exception as exc:  # noqa: BLE001
            raise FieldsError(
                f"The times in {where} use the '{cal}' calendar and cannot be converted to "
                f"standard dates ({short(exc)}); convert the file to a standard calendar "
                "first (for example with xarray's convert_calendar)."
            ) from None
        if cal not in ("standard", "gregorian", "proleptic_gregorian"):
            notes.append(
                f"times use the '{cal}' calendar and were converted to standard dates; "
                "intervals across a missing or extra day are off by that day"
            )
        return _as_ns(pd.DatetimeIndex(out), where)
    if isinstance(index, pd.DatetimeIndex):
        if index.tz is not None:
            index = index.tz_convert("UTC").tz_localize(None)
        return _as_ns(index, where)
    raise FieldsError(
        f"The time coordinate in {where} could not be read as dates; give it CF units such "
        "as 'hours since 2000-01-01 00:00' and a calendar."
    )


def _as_ns(index: pd.DatetimeIndex, where: str) -> pd.DatetimeIndex:
    try:
        return index.as_unit("ns")
    except (OverflowError, ValueError, pd.errors.OutOfBoundsDatetime):
        raise FieldsError(
            f"The times in {where} ({index[0]} to {index[-1]}) lie outside the years 1678-2261 "
            "that datetime64[ns] can hold; shift the time axis into that range."
        ) from None


def parse_time(value, what: str):
    if value is None or value == "":
        return None
    try:
        t = pd.Timestamp(value)
    except (ValueError, TypeError):
        raise RequestError(
            f"The {what} time '{value}' is not an ISO 8601 date such as 2020-01-31 or "
            "2020-01-31T18:00."
        ) from None
    if pd.isna(t):
        raise RequestError(f"The {what} time '{value}' is not a date; give ISO 8601.")
    if t.tzinfo is not None:
        t = t.tz_convert("UTC").tz_localize(None)
    return t


def single_time(raw: xr.Dataset, where: str, notes: list) -> pd.DatetimeIndex:
    """The one time of an input without a time dimension, or one sentence refusing it."""
    for name, var in raw.variables.items():
        if var.ndim == 0 and (np.issubdtype(var.dtype, np.datetime64)
                              or var.attrs.get("standard_name") == "time"):
            t = pd.Timestamp(var.values)
            if not pd.isna(t):
                return pd.DatetimeIndex([t]).as_unit("ns")
    for key in TIME_ATTRIBUTES:
        text = raw.attrs.get(key)
        if isinstance(text, str) and text.strip():
            try:
                t = parse_time(text.strip(), key)
            except RequestError:
                continue
            notes.append(f"the input has no time axis; its time {iso(t)} was read from the "
                         f"global attribute '{key}'")
            return pd.DatetimeIndex([t]).as_unit("ns")
    raise FieldsError(
        f"{where[0].upper() + where[1:]} has no time dimension, no scalar time coordinate and no "
        f"time attribute ({', '.join(TIME_ATTRIBUTES[:3])}, ...); add a time coordinate "
        "(for example with xarray's expand_dims) or a global attribute time='2021-03-01T00:00Z'."
    )


def sorted_times(raw, time_dim, where, notes):
    """(decoded times, the order that sorts them) of an input with a time dimension."""
    times = decode_times(raw.indexes[time_dim], where, notes)
    if times.has_duplicates:
        raise FieldsError(
            f"The times in {where} repeat (first repeat {times[times.duplicated()][0]}); "
            "remove overlapping files or steps."
        )
    order = None
    if not times.is_monotonic_increasing:
        order = np.argsort(times.values, kind="stable")
    return times, order


def window_index(times: pd.DatetimeIndex, start, end, where: str):
    """The time steps between start and end (inclusive) as a slice or an index array."""
    t_start = parse_time(start, "start")
    t_end = parse_time(end, "end")
    sel = np.ones(times.size, bool)
    if t_start is not None:
        sel &= times >= t_start
    if t_end is not None:
        sel &= times <= t_end
    if not sel.any():
        raise FieldsError(
            f"No time steps between {start or 'the beginning'} and {end or 'the end'} in "
            f"{where}, which covers {iso(times[0])} to {iso(times[-1])}; choose a window "
            "inside that range."
        )
    idx = np.nonzero(sel)[0]
    return slice(int(idx[0]), int(idx[-1]) + 1) if np.all(np.diff(idx) == 1) else idx
