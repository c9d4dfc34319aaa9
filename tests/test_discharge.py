"""River discharge against basin P − E (budget.discharge) on an invented basin and gauge whose
long-term ratio is known by construction."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from budget.discharge import ASSUMPTION, compare, read_gauge
from budget.errors import RequestError

AREA = 5.0e10  # m², an invented basin (50 000 km²)
RATIO = 0.8


def invented_budget():
    """Daily P − E over WY2001-WY2010 with an annual cycle (invented, not real weather)."""
    t = pd.date_range("2000-10-01", "2010-09-30", freq="D")
    pme_mm_day = 1.5 + 1.2 * np.sin(2 * np.pi * t.day_of_year / 365.25)
    ds = xr.Dataset({"p_minus_e": ("time", pme_mm_day / 86400)}, coords={"time": t},
                    attrs={"region_area_m2": AREA, "region_name": "invented basin"})
    return ds


def invented_gauge(ds):
    """Discharge = RATIO × P − E (m³/s), delayed by 45 days inside each water year (storage on
    the land), on a record that runs beyond the budget's on both sides."""
    t = ds["time"].to_index()
    pme_m3_s = ds["p_minus_e"].values * AREA / 1000.0  # kg m-2 s-1 × m² / ρw (1000 kg m-3, common practice)
    q = np.empty_like(pme_m3_s)
    wy = t.year + (t.month >= 10)
    for y in np.unique(wy):
        k = np.flatnonzero(wy == y)
        q[k] = RATIO * np.roll(pme_m3_s[k], 45)  # circular within the year: the year's volume is kept
    before = pd.date_range("1998-10-01", "2000-09-30", freq="D")
    after = pd.date_range("2010-10-01", "2011-09-30", freq="D")
    times = before.append(t).append(after)
    values = np.concatenate([np.full(before.size, 100.0), q, np.full(after.size, 100.0)])
    return pd.DataFrame({"date": times.strftime("%Y-%m-%d"), "flow_m3_s": values})


def write(df, path):
    df.to_csv(path, index=False)
    return path


def test_long_term_ratio_known_by_construction(tmp_path):
    # By construction every water year's discharge volume is RATIO × its P − E volume, while
    # month by month the two differ (the 45-day delay): the comparison holds over whole water
    # years only, the assumption Oki et al. 1995 (Hydrol. Processes 9, 655-678) rests on.
    ds = invented_budget()
    gauge = read_gauge(write(invented_gauge(ds), tmp_path / "gauge.csv"))
    table = compare(ds, gauge)
    years = table[table["period"] != "long-term"]
    assert list(years["period"]) == [f"WY{y}" for y in range(2001, 2011)]
    assert years["complete"].all()
    np.testing.assert_allclose(years["ratio"], RATIO, rtol=1e-12)
    np.testing.assert_allclose(years["difference_m3_s"], (1 - RATIO) * years["p_minus_e_m3_s"], rtol=1e-9)
    lt = table[table["period"] == "long-term"].iloc[0]
    assert lt["ratio"] == pytest.approx(RATIO, rel=1e-12)
    assert (lt["first"], lt["last"], lt["years"], lt["missing_fraction"]) == ("WY2001", "WY2010", 10, 0.0)
    # mean P − E over the decade: the mean of 1.5 + 1.2 sin(...) mm/day is close to 1.5 mm/day
    assert lt["p_minus_e_m3_s"] == pytest.approx(1.5 / 86400 * AREA / 1000, rel=2e-3)
    assert "Oki et al. 1995" in ASSUMPTION and table.attrs["assumption"] == ASSUMPTION
    # the same comparison by hand with pandas over the ten water years (reference: pandas)
    g = invented_gauge(ds).set_index(pd.to_datetime(invented_gauge(ds)["date"]))["flow_m3_s"]
    assert g["2000-10-01":"2010-09-30"].mean() / (ds["p_minus_e"].mean().item() * AREA / 1000) == pytest.approx(lt["ratio"], rel=1e-12)


def test_missing_gauge_days_are_counted_and_short_years_left_out(tmp_path):
    ds = invented_budget()
    df = invented_gauge(ds)
    d = pd.to_datetime(df["date"])
    df.loc[(d >= "2005-01-01") & (d < "2005-01-21"), "flow_m3_s"] = np.nan  # 20 days: WY2005 still ≥ 0.9
    df.loc[(d >= "2007-01-01") & (d < "2007-07-20"), "flow_m3_s"] = np.nan  # 200 days: WY2007 incomplete
    table = compare(ds, read_gauge(write(df, tmp_path / "gauge.csv")))
    rows = table.set_index("period")
    assert rows.loc["WY2005", "complete"] and rows.loc["WY2005", "gauge_coverage"] == pytest.approx(345 / 365, rel=1e-12)
    assert not rows.loc["WY2007", "complete"] and np.isnan(rows.loc["WY2007", "ratio"])
    lt = rows.loc["long-term"]
    assert lt["years"] == 9
    days = (pd.Timestamp("2010-10-01") - pd.Timestamp("2000-10-01")).days
    assert lt["missing_fraction"] == pytest.approx(220 / days, rel=1e-12)


def test_any_regular_frequency_and_a_named_column(tmp_path):
    # 6-hourly gauge values, the daily value repeated, give the same water-year means as daily ones
    ds = invented_budget()
    daily = invented_gauge(ds)
    t = pd.to_datetime(daily["date"])
    six = pd.DataFrame({"time": np.repeat(t.values, 4) + np.tile(np.arange(4) * np.timedelta64(6, "h"), t.size),
                        "stage_m": 1.0, "q": np.repeat(daily["flow_m3_s"].values, 4)})
    six["time"] = six["time"].dt.strftime("%Y-%m-%dT%H:%MZ")
    path = write(six, tmp_path / "six.csv")
    with pytest.raises(RequestError, match="--discharge-column"):
        read_gauge(path)
    a = compare(ds, read_gauge(path, "q"))
    b = compare(ds, read_gauge(write(daily, tmp_path / "daily.csv")))
    np.testing.assert_allclose(a["discharge_m3_s"], b["discharge_m3_s"], rtol=1e-12)


@pytest.mark.parametrize("rows, message", [
    ("date,q\n2001-01-01,3\n2001-13-01,4\n", "Row 3 .* '2001-13-01', which is not a date"),
    ("date,q\n2001-01-01,3\n2001-01-02,-4\n", "Row 3 .* negative discharge"),
    ("date,q\n2001-01-02,3\n2001-01-01,4\n", "Row 3 .* sort the file"),
    ("date,q\n2001-01-01,3\n2001-01-02,high\n", "Row 3 .* 'high', which is not a number"),
    ("date,flow_cfs\n2001-01-01,3\n2001-01-02,4\n", "not in m3/s"),
    ("date,q\n", "no rows"),
])
def test_bad_gauge_files_get_one_sentence(tmp_path, rows, message):
    p = tmp_path / "g.csv"
    p.write_text(rows)
    with pytest.raises(RequestError, match=message):
        read_gauge(p)


def test_no_overlap_is_refused(tmp_path):
    ds = invented_budget()
    p = write(pd.DataFrame({"date": ["1980-01-01", "1980-01-02"], "q": [1.0, 2.0]}), tmp_path / "old.csv")
    with pytest.raises(RequestError, match="does not overlap the budget"):
        compare(ds, read_gauge(p))


def test_cli_discharge_on_the_sample(tmp_path):
    # The invented demo event is 5 days long: no whole water year, so no long-term figure is
    # claimed; a negative value in the gauge file is one sentence and a non-zero exit.
    from sample_fields import ensure_sample

    paths = ensure_sample()
    gauge = write(pd.DataFrame({"date": pd.date_range("2024-10-01", "2025-09-30").strftime("%Y-%m-%d"), "q": 50.0}), tmp_path / "gauge.csv")
    out = tmp_path / "basin.csv"
    cmd = [sys.executable, "-m", "app.cli", "run", str(paths.column), "--region", str(paths.basin), "--out", str(out), "--discharge", str(gauge)]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert "no water year is complete" in r.stdout and "Oki et al. 1995" in r.stdout
    table = pd.read_csv(tmp_path / "basin.discharge.csv")
    assert list(table["period"]) == ["WY2025", "long-term"] and not table["complete"].any()
    assert out.exists()  # the per-step budget is still written
    bad = write(pd.DataFrame({"date": ["2025-01-15", "2025-01-16"], "q": [1.0, -2.0]}), tmp_path / "bad.csv")
    r = subprocess.run(cmd[:-1] + [str(bad), "--overwrite"], capture_output=True, text=True, timeout=300)
    assert r.returncode != 0 and "negative discharge" in r.stderr and "Traceback" not in r.stderr
