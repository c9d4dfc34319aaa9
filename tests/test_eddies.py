"""Mean-flow / transient-eddy split against an analytic oscillating flow.

Reference: the exact identity mean(qV) = q̄V̄ + mean(q′V′) (CHECKS.md), with q′ = a sin ωt and
u′ = b sin ωt sampled evenly over whole periods, so that mean(q′u′) = a b / 2 exactly
(the discrete mean of sin² over N ≥ 3 even samples of a period is 1/2).
"""

import numpy as np
import pytest
import xarray as xr

from budget.constants import EARTH_RADIUS, STANDARD_GRAVITY
from budget.eddies import decompose
from budget.errors import RequestError
from budget.fields import open_fields
from budget.region import region_from_bbox

LEV = np.array([300.0, 500.0, 700.0, 850.0, 1000.0]) * 100  # Pa
PS = 101000.0  # constant: layer thickness fixed, so the split is exact


def _fields(nt=8):
    lat = np.arange(30.0, 60.1, 1.0)
    lon = np.arange(-20.0, 30.1, 1.0)
    t = np.arange(nt)
    phase = np.sin(2 * np.pi * t / nt)  # one whole period
    LON = lon[None, None, None, :]
    q0, a = 0.006, 0.003 * (1 + LON / 40.0)  # eddy amplitude grows eastward
    u0, b = 8.0, 5.0
    shape = (nt, LEV.size, lat.size, lon.size)
    q = np.broadcast_to(q0 + a * phase[:, None, None, None], shape)
    u = np.broadcast_to(u0 + b * phase[:, None, None, None], shape)
    v = np.zeros(shape)
    ds = xr.Dataset(
        {
            "u": (("time", "plev", "lat", "lon"), u.copy(), {"units": "m s-1", "standard_name": "eastward_wind"}),
            "v": (("time", "plev", "lat", "lon"), v, {"units": "m s-1", "standard_name": "northward_wind"}),
            "q": (("time", "plev", "lat", "lon"), q.copy(), {"units": "kg kg-1", "standard_name": "specific_humidity"}),
            "ps": (("time", "lat", "lon"), np.full((nt, lat.size, lon.size), PS), {"units": "Pa", "standard_name": "surface_air_pressure"}),
        },
        coords={
            "time": np.arange(nt).astype("timedelta64[h]") * 6 + np.datetime64("2031-05-01T00", "ns"),
            "plev": ("plev", LEV, {"units": "Pa", "standard_name": "air_pressure"}),
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
    )
    return open_fields(ds)


def test_split_matches_the_analytic_eddy_flux():
    out = decompose(_fields(), region_from_bbox(0, 40, 10, 50))
    column = (PS - LEV[0]) / STANDARD_GRAVITY  # Σ Δp / g, beta-factor layers (top at the top level)
    a_w, a_e = 0.003 * (1 + 0 / 40), 0.003 * (1 + 10 / 40)
    side = EARTH_RADIUS * np.radians(10.0)  # length of a meridian edge 40–50°N
    # eddy flux a b / 2 per unit pressure; import through W minus export through E
    eddy = (a_w - a_e) * 5.0 / 2 * column * side
    mean_w, mean_e = 0.006 * 8.0 * column * side, 0.006 * 8.0 * column * side
    got = out["edge_import"].sel(part="transient_eddy")
    assert float(got.sel(edge="W")) == pytest.approx(a_w * 5.0 / 2 * column * side, rel=1e-9)
    assert float(out["vapour_import"].sel(part="transient_eddy")) == pytest.approx(eddy, rel=1e-9)
    assert float(out["vapour_import"].sel(part="mean_flow")) == pytest.approx(mean_w - mean_e, abs=1e-6 * mean_w)
    # the parts add up to the total
    v = out["vapour_import"]
    assert float(v.sel(part="total")) == pytest.approx(float(v.sel(part="mean_flow") + v.sel(part="transient_eddy")), rel=1e-12)


def test_total_equals_the_mean_of_the_budget_series():
    from budget import compute

    f = _fields()
    region = region_from_bbox(0, 40, 10, 50)
    series = compute(f, region, mass_correction=False)
    out = decompose(f, region)
    assert float(out["vapour_import"].sel(part="total")) == pytest.approx(float(series["vapour_import"].mean()), rel=1e-9)


def test_column_inputs_are_refused_with_a_reason():
    from budget import testing as analytic

    with pytest.raises(RequestError, match="on levels"):
        decompose(open_fields(analytic.column_dataset(2.0)), region_from_bbox(0, 40, 10, 50))
