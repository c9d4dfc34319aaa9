"""Period sums and climatology (budget.periods) against pandas resample, analytic records and
the CF calendar definitions."""

import cftime
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from budget.errors import RequestError
from budget.periods import INTEGRATION_RULE, aggregate, climatology

AREA = 2.5e11  # m², an invented basin


def budget_like(times, pme, pw=None, name="invented basin"):
    """A budget Dataset as compute() returns it, holding only what periods read."""
    data = {"p_minus_e": ("time", np.asarray(pme, float))}
    if pw is not None:
        data["precipitable_water"] = ("time", np.asarray(pw, float))
    return xr.Dataset(data, coords={"time": times}, attrs={"region_area_m2": AREA, "region_name": name})


@pytest.fixture(scope="module")
def six_hourly():
    t = pd.date_range("2019-10-01", "2022-12-31 18:00", freq="6h")
    rng = np.random.default_rng(7)
    pme = (2 + np.sin(2 * np.pi * t.day_of_year / 365.25) + rng.normal(0, 0.5, t.size)) / 86400  # kg m-2 s-1
    pw = 20 + 5 * rng.random(t.size)
    return budget_like(t, pme, pw)


@pytest.mark.parametrize("kind, pandas_rule", [("month", "MS"), ("season", "QS-DEC"), ("water-year", "YS-OCT"), ("year", "YS"), ("day", "D")])
def test_totals_and_coverage_match_pandas_resample(six_hourly, kind, pandas_rule):
    # Reference: pandas resample of the same per-step series with the same rule (a regular
    # 6-hourly step holds its value for 6 h, so the period total is the sum of value × 6 h).
    df = aggregate(six_hourly, kind, min_coverage=0.0)
    s = pd.Series(six_hourly["p_minus_e"].values * 6 * 3600, index=six_hourly["time"].values)
    ref_total = s.resample(pandas_rule).sum()
    ref_steps = s.resample(pandas_rule).count()
    starts = pd.to_datetime(df["start"].str.rstrip("Z"))
    assert list(starts) == list(ref_total.index)
    np.testing.assert_allclose(df["p_minus_e_total_mm"], ref_total.values, rtol=1e-11)
    np.testing.assert_array_equal(df["steps"], ref_steps.values)
    length = (pd.to_datetime(df["end"].str.rstrip("Z")) - starts).dt.total_seconds()
    np.testing.assert_allclose(df["coverage"], ref_steps.values * 6 * 3600 / length, rtol=1e-12)
    pw = pd.Series(six_hourly["precipitable_water"].values, index=six_hourly["time"].values).resample(pandas_rule).mean()
    np.testing.assert_allclose(df["precipitable_water_mean_mm"], pw.values, rtol=1e-11)


def test_water_year_start_month_and_usgs_name(six_hourly):
    # USGS practice: water year 2021 runs 1 October 2020 to 30 September 2021 (CHECKS.md).
    df = aggregate(six_hourly, "water-year")
    row = df[df["period"] == "WY2021"].iloc[0]
    assert (row["start"], row["end"]) == ("2020-10-01T00:00:00Z", "2021-10-01T00:00:00Z")
    df4 = aggregate(six_hourly, "water-year", water_year_start=4)
    assert df4["start"].iloc[1] == "2020-04-01T00:00:00Z" and df4["period"].iloc[1] == "WY2021"
    s = pd.Series(six_hourly["p_minus_e"].values * 21600, index=six_hourly["time"].values)
    np.testing.assert_allclose(df4["p_minus_e_total_mm"].iloc[1], s["2020-04-01":"2021-03-31"].sum(), rtol=1e-11)


def test_mean_times_length_is_the_total(six_hourly):
    # The one integration rule: mean × covered time = total (identity, to round-off).
    for kind in ("record", "day", "month", "season", "water-year"):
        df = aggregate(six_hourly, kind)
        ok = df[df["complete"]]
        days = ok["coverage"] * (pd.to_datetime(ok["end"].str.rstrip("Z")) - pd.to_datetime(ok["start"].str.rstrip("Z"))).dt.total_seconds() / 86400
        np.testing.assert_allclose(ok["p_minus_e_mean_mm_day"] * days, ok["p_minus_e_total_mm"], rtol=1e-12)
        np.testing.assert_allclose(ok["p_minus_e_mean_m3_s"] * days * 86400, ok["p_minus_e_total_m3"], rtol=1e-12)
        np.testing.assert_allclose(ok["p_minus_e_total_km3"] * 1e9, ok["p_minus_e_total_m3"], rtol=1e-12)
        # 1 mm over the basin is AREA / 1000 m³ of liquid water (ρw = 1000 kg m-3, common practice)
        np.testing.assert_allclose(ok["p_minus_e_total_m3"], ok["p_minus_e_total_mm"] * AREA / 1000, rtol=1e-12)
    assert "intervals" in INTEGRATION_RULE and aggregate(six_hourly).attrs["integration_rule"] == INTEGRATION_RULE


def test_five_day_event_mean_and_total_agree():
    # 5 days of 6-hourly steps at 15.36 mm/day give 76.8 mm, and the mean reads 15.36 mm/day back.
    t = pd.date_range("2021-07-10", periods=20, freq="6h")
    df = aggregate(budget_like(t, np.full(20, 15.36 / 86400)), "record")
    assert df["coverage"].iloc[0] == 1.0 and df["end"].iloc[0] == "2021-07-15T00:00:00Z"
    assert df["p_minus_e_total_mm"].iloc[0] == pytest.approx(76.8, rel=1e-12)
    assert df["p_minus_e_mean_mm_day"].iloc[0] == pytest.approx(15.36, rel=1e-12)


def test_gaps_lower_coverage_and_flag_the_period(six_hourly):
    # A 12-day hole in March 2021: 19 of 31 days covered, below 0.9: flagged and not averaged.
    t = six_hourly["time"].to_index()
    keep = ~((t >= "2021-03-10") & (t < "2021-03-22"))
    ds = six_hourly.isel(time=np.flatnonzero(keep))
    df = aggregate(ds, "month").set_index("period")
    assert df.loc["2021-03", "coverage"] == pytest.approx(19 / 31, rel=1e-12)
    assert not df.loc["2021-03", "complete"] and np.isnan(df.loc["2021-03", "p_minus_e_total_mm"])
    assert df.loc["2021-04", "complete"] and df.loc["2021-04", "coverage"] == 1.0
    # with the threshold lowered, the covered part is summed like pandas sums the present steps
    low = aggregate(ds, "month", min_coverage=0.5).set_index("period")
    ref = pd.Series(ds["p_minus_e"].values * 21600, index=ds["time"].values)["2021-03"].sum()
    assert low.loc["2021-03", "p_minus_e_total_mm"] == pytest.approx(ref, rel=1e-11)
    # the record's partial first and last months are flagged too
    t2 = pd.date_range("2021-01-15", "2021-03-10", freq="6h")
    part = aggregate(budget_like(t2, np.ones(t2.size) / 86400), "month")
    assert list(part["complete"]) == [False, True, False]
    assert part["coverage"].iloc[0] == pytest.approx(17 / 31, rel=1e-12)


def test_climatology_of_a_known_annual_cycle():
    # Analytic: monthly P − E = base[m] + d[y], d = (-δ, 0, +δ) over 3 years, so the mean annual
    # cycle is base[m] exactly, the interannual standard deviation (ddof = 1) is δ, 3 years each.
    base = 3.0 + 2.0 * np.cos(2 * np.pi * np.arange(12) / 12)  # mm/day
    delta = 0.4
    t = pd.date_range("2001-01-01", "2003-12-31", freq="D")
    d = {2001: -delta, 2002: 0.0, 2003: delta}
    pme = np.array([base[m - 1] + d[y] for y, m in zip(t.year, t.month)]) / 86400
    clim = climatology(budget_like(t, pme), water_year_start=1)
    months = clim[clim["period"] == "month"].set_index("month")
    np.testing.assert_allclose(months["p_minus_e_mean_mm_day"].values, base, rtol=1e-12)
    np.testing.assert_allclose(months["p_minus_e_std_mm_day"].values, delta, rtol=1e-9)
    assert (months["years"] == 3).all()
    days_in = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
    np.testing.assert_allclose(months["p_minus_e_mean_mm"], base * days_in, rtol=1e-12)
    wy = clim[clim["period"] == "water-year"].iloc[0]
    totals = [float(np.sum((base + d[y]) * days_in)) for y in (2001, 2002, 2003)]  # no leap year
    assert wy["years"] == 3
    assert wy["p_minus_e_mean_mm"] == pytest.approx(np.mean(totals), rel=1e-12)
    assert wy["p_minus_e_std_mm"] == pytest.approx(np.std(totals, ddof=1), rel=1e-9)
    # a year window keeps only those years
    two = climatology(budget_like(t, pme), years=(2002, 2003), water_year_start=1)
    jan = two[(two["period"] == "month") & (two["month"] == 1)].iloc[0]
    assert jan["years"] == 2 and jan["p_minus_e_mean_mm_day"] == pytest.approx(base[0] + delta / 2, rel=1e-12)


def test_360_day_calendar_months_have_30_days():
    # CF conventions 4.4.1: in the 360_day calendar every month has 30 days.
    t = xr.date_range("2001-01-01", periods=360 * 2 * 4, freq="6h", calendar="360_day", use_cftime=True)
    ds = budget_like(np.asarray(t), np.full(t.size, 1.0 / 86400))
    df = aggregate(ds, "month")
    assert len(df) == 24 and df["complete"].all()
    np.testing.assert_allclose(df["p_minus_e_total_mm"], 30.0, rtol=1e-12)
    feb = df[df["period"] == "2001-02"].iloc[0]
    assert feb["end"] == "2001-03-01T00:00:00Z" and feb["steps"] == 120
    yr = aggregate(ds, "year")
    np.testing.assert_allclose(yr["p_minus_e_total_mm"], 360.0, rtol=1e-12)
    assert aggregate(ds).attrs["calendar"] == "360_day"


def test_noleap_calendar_has_no_february_29():
    # CF conventions 4.4.1: noleap (365_day) years have 365 days, February 28.
    t = xr.date_range("2020-01-01", periods=365 * 4, freq="6h", calendar="noleap", use_cftime=True)
    ds = budget_like(np.asarray(t), np.full(t.size, 1.0 / 86400))
    df = aggregate(ds, "month").set_index("period")
    assert df.loc["2020-02", "p_minus_e_total_mm"] == pytest.approx(28.0, rel=1e-12) and df.loc["2020-02", "complete"]
    assert aggregate(ds, "year")["p_minus_e_total_mm"].iloc[0] == pytest.approx(365.0, rel=1e-12)
    # the same record converted to datetime64 (as the field reader does) and read back in noleap
    as_dt = budget_like(pd.DatetimeIndex([np.datetime64(d.isoformat()) for d in t]), np.full(t.size, 1.0 / 86400))
    back = aggregate(as_dt, "month", calendar="noleap")
    np.testing.assert_allclose(back["p_minus_e_total_mm"].values, df["p_minus_e_total_mm"].values, rtol=1e-12)
    # read as a standard calendar it has a 1-day hole on 29 February 2020: 28 of 29 days covered
    std = aggregate(as_dt, "month").set_index("period")
    assert std.loc["2020-02", "coverage"] == pytest.approx(28 / 29, rel=1e-12)


def test_regions_dimension_gives_one_block_of_rows_per_region(six_hourly):
    two = xr.concat([six_hourly, six_hourly * 2], dim="region")
    two = two.assign_coords(region=["upper", "lower"], region_area_m2=("region", [AREA, AREA / 4]))
    df = aggregate(two, "month")
    one = aggregate(six_hourly, "month")
    assert list(df["region"].unique()) == ["upper", "lower"]
    up, lo = df[df["region"] == "upper"], df[df["region"] == "lower"]
    np.testing.assert_allclose(up["p_minus_e_total_mm"], one["p_minus_e_total_mm"], rtol=1e-12)
    np.testing.assert_allclose(lo["p_minus_e_total_mm"], 2 * one["p_minus_e_total_mm"], rtol=1e-12)
    np.testing.assert_allclose(lo["p_minus_e_total_m3"], one["p_minus_e_total_m3"] / 2, rtol=1e-12)


def test_bad_requests_get_one_sentence():
    t = pd.date_range("2021-01-01", periods=8, freq="6h")
    ds = budget_like(t, np.ones(8))
    with pytest.raises(RequestError, match="Unknown period 'week'"):
        aggregate(ds, "week")
    with pytest.raises(RequestError, match="month 1..12"):
        aggregate(ds, "water-year", water_year_start=13)
    with pytest.raises(RequestError, match="at least two time steps"):
        aggregate(ds.isel(time=[0]), "month")
    with pytest.raises(RequestError, match="not strictly increasing"):
        aggregate(ds.isel(time=[0, 2, 1]), "month")
    with pytest.raises(RequestError, match="do not exist in the '360_day'|do not exist"):
        aggregate(budget_like(pd.date_range("2021-01-29", periods=8, freq="D"), np.ones(8)), "month", calendar="360_day")


def test_cli_aggregate_and_climatology_on_the_sample(tmp_path):
    # End to end: the table the CLI writes is aggregate() of the API's budget (the invented
    # demo event, 6-hourly, 15-20 January 2025).
    import subprocess
    import sys

    import budget
    from sample_fields import ensure_sample

    paths = ensure_sample()
    out = tmp_path / "daily.csv"
    cmd = [sys.executable, "-m", "app.cli", "run", str(paths.column), "--region", str(paths.basin), "--out", str(out),
           "--aggregate", "day", "--climatology", "--quiet"]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    df = pd.read_csv(out)
    ds = budget.compute(budget.open_fields(paths.column), budget.load_region(path=paths.basin))
    ref = aggregate(ds, "day")
    assert list(df.columns[:7]) == ["region", "period", "start", "end", "steps", "coverage", "complete"]
    np.testing.assert_allclose(df["p_minus_e_total_mm"], ref["p_minus_e_total_mm"], rtol=1e-5)
    clim = pd.read_csv(tmp_path / "daily.climatology.csv")
    assert len(clim) == 13 and (clim["years"] == 0).all()  # 5 days hold no complete month or water year
    # the no-overwrite rule and the table format are checked before computing
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert r.returncode != 0 and "exists already" in r.stderr and "Traceback" not in r.stderr
    bad = subprocess.run(cmd[:8] + [str(tmp_path / "x.nc"), "--aggregate", "month"], capture_output=True, text=True, timeout=300)
    assert bad.returncode != 0 and "end --out in .csv" in bad.stderr
    bad = subprocess.run(cmd[:8] + [str(tmp_path / "y.csv"), "--climatology", "2020"], capture_output=True, text=True, timeout=300)
    assert bad.returncode != 0 and "two years START,END" in bad.stderr
