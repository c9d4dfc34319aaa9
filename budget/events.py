"""An event catalogue: the runs of time steps in which a region gains water unusually fast.

An event is a run of consecutive time steps whose P − E exceeds a percentile of the region's
own record (default the 95th), runs being joined when the time between them is shorter than a
day (both options).  Time steps are taken as intervals by the integration rule of
budget.periods (a value at tᵢ stands for [tᵢ, tᵢ₊₁), the last step for one nominal step), so an event from the step at t₀ to
the step at t₁ covers [t₀, t₁ + Δt) and its total is Σ (P − E)ᵢ Δtᵢ over every step inside,
including the quieter steps of a joined gap.

Per event: start and end, duration, total and peak P − E, the mean IVT across the boundary
where the budget carries it, the edge (and the layer, with layers) that brought the most water,
and the atmospheric-river share of the inflow where the budget carries it.  Pure functions of a
budget Dataset (budget.ledger.compute); no files are read.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from .errors import RequestError
from .constants import SECONDS_PER_DAY


@dataclass(frozen=True)
class EventRule:
    """How events are picked out of a P − E record."""

    percentile: float = 95.0  # of the region's own P − E record (per time step)
    join_gap_hours: float = 24.0  # runs closer than this are one event

    def __post_init__(self):
        if not 0.0 < float(self.percentile) < 100.0:
            raise RequestError(f"The event percentile must lie between 0 and 100, not {self.percentile}; try 95.")
        if not float(self.join_gap_hours) >= 0.0:
            raise RequestError(f"The event join gap must be zero or more hours, not {self.join_gap_hours}; try 24.")


def step_seconds(times: np.ndarray) -> np.ndarray:
    """Length of each time step as an interval (s), by the one integration rule of
    budget.periods (INTEGRATION_RULE: up to the next step; a gap longer than 1.5 nominal steps
    and the last step count one nominal step). A single step covers no time (0)."""
    from .periods import step_intervals

    t = np.asarray(times, dtype="datetime64[ns]").astype("int64") / 1e9
    if t.size < 2:
        return np.zeros(t.size)
    start, end, _ = step_intervals(t)
    return end - start


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) indices of each run of True in ``mask``."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.diff(m.astype(int))
    starts = np.flatnonzero(d == 1)
    stops = np.flatnonzero(d == -1) - 1
    return list(zip(starts.tolist(), stops.tolist()))


def _joined(runs, t_end, t_start, gap_s) -> list[tuple[int, int]]:
    """Join runs whose gap (end of one to start of the next, in s) is shorter than gap_s."""
    out: list[list[int]] = []
    for a, b in runs:
        if out and t_start[a] - t_end[out[-1][1]] < gap_s:
            out[-1][1] = b
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]


def _largest(da: xr.DataArray | None, dim: str, sl: slice, dt: np.ndarray):
    """Label of ``dim`` with the largest time-integrated value over the steps ``sl``."""
    if da is None or dim not in da.dims:
        return None
    x = da.isel(time=sl).transpose("time", dim).values
    tot = np.nansum(x * dt[sl, None], axis=0)
    if not np.isfinite(tot).any():
        return None
    return str(da[dim].values[int(np.nanargmax(tot))])


def threshold(ds: xr.Dataset, rule: EventRule = EventRule()) -> float:
    """The P − E value (kg m-2 s-1) an event step must exceed: the rule's percentile of the
    finite per-step values of the record."""
    pme = ds["p_minus_e"].values.astype(float)
    finite = pme[np.isfinite(pme)]
    if finite.size == 0:
        raise RequestError("The budget has no P - E values (a tendency needs at least two time steps), so no events can be found.")
    return float(np.percentile(finite, rule.percentile))


def find_events(ds: xr.Dataset, rule: EventRule = EventRule()) -> pd.DataFrame:
    """The event catalogue of a budget: one row per event, sorted by start time.

    Columns: ``start``, ``end`` (ISO 8601 UTC; ``end`` is the end of the last step's interval),
    ``duration_h``, ``steps``, ``total_p_minus_e_mm``, ``peak_p_minus_e_mm_day``,
    ``mean_p_minus_e_mm_day``, ``mean_boundary_ivt_kg_m_s`` (NaN when the budget has no
    ``boundary_mean_ivt``), ``top_edge`` (largest time-integrated import), ``top_layer`` (with
    layers), ``ar_share`` (the fraction of the event's inflow that crossed where IVT met the
    atmospheric-river threshold; NaN without ``ar_inflow``).
    """
    if "p_minus_e" not in ds:
        raise RequestError("The budget has no p_minus_e variable; compute it with budget.compute first.")
    times = ds["time"].values
    pme = ds["p_minus_e"].values.astype(float)
    dt = step_seconds(times)
    level = threshold(ds, rule)
    t_start = np.asarray(times, dtype="datetime64[ns]").astype("int64") / 1e9
    t_end = t_start + dt
    runs = _joined(_runs(np.isfinite(pme) & (pme > level)), t_end, t_start, rule.join_gap_hours * 3600.0)
    rows = [_row(ds, a, b, pme, dt, t_start, t_end) for a, b in runs]
    cols = ["start", "end", "duration_h", "steps", "total_p_minus_e_mm", "peak_p_minus_e_mm_day",
            "mean_p_minus_e_mm_day", "mean_boundary_ivt_kg_m_s", "top_edge", "top_layer", "ar_share"]
    out = pd.DataFrame(rows, columns=cols)
    out.attrs.update(threshold_mm_day=level * SECONDS_PER_DAY, percentile=rule.percentile,
                     join_gap_hours=rule.join_gap_hours,
                     rule="steps as intervals; runs of P - E above the percentile, joined across shorter gaps")
    return out


def _iso(seconds: float) -> str:
    return np.datetime_as_string(np.datetime64(int(round(seconds)), "s"), unit="s") + "Z"


def _row(ds, a, b, pme, dt, t_start, t_end) -> dict:
    sl = slice(a, b + 1)
    w = dt[sl]
    seg = pme[sl]
    ok = np.isfinite(seg)
    span = float(np.sum(w[ok]))
    total = float(np.sum(seg[ok] * w[ok]))  # kg m-2 = mm
    ivt = np.nan
    if "boundary_mean_ivt" in ds:
        v = ds["boundary_mean_ivt"].values[sl].astype(float)
        good = np.isfinite(v)
        ivt = float(np.sum(v[good] * w[good]) / np.sum(w[good])) if good.any() and np.sum(w[good]) > 0 else np.nan
    share = np.nan
    if "ar_inflow" in ds and "inflow" in ds:
        fin = float(np.nansum(ds["inflow"].values[sl] * w))
        share = float(np.nansum(ds["ar_inflow"].values[sl] * w) / fin) if fin > 0 else np.nan
    return {
        "start": _iso(t_start[a]),
        "end": _iso(t_end[b]),
        "duration_h": (t_end[b] - t_start[a]) / 3600.0,
        "steps": b - a + 1,
        "total_p_minus_e_mm": total,
        "peak_p_minus_e_mm_day": float(np.nanmax(seg)) * SECONDS_PER_DAY,
        "mean_p_minus_e_mm_day": total / span * SECONDS_PER_DAY if span > 0 else np.nan,
        "mean_boundary_ivt_kg_m_s": ivt,
        "top_edge": _largest(ds.get("edge_import"), "edge", sl, dt),
        "top_layer": _largest(ds["layer_import"], "layer", sl, dt) if "layer_import" in ds else None,
        "ar_share": share,
    }


def _one_region(stacked: xr.Dataset, k: int) -> xr.Dataset:
    """Region ``k`` of a many-region budget (budget.multi.stack) as a single-region budget: its
    own edges by name (the NaN padding of regions with fewer edges left out)."""
    ds = stacked.isel(region=k)
    if "edge" in ds.dims and "edge_name" in ds.coords:
        names = ds["edge_name"].values
        real = np.array([isinstance(n, str) and n != "" for n in names], bool)
        ds = ds.isel(edge=np.flatnonzero(real))
        ds = ds.drop_vars("edge_name").assign_coords(edge=np.asarray(names[real], dtype=object))
    return ds


def find_events_by_region(stacked: xr.Dataset, rule: EventRule = EventRule()) -> pd.DataFrame:
    """One catalogue for a budget with a ``region`` dimension (budget.multi.compute_many): each
    region's events found in its own record (its own percentile), with a ``region`` column
    first; columns otherwise as ``find_events``. A single-region budget is catalogued as is."""
    if "region" not in stacked.dims:
        return find_events(stacked, rule)
    frames, thresholds = [], {}
    for k, rid in enumerate(stacked["region"].values):
        ds = _one_region(stacked, k)
        try:
            ev = find_events(ds, rule)
        except RequestError as exc:
            raise RequestError(f"Region {str(rid)!r}: {exc}") from None
        thresholds[str(rid)] = ev.attrs["threshold_mm_day"]
        ev.insert(0, "region", str(rid))
        frames.append(ev)
    out = pd.concat(frames, ignore_index=True)
    out.attrs.update(threshold_mm_day=thresholds, percentile=rule.percentile, join_gap_hours=rule.join_gap_hours,
                     rule="per region, from its own record: " + frames[0].attrs.get("rule", ""))
    return out
