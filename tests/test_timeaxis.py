"""The time axis: windows and the tendency rule (budget.timeaxis).

Reference: the tendency rule is centred differences inside and one-sided at the ends (common
practice, no source); for a quadratic series the centred difference is exact at interior
points (Taylor expansion, any numerical-analysis text), and numpy.gradient is the reference
implementation for uneven steps.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from budget.errors import RequestError
from budget.timeaxis import has_tendency, tendency, time_window, window_offset

T0 = np.datetime64("2031-06-01T00:00", "ns")


def test_centred_inside_one_sided_at_the_ends():
    times = T0 + np.arange(5) * np.timedelta64(6, "h")
    t = np.arange(5) * 6 * 3600.0
    values = 3.0 + 2e-5 * t**2  # quadratic: centred differences are exact inside
    got = tendency(values, times)
    np.testing.assert_allclose(got[1:-1], 4e-5 * t[1:-1], rtol=1e-12)
    # one-sided at the ends: the first difference of the first/last interval
    assert got[0] == pytest.approx((values[1] - values[0]) / 21600.0, rel=1e-12)
    assert got[-1] == pytest.approx((values[-1] - values[-2]) / 21600.0, rel=1e-12)


def test_uneven_steps_follow_numpy_gradient_and_columns_work():
    times = T0 + np.array([0, 1, 3, 7], dtype="timedelta64[h]")
    values = np.array([[1.0, 2.0], [2.0, 2.5], [4.0, 1.0], [3.0, 0.0]])
    ref = np.gradient(values, np.array([0, 1, 3, 7]) * 3600.0, axis=0)  # reference: numpy
    np.testing.assert_allclose(tendency(values, times), ref, rtol=1e-14)


def test_a_single_step_has_no_tendency():
    assert np.isnan(tendency(np.array([5.0]), np.array([T0]))).all()
    assert not has_tendency(np.array([T0])) and has_tendency(np.array([T0, T0 + 1]))


def test_window_and_offset():
    times = T0 + np.arange(10) * np.timedelta64(1, "h")
    ds = xr.Dataset({"x": ("time", np.arange(10.0))}, coords={"time": times})
    sub = time_window(ds, "2031-06-01T03:00", "2031-06-01T05:00")
    assert sub["x"].values.tolist() == [3.0, 4.0, 5.0]  # both ends inclusive
    assert window_offset(times, sub["time"].values) == 3
    assert time_window(ds, None, None) is ds


def test_empty_or_malformed_windows_are_one_sentence():
    times = T0 + np.arange(3) * np.timedelta64(1, "h")
    ds = xr.Dataset({"x": ("time", np.zeros(3))}, coords={"time": times})
    with pytest.raises(RequestError, match="No time steps between 2032-01-01.*2031-06-01T00:00 to 2031-06-01T02:00 UTC"):
        time_window(ds, "2032-01-01", None)
    with pytest.raises(RequestError, match="not a valid ISO 8601"):
        time_window(ds, "first of June", None)
