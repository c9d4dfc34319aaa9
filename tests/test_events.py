"""The event catalogue (budget.events) on synthetic P - E records with planted events.

The expected events are planted by construction: known start, length, amplitude and gaps,
so every value asserted below follows from the construction, not from the code under test.
"""

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from budget.errors import RequestError
from budget.events import EventRule, find_events, step_seconds

DAY = 86400.0


def _budget(pme_mm_day, step_h=6, extra=None, edges=None):
    n = len(pme_mm_day)
    t = np.datetime64("2030-01-01T00:00") + np.arange(n) * np.timedelta64(step_h, "h")
    ds = xr.Dataset(
        {"p_minus_e": ("time", np.asarray(pme_mm_day, float) / DAY)},
        coords={"time": t},
        attrs={"region_area_m2": 1.0e11},
    )
    for k, v in (extra or {}).items():
        ds[k] = ("time", np.asarray(v, float))
    if edges is not None:
        ds["edge_import"] = (("time", "edge"), np.asarray(edges, float))
        ds = ds.assign_coords(edge=[f"E{i}" for i in range(ds.sizes["edge"])])
    return ds


def test_step_lengths_are_intervals():
    # the rule of budget.periods: up to the next step, the last one nominal (median) step
    t = np.array(["2030-01-01T00", "2030-01-01T06", "2030-01-01T18"], dtype="datetime64[ns]")
    assert step_seconds(t).tolist() == [6 * 3600.0, 12 * 3600.0, 9 * 3600.0]


def test_planted_events_found_with_totals_and_peaks():
    # 200 quiet steps at 1 mm/day; two planted bursts well above the 95th percentile
    pme = np.ones(200)
    pme[40:44] = [20, 30, 25, 20]  # 4 steps of 6 h = 1 day
    pme[120:122] = [15, 18]  # 2 steps = 12 h
    ev = find_events(_budget(pme))
    assert len(ev) == 2
    first = ev.iloc[0]
    assert first["start"] == "2030-01-11T00:00:00Z"  # step 40 x 6 h = 10 days
    assert first["end"] == "2030-01-12T00:00:00Z"  # end of step 43's interval
    assert first["duration_h"] == pytest.approx(24.0)
    # total = sum(mm/day x 0.25 day) by construction
    assert first["total_p_minus_e_mm"] == pytest.approx((20 + 30 + 25 + 20) * 0.25)
    assert first["peak_p_minus_e_mm_day"] == pytest.approx(30.0)
    assert first["mean_p_minus_e_mm_day"] == pytest.approx((20 + 30 + 25 + 20) / 4)
    assert ev.iloc[1]["total_p_minus_e_mm"] == pytest.approx((15 + 18) * 0.25)


def test_runs_closer_than_the_gap_are_joined_and_the_gap_counts():
    pme = np.ones(200)
    pme[50:52] = 40  # run A: steps 50-51
    pme[54:56] = 40  # run B: 12 h after A ends (steps 52, 53 quiet)
    pme[100:102] = 40  # run C: far away
    ev = find_events(_budget(pme), EventRule(percentile=95, join_gap_hours=24))
    assert len(ev) == 2
    a = ev.iloc[0]
    assert a["steps"] == 6  # 50..55, the quiet steps 52-53 inside the event
    assert a["total_p_minus_e_mm"] == pytest.approx((4 * 40 + 2 * 1) * 0.25)
    # with no joining the three runs stay apart
    assert len(find_events(_budget(pme), EventRule(percentile=95, join_gap_hours=6))) == 3


def test_top_edge_ivt_and_ar_share():
    n = 120
    pme = np.ones(n)
    pme[60:64] = 30
    edges = np.zeros((n, 3))
    edges[:, 0] = 1e6
    edges[60:64, 2] = 5e7  # the third edge brings the event's water
    inflow = np.full(n, 1e8)
    ar = np.zeros(n)
    ar[60:64] = 2.5e7  # a quarter of the inflow crosses where IVT >= threshold
    ivt = np.full(n, 100.0)
    ivt[60:64] = [300, 500, 500, 300]
    ds = _budget(pme, extra={"inflow": inflow, "ar_inflow": ar, "boundary_mean_ivt": ivt}, edges=edges)
    ev = find_events(ds)
    assert len(ev) == 1
    row = ev.iloc[0]
    assert row["top_edge"] == "E2"
    assert row["ar_share"] == pytest.approx(0.25)
    assert row["mean_boundary_ivt_kg_m_s"] == pytest.approx(400.0)


def test_threshold_is_the_records_percentile():
    # numpy's default percentile (linear interpolation, Hyndman and Fan 1996 type 7) is the
    # reference; a record 0..99 mm/day has its 95th percentile at 94.05
    pme = np.arange(100.0)
    ev = find_events(_budget(pme))
    assert ev.attrs["threshold_mm_day"] == pytest.approx(np.percentile(np.arange(100.0), 95))
    assert ev.iloc[0]["steps"] == 5  # 95..99 exceed 94.05


def test_bad_rules_and_empty_records_say_so():
    with pytest.raises(RequestError, match="percentile"):
        EventRule(percentile=120)
    ds = _budget([np.nan, np.nan])
    with pytest.raises(RequestError, match="two time steps"):
        find_events(ds)


def test_many_regions_one_catalogue_each_from_its_own_record():
    # Two regions stacked as budget.multi.stack does (a region dimension, edges padded with NaN
    # for the region with fewer edges). Planted by construction: region "wet" has one burst of
    # 4 steps at 40 mm/day on a 2 mm/day record; region "dry" one of 2 steps at 5 mm/day on a
    # 0.1 mm/day record — below wet's threshold, so only its own percentile finds it. Dry's
    # three edges all export except the second during its burst; the padded fourth edge (NaN)
    # must not win with a sum of 0.
    from budget.events import find_events_by_region

    n = 120
    wet, dry = np.full(n, 2.0), np.full(n, 0.1)
    wet[30:34] = 40.0
    dry[80:82] = 5.0
    edges_wet = np.zeros((n, 4))
    edges_wet[30:34, 3] = 1e7
    edges_dry = np.full((n, 4), np.nan)
    edges_dry[:, :3] = -1e6
    edges_dry[80:82, 1] = -1e5
    a = _budget(wet, edges=edges_wet).assign_coords(edge=np.arange(4))
    b = _budget(dry, edges=edges_dry).assign_coords(edge=np.arange(4))
    names = [["N", "E", "S", "W"], ["e0", "e1", "e2", None]]
    stacked = xr.concat([x.expand_dims(region=[r]) for x, r in zip((a, b), ("wet", "dry"))], dim="region")
    stacked = stacked.assign_coords(edge_name=(("region", "edge"), np.array(names, dtype=object)))
    ev = find_events_by_region(stacked)
    assert list(ev.columns[:3]) == ["region", "start", "end"]
    assert ev["region"].tolist() == ["wet", "dry"]
    w, d = ev.iloc[0], ev.iloc[1]
    assert w["steps"] == 4 and w["total_p_minus_e_mm"] == pytest.approx(4 * 40 * 0.25) and w["top_edge"] == "W"
    assert d["steps"] == 2 and d["total_p_minus_e_mm"] == pytest.approx(2 * 5 * 0.25) and d["top_edge"] == "e1"
    assert d["start"] == "2030-01-21T00:00:00Z"  # step 80 x 6 h = 20 days
    # each region's threshold is the 95th percentile of its own record (numpy, type 7)
    assert ev.attrs["threshold_mm_day"]["dry"] == pytest.approx(np.percentile(dry, 95))
    # a budget without a region dimension is catalogued as find_events does
    pd.testing.assert_frame_equal(find_events_by_region(_budget(wet)), find_events(_budget(wet)))
