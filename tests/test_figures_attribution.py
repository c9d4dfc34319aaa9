"""Figures of budget.attribution / eddies / events / compare (app.figures_attribution):
the plotted numbers are the data's own period means (checked against xarray's mean), the
eddy bars add up to the split's parts, the spread band spans min to max."""

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app.figures_attribution import datasets_figure, eddy_figure, event_rows, layer_edge_figure


def _budget():
    t = np.datetime64("2030-01-01") + np.arange(4) * np.timedelta64(6, "h")
    le = np.arange(4 * 3 * 2, dtype=float).reshape(4, 3, 2)
    return xr.Dataset({"layer_edge_import": (("time", "layer", "edge"), le)},
                      coords={"time": t, "layer": ["sfc_1000hPa", "1000_850hPa", "850hPa_top"], "edge": ["S", "E"]})


def test_layer_bars_are_the_period_means():
    ds = _budget()
    fig = layer_edge_figure(ds, 1, 3)
    assert [b.name for b in fig.data] == ["sfc_1000hPa", "1000_850hPa", "850hPa_top"]
    expect = ds["layer_edge_import"].isel(time=slice(1, 3)).mean("time")
    np.testing.assert_allclose(fig.data[1].y, expect.sel(layer="1000_850hPa").values)
    assert "kg/s" in fig.layout.yaxis.title.text


def test_eddy_bars_and_note():
    split = xr.Dataset(
        {"edge_import": (("part", "edge"), [[3.0, 1.0], [2.0, 0.5], [1.0, 0.5]]),
         "vapour_import": (("part",), [4.0, 2.5, 1.5])},
        coords={"part": ["total", "mean_flow", "transient_eddy"], "edge": ["W", "E"]})
    fig = eddy_figure(split)
    mean, eddy = fig.data
    assert list(mean.x) == ["W", "E", "total"]
    np.testing.assert_allclose(np.asarray(mean.y) + np.asarray(eddy.y), [3.0, 1.0, 4.0])
    assert "Seager and Henderson" in fig.layout.annotations[0].text


def test_event_rows_and_dataset_band():
    ev = pd.DataFrame([{"start": "2030-01-01T00:00:00Z", "end": "2030-01-02T00:00:00Z", "duration_h": 24.0,
                        "total_p_minus_e_mm": 12.345, "peak_p_minus_e_mm_day": 20.0, "mean_boundary_ivt_kg_m_s": np.nan,
                        "top_edge": "W", "top_layer": None, "ar_share": 0.4567}])
    rows = event_rows(ev)
    assert rows[0]["ar_share_percent"] == pytest.approx(45.7) and rows[0]["mean_boundary_ivt_kg_m_s"] is None
    t = np.datetime64("2030-01-01") + np.arange(3) * np.timedelta64(6, "h")
    st = xr.Dataset({"p_minus_e": (("dataset", "time"), [[1.0, 2.0, 3.0], [2.0, 1.0, 5.0]])},
                    coords={"dataset": ["a", "b"], "time": t}) / 86400.0
    fig = datasets_figure(st)
    band = fig.data[0]
    np.testing.assert_allclose(band.y[:3], [2.0, 2.0, 5.0])
    np.testing.assert_allclose(band.y[3:], [3.0, 1.0, 1.0])  # the minimum, time reversed


# ---------------------------------------------------------------------------------------------
# the selected period (app.figures_attribution helpers) and the panel options
# (app.callbacks_attribution), on series whose answers are set by construction
# ---------------------------------------------------------------------------------------------
def _series(n=4, **vars_):
    t = np.datetime64("2030-01-01") + np.arange(n) * np.timedelta64(6, "h")
    ds = xr.Dataset({k: (dims, np.asarray(v, float)) for k, (dims, v) in vars_.items()},
                    coords={"time": t})
    ds.attrs["region_area_m2"] = 1.0e11
    return ds


def test_period_weights_are_step_intervals_inside_the_period():
    from app.figures_attribution import period_weights

    ds = _series(4)
    # steps as intervals (budget.events): 6 h each, the last as long as the one before
    np.testing.assert_array_equal(period_weights(ds, 1, 2), [0, 21600, 21600, 0])


def test_ar_share_by_construction_and_edges_add_up():
    from app.figures_attribution import ar_share_summary

    # inflow 100 kg/s throughout; AR inflow 30 kg/s through edge "W" in steps 0-1 and 10 kg/s
    # through "E" in step 1: over steps 0..3 the share is (30+30+10)/400 = 17.5 % (definition:
    # Σ AR inflow Δt / Σ inflow Δt, Rutz, Steenburgh and Ralph 2014 threshold applied upstream)
    ar_edge = [[30, 0], [30, 10], [0, 0], [0, 0]]
    ds = _series(4, inflow=(("time",), [100] * 4), ar_inflow=(("time",), [30, 40, 0, 0]),
                 ar_edge_inflow=(("time", "edge"), ar_edge))
    ds = ds.assign_coords(edge=["W", "E"])
    ds["ar_inflow"].attrs["ar_ivt_threshold"] = "250 kg m-1 s-1"
    out = ar_share_summary(ds, 0, 3)
    assert out["share_percent"] == pytest.approx(17.5)
    assert [e["share_percent"] for e in out["edges"]] == pytest.approx([15.0, 2.5])
    assert sum(e["share_percent"] for e in out["edges"]) == pytest.approx(out["share_percent"])
    assert out["mean_inflow_kg_s"] == pytest.approx(100.0)
    # only steps 2..3: no AR inflow
    assert ar_share_summary(ds, 2, 3)["share_percent"] == pytest.approx(0.0)


def test_recycling_summary_by_construction_and_without_evaporation():
    from app.figures_attribution import recycling_summary

    # E = 1e-5 kg m-2 s-1, A = 1e11 m², F_in = 1e6 kg/s: E·A = 1e6 kg/s, so
    # ρ = E·A / (E·A + 2 F_in) = 1/3 (Brubaker, Entekhabi and Eagleson 1993, J. Climate 6)
    ds = _series(4, evaporation=(("time",), [1e-5] * 4), inflow=(("time",), [1e6] * 4))
    out = recycling_summary(ds, 0, 3)
    assert out["ratio"] == pytest.approx(1 / 3)
    assert "0.333" in out["text"] and "well-mixed column" in out["assumptions"]
    missing = recycling_summary(_series(4, inflow=(("time",), [1e6] * 4)), 0, 3)
    assert missing["ratio"] is None and "needs evaporation" in missing["text"]


def test_event_table_rows_carry_the_event_steps():
    from budget.events import find_events

    from app.figures_attribution import event_table

    # a planted event: steps 5 and 6 of 40 well above the rest; the 95th percentile (linear
    # interpolation, numpy's default) lies at 0.05 × 2e-4, below both planted steps
    pme = np.zeros(40)
    pme[5:7] = [2e-4, 2e-4]
    ds = _series(40, p_minus_e=(("time",), pme))
    rows = event_table(ds, find_events(ds))
    assert [(r["first"], r["last"]) for r in rows] == [(5, 6)]
    assert rows[0]["id"] == 1 and rows[0]["start"] == "2030-01-02T06:00:00Z"


def test_panel_options_are_checked_and_become_engine_options():
    from budget.errors import RequestError

    from app.callbacks_attribution import budget_options, read_options

    rec = read_options(" 300,500,700,850,1000 ", 250)
    assert rec == {"layers": "1000,850,700,500,300", "ar": 250.0}
    opts = budget_options("boundary", "default", rec, "levels")
    assert opts.attribution.layers.bounds == (1000, 850, 700, 500, 300)
    assert opts.attribution.ar_threshold == 250.0 and opts.closure.mass_correction == "auto"
    # column totals have no layers: the budget still runs, without them
    assert budget_options("area", "off", rec, "column").attribution.layers is None
    assert read_options("", 300) == {"layers": "", "ar": 300.0}
    for bad_layers, bad_ar in (("1000,abc", 250), ("850", 250), ("", -5), ("", None)):
        with pytest.raises(RequestError):
            read_options(bad_layers, bad_ar)
