"""The time axis of a budget: time windows and the tendency rule.

One home for both, so that the ledger (vapour), the closure (dry air, total water) and the
eddy split use the same rule and none of them imports another for it.

Tendency of a sampled series: centred differences inside, one-sided at the two ends (common
practice, no source; numpy.gradient with the sample times as coordinates, which also handles
uneven steps).  A single time step has no tendency: it is NaN, and so is everything derived
from it (P − E).
"""

from __future__ import annotations

import numpy as np

from .errors import RequestError

#: Said to the user when a record has one time step only (issue: a silent empty P − E).
SINGLE_STEP_NOTE = (
    "Only one time step: a tendency needs at least two, so dW/dt and P - E are empty; "
    "widen the time window or give more steps to get them."
)


def iso_minutes(t) -> str:
    """A time as ISO 8601 to the minute (UTC is implied by the engine's convention)."""
    return np.datetime_as_string(np.datetime64(t, "ns"), unit="m")


def time_window(ds, start=None, end=None):
    """``ds`` restricted to start..end (ISO 8601 strings or datetimes, both inclusive).

    A malformed bound or an empty window is a RequestError naming the record's own span.
    """
    if start is None and end is None:
        return ds
    try:
        sel = ds.sel(time=slice(start, end))
    except (TypeError, ValueError, KeyError) as exc:
        raise RequestError(
            f"The time window {start!r}..{end!r} is not a valid ISO 8601 range ({exc}); "
            "write e.g. 2021-07-01 or 2021-07-01T06:00."
        ) from None
    if sel.sizes["time"] == 0:
        t = ds["time"].values
        raise RequestError(
            f"No time steps between {start or 'the start'} and {end or 'the end'}; the fields run from "
            f"{iso_minutes(t[0])} to {iso_minutes(t[-1])} UTC."
        )
    return sel


def window_offset(all_times, window_times) -> int:
    """Index in ``all_times`` of the window's first step (0 for an empty window)."""
    window_times = np.asarray(window_times)
    if window_times.size == 0:
        return 0
    return int(np.searchsorted(np.asarray(all_times), window_times[0]))


def seconds_since_start(times) -> np.ndarray:
    """Seconds from the first time stamp, float."""
    times = np.asarray(times)
    return ((times - times[0]) / np.timedelta64(1, "s")).astype(float)


def tendency(values, times) -> np.ndarray:
    """d(values)/dt per second along the first axis: centred inside, one-sided at the ends.

    Common practice, no source.  With fewer than two steps the result is all NaN.
    """
    values = np.asarray(values, float)
    if values.shape[0] < 2:
        return np.full(values.shape, np.nan)
    return np.gradient(values, seconds_since_start(times), axis=0)


def has_tendency(times) -> bool:
    """True when the record has the two steps a tendency needs."""
    return np.asarray(times).size >= 2
