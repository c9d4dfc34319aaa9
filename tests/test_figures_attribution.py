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
