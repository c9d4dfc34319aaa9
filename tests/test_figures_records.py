"""The long-record card's builders (app/figures_records.py): periods, climatology, river,
overlay and the flagged-value counts, checked against pandas (resample / groupby of the same
per-step series), plain unit arithmetic and series whose answer is known by construction.

The records are invented: a smooth annual cycle of P − E with a different level each year,
sampled every 6 hours (not weather).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app import figures_records as fr

AREA = 2.0e11  # m², an invented basin


def invented_budget(start="2021-01-01", end="2023-12-31T18:00", name="Invented basin",
                    area=AREA, drop=None):
    """A budget Dataset of the engine's shape: P − E (kg m-2 s-1) with an annual cycle and a
    level that rises by 0.4 mm/day a year, precipitable water (kg m-2)."""
    times = pd.date_range(start, end, freq="6h")
    if drop is not None:
        times = times[(times < drop[0]) | (times >= drop[1])]
    day = times.day_of_year.to_numpy() + times.hour.to_numpy() / 24
    mm_day = 2.0 + 1.5 * np.sin(2 * np.pi * day / 365.0) + 0.4 * (times.year - 2021)
    ds = xr.Dataset(
        {"p_minus_e": ("time", mm_day / 86400.0, {"units": "kg m-2 s-1"}),
         "precipitable_water": ("time", np.full(times.size, 20.0), {"units": "kg m-2"})},
        coords={"time": times.values},
    )
    ds.attrs.update(region_area_m2=area, region_name=name, flagged_values="{}")
    return ds


def mm_day_series(ds) -> pd.Series:
    return pd.Series(ds["p_minus_e"].values * 86400.0, index=pd.DatetimeIndex(ds["time"].values))


def test_monthly_rows_match_pandas_resample_and_mean_times_length_is_total():
    ds = invented_budget()
    head, rows = fr.period_rows(fr.period_table(ds, "month"))
    # reference: pandas resample of the per-step series; with regular 6-hourly steps that
    # each hold for 6 hours, the interval rule's monthly mean is the plain mean of the steps
    ref = mm_day_series(ds).resample("MS").mean()
    assert len(rows) == 36 and not any(r["flagged"] for r in rows)
    means = np.array([r["values"]["mean_mm_day"] for r in rows])
    np.testing.assert_allclose(means, ref.values, rtol=1e-12)
    totals = np.array([r["values"]["total_mm"] for r in rows])
    np.testing.assert_allclose(totals, ref.values * ref.index.days_in_month, rtol=1e-12)
    # km³ = mm / 1000 × area / 1e9 and m³/s = mm/day / 1000 × area / 86400 (by hand)
    assert "P − E total (km³)" in head and "P − E mean (m³/s)" in head
    np.testing.assert_allclose([r["values"]["total_km3"] for r in rows],
                               totals / 1000 * AREA / 1e9, rtol=1e-12)
    np.testing.assert_allclose([r["values"]["mean_m3_s"] for r in rows],
                               means / 1000 * AREA / 86400, rtol=1e-12)
    assert rows[0]["cells"][:4] == ["2021-01", "2021-01-01 00:00", "2021-02-01 00:00", "124"]


def test_seasons_and_water_years_match_pandas_and_partial_ones_are_flagged():
    ds = invented_budget()
    series = mm_day_series(ds)
    seasons = fr.period_table(ds, "season")
    ref = series.resample("QS-DEC").mean()  # pandas: quarters starting in December (DJF ...)
    done = seasons[seasons["complete"]]
    np.testing.assert_allclose(done["p_minus_e_mean_mm_day"].to_numpy(),
                               ref[seasons["complete"].to_numpy()].to_numpy(), rtol=1e-12)
    # DJF 2021 holds January and February only (59 of 90 days): flagged, not averaged
    _, rows = fr.period_rows(seasons)
    assert rows[0]["cells"][0] == "2021-DJF" and rows[0]["flagged"]
    assert np.isnan(rows[0]["values"]["mean_mm_day"]) and "low coverage" in rows[0]["cells"][4]
    assert rows[0]["values"]["coverage"] == pytest.approx(59 / 90, rel=1e-12)

    years = fr.period_table(ds, "water-year", water_year_start=10)
    ref = series.resample("YS-OCT").mean()  # pandas: years starting 1 October
    assert years["period"].tolist() == ["WY2021", "WY2022", "WY2023", "WY2024"]
    assert years["complete"].tolist() == [False, True, True, False]
    np.testing.assert_allclose(years["p_minus_e_mean_mm_day"].to_numpy()[1:3],
                               ref.to_numpy()[1:3], rtol=1e-12)
    fig = fr.period_figure(ds, years, "p_minus_e", "Invented basin", "water-year")
    bars = fig.data[0]
    np.testing.assert_allclose(np.asarray(bars.y, float)[1:3], ref.to_numpy()[1:3], rtol=1e-12)
    assert np.isnan(np.asarray(bars.y, float)[[0, 3]]).all()  # flagged years: no bar
    marks = fig.data[1]
    assert list(marks.x) == ["WY2021", "WY2024"] and "low coverage" in marks.name
    assert fig.layout.yaxis.title.text == "P − E (mm/day)"
    assert "Invented basin" in fig.layout.title.text


def test_a_gap_flags_its_month_with_the_coverage_pandas_counts():
    ds = invented_budget(drop=(pd.Timestamp("2022-03-05"), pd.Timestamp("2022-03-15")))
    frame = fr.period_table(ds, "month")
    row = frame[frame["period"] == "2022-03"].iloc[0]
    steps = mm_day_series(ds)["2022-03"].size  # pandas: steps left in March 2022
    assert row["steps"] == steps
    assert row["coverage"] == pytest.approx(steps * 0.25 / 31, rel=1e-12)
    assert not row["complete"] and np.isnan(row["p_minus_e_mean_mm_day"])


def test_event_row_mean_times_length_equals_total():
    ds = invented_budget("2025-01-15", "2025-01-20")
    frame = fr.period_table(ds, "event")
    _, rows = fr.period_rows(frame)
    v = rows[0]["values"]
    days = (21 * 6) / 24  # 21 steps of 6 hours, the last holding one step (INTEGRATION_RULE)
    assert v["total_mm"] == pytest.approx(v["mean_mm_day"] * days, rel=1e-12)
    # reference: the plain mean of equally long steps (pandas)
    assert v["mean_mm_day"] == pytest.approx(mm_day_series(ds).mean(), rel=1e-12)
    fig = fr.period_figure(ds, frame, "p_minus_e", "Invented basin", "event")
    np.testing.assert_allclose(fig.data[0].y, ds["p_minus_e"].values * 86400, rtol=1e-12)
    assert fig.data[1].y[0] == pytest.approx(v["mean_mm_day"], rel=1e-12)


def test_climatology_bars_are_pandas_monthly_means_with_the_interannual_spread():
    from budget.periods import climatology

    ds = invented_budget()
    fig = fr.climatology_figure(climatology(ds), "p_minus_e", "Invented basin")
    monthly = mm_day_series(ds).resample("MS").mean()
    by_month = monthly.groupby(monthly.index.month)
    # reference: pandas groupby of the monthly means; std with pandas' default ddof=1
    bars = fig.data[0]
    np.testing.assert_allclose(bars.y, by_month.mean().values, rtol=1e-12)
    np.testing.assert_allclose(bars.error_y.array, by_month.std().values, rtol=1e-9)
    # built in: each year sits 0.4 mm/day above the last, so the spread is 0.4 mm/day
    np.testing.assert_allclose(by_month.std().values, 0.4, rtol=1e-9)
    assert list(bars.x) == [f"{m}<br>3 yr" for m in fr.MONTH_NAMES]  # years per bar
    assert fig.layout.yaxis.title.text == "P − E (mm/day)"
    # the note lives in the title block, in the top margin above the plot area (container
    # coordinates), never as an annotation over the bars
    assert "3 years" in fig.layout.title.text and fig.layout.title.yref == "container"
    assert not fig.layout.annotations
    assert fig.layout.margin.t >= 100


def test_a_short_record_says_a_climatology_needs_several_years():
    from budget.periods import climatology

    one_year = climatology(invented_budget("2022-01-01", "2022-12-31T18:00"))
    note = fr.climatology_note(one_year, "p_minus_e")
    assert note.startswith("Only 1 year") and "several years" in note
    five_days = climatology(invented_budget("2025-01-15", "2025-01-20"))
    fig = fr.climatology_figure(five_days, "p_minus_e", "Invented basin")
    assert not [t for t in fig.data if t.type == "bar"]  # nothing posing as a mean cycle
    assert "several years" in fig.layout.annotations[0].text


def test_discharge_ratio_known_by_construction():
    from budget.discharge import Gauge, compare

    ds = invented_budget()
    # the invented gauge carries 60 % of P − E (m³/s, by hand: mm/day / 1000 × area / 86400)
    pme_m3_s = mm_day_series(ds) / 1000 * AREA / 86400
    daily = pme_m3_s.resample("D").mean()
    gauge = Gauge(daily.index.values.astype("datetime64[ns]"), 0.6 * daily.values,
                  "invented.csv", "flow")
    table = compare(ds, gauge)
    long_term = table[table["period"] == "long-term"].iloc[0]
    assert long_term["years"] == 2 and long_term["ratio"] == pytest.approx(0.6, rel=1e-9)
    text = fr.discharge_summary(table)
    assert "WY2022–WY2023" in text and "ratio discharge / (P − E) 0.6" in text
    fig = fr.discharge_figure(ds, gauge, table, "Invented basin")
    traces = {t.name: t for t in fig.data}
    np.testing.assert_allclose(traces["P − E over the region"].y, pme_m3_s.values, rtol=1e-12)
    np.testing.assert_allclose(traces["discharge (flow)"].y, 0.6 * daily.values, rtol=1e-12)
    assert fig.layout.yaxis.title.text == "P − E and discharge (m³/s)"
    head, rows = fr.discharge_rows(table)
    assert head[1] == "P − E (m³/s)" and rows[-1][0] == "long-term (2 years)"
    assert rows[-1][4] == "0.6"


def test_overlay_draws_each_region_under_its_own_name():
    a = invented_budget("2025-01-15", "2025-01-20", name="North basin")
    b = invented_budget("2025-01-15", "2025-01-20", name="South basin", area=5e10)
    b["p_minus_e"] = b["p_minus_e"] * 3.0
    fig = fr.overlay_figure([("North basin", a), ("South <b>basin</b>", b)], units="m3/s",
                            pending=["East"])
    assert [t.name for t in fig.data] == ["North basin", "South <b>basin</b>"]
    # m³/s = kg m-2 s-1 × area / 1000 kg m-3, each with its own area
    np.testing.assert_allclose(fig.data[0].y, a["p_minus_e"].values * AREA / 1000, rtol=1e-12)
    np.testing.assert_allclose(fig.data[1].y, b["p_minus_e"].values * 5e10 / 1000, rtol=1e-12)
    assert fig.data[0].line.color != fig.data[1].line.color
    assert "&lt;b&gt;" in fig.data[1].hovertemplate  # user text is not markup
    assert "still computing, not drawn yet: East" in fig.layout.title.text
    assert fig.layout.yaxis.title.text == "P − E (m³/s)"
    empty = fr.overlay_figure([], pending=["East"])
    assert not empty.data and "East" in empty.layout.annotations[0].text


def test_flagged_counts_come_from_the_engine(write_nc):
    """Five small negative humidities planted in invented level fields are counted by the
    engine's plausibility check (budget.plausible) and reach the table's counts."""
    from budget import compute, testing
    from budget.fields import open_fields
    from budget.region import region_from_bbox

    odd = testing.level_dataset(nt=12)
    odd["q"][4, 0, 10, 5:10] = -5e-5  # inside the region, at one step of the top level
    ds = compute(open_fields(write_nc(odd, "odd.nc")), region_from_bbox(5.0, 35.0, 15.0, 45.0),
                 scheduler="sync")
    assert fr.flagged_counts(ds) == [("q", 5)]
    assert fr.flagged_text(ds).endswith("(whole record): q: 5")
    assert fr.flagged_counts(xr.Dataset(attrs={"flagged_values": json.dumps({})})) == []


def test_gauge_uploads_name_the_file_offer_columns_and_obey_the_cap(tmp_path):
    import base64

    from app import server
    from app.callbacks_records import UploadedText, decode_gauge
    from budget.discharge import discharge_columns, read_gauge
    from budget.errors import RequestError

    text = "time,upper,lower\n2025-01-15,1.5,20\n2025-01-16,-2,21\n"  # invented gauges
    assert discharge_columns(UploadedText(text, "two.csv")) == ["upper", "lower"]
    assert discharge_columns(UploadedText("date,flow\n2025-01-15,3\n", "one.csv")) == ["flow"]
    with pytest.raises(RequestError, match=r"^Row 3 of the gauge file 'two.csv' has negative"):
        read_gauge(UploadedText(text, "two.csv"), column="upper")
    assert read_gauge(UploadedText(text, "two.csv"), column="lower").discharge.tolist() == [20, 21]

    server.create_app(cache_dir=tmp_path / "cache")  # the server's settings hold the cap
    big = "data:text/csv;base64," + base64.b64encode(b"x" * (server.UPLOAD_LIMIT_BYTES + 1)).decode()
    with pytest.raises(RequestError, match="more than the 10 MB allowed for an upload"):
        decode_gauge(big, "huge.csv")
    with pytest.raises(RequestError, match="arrived damaged"):
        decode_gauge("data:text/csv;base64,@@@", "broken.csv")
    ok = "data:text/csv;base64," + base64.b64encode(text.encode("utf-8-sig")).decode()
    assert decode_gauge(ok, "two.csv") == text
