"""Observed / model precipitation and evaporation (budget.observed) and total water.

Sources:
* accumulation handling: synthetic series whose rate is known in closed form (a rate linear
  in time integrates to a quadratic; the mean of two adjacent interval means of a linear rate
  is its value at the shared time, exactly, on a regular step);
* unit factors: pint's registry as shipped with MetPy (general-purpose library); liquid-water
  depths use 1000 kg m-3 (common practice, no source);
* evaporation sign: CF standard-name table (water_evapotranspiration_flux is positive when water
  evaporates) and ECMWF's downward-positive convention for its evaporation parameter 182
  (from memory);
* total water: by definition (CF "atmosphere_water_transport ... all phases") the content and
  flux of vapour + cloud liquid + cloud ice; with condensate a fixed fraction of q, every
  total-water term is (1 + fraction) × the vapour term (linearity of the column integral).
"""

import json

import numpy as np
import pandas as pd
import pytest

from budget import compute, observed
from budget.errors import FieldsError, RequestError
from budget.fields import open_fields
from budget.region import region_from_bbox
from budget import testing as analytic
from tests.test_mass import BOX, LAT, LON, P_LEVELS, levels_dataset

HOURLY = pd.date_range("2031-07-01T00", "2031-07-03T00", freq="h").values.astype("datetime64[ns]")


def rate(t_s):
    """A known precipitation rate, kg m-2 s-1, linear in time (t in s since 2031-07-01T00)."""
    return 2e-5 + 3e-10 * t_s


def amount(a_s, b_s):
    """∫ rate dt from a to b (closed form)."""
    return 2e-5 * (b_s - a_s) + 1.5e-10 * (b_s**2 - a_s**2)


def seconds(times):
    return (np.asarray(times) - np.datetime64("2031-07-01T00", "ns")) / np.timedelta64(1, "s")


def running(times, period_h, reset_h=0.0):
    """Running accumulations restarting every period_h hours from reset_h UTC; the value at a
    reset time still holds the period just ended."""
    t = seconds(times)
    P, r0 = period_h * 3600.0, reset_h * 3600.0
    last = r0 + (np.ceil((t - r0) / P) - 1) * P
    return amount(last, t)


@pytest.mark.parametrize("period_h,reset_h", [(1, 0), (12, 0), (12, 6)], ids=["hourly", "12-hourly", "12-hourly-from-06"])
def test_deaccumulation_recovers_a_known_rate(period_h, reset_h):
    acc = running(HOURLY, period_h, reset_h)
    reset = np.datetime64(f"2031-07-01T{reset_h:02d}:00", "ns")
    interval = observed.deaccumulate(acc, HOURLY, np.timedelta64(period_h, "h"), reset)
    t = seconds(HOURLY)
    # each interval's mean rate is the rate at its midpoint (linear rate)
    np.testing.assert_allclose(interval[1:], rate(0.5 * (t[1:] + t[:-1])), rtol=1e-10)
    # the first value covers the time since the last reset
    last = reset_h * 3600.0 + (np.ceil((t[0] - reset_h * 3600.0) / (period_h * 3600.0)) - 1) * period_h * 3600.0
    assert interval[0] == pytest.approx(rate(0.5 * (last + t[0])), rel=1e-10)
    # centred on the times: exact for a linear rate inside, one-sided (half a step off) at the end
    at_times = observed.centre_on_times(interval)
    np.testing.assert_allclose(at_times[1:-1], rate(t[1:-1]), rtol=1e-10)
    assert at_times[-1] == pytest.approx(rate(t[-1] - 1800.0), rel=1e-10)
    if period_h == 12:
        # a plain difference would go negative at every reset: the handling matters
        assert np.diff(acc).min() < 0


def test_never_restarting_accumulation():
    acc = amount(0.0, seconds(HOURLY))  # accumulated since the start, never reset
    interval = observed.deaccumulate(acc, HOURLY, "never")
    assert np.isnan(interval[0])
    t = seconds(HOURLY)
    np.testing.assert_allclose(interval[1:], rate(0.5 * (t[1:] + t[:-1])), rtol=1e-9)
    at_times = observed.centre_on_times(interval)
    assert np.isfinite(at_times).all()


def test_reset_between_times_is_refused():
    six_hourly = HOURLY[::6]
    with pytest.raises(RequestError, match="falls between the times"):
        observed.deaccumulate(running(six_hourly, 4), six_hourly, np.timedelta64(4, "h"))


def test_periods_and_reset_times_parse():
    assert observed.parse_period("1h") == np.timedelta64(1, "h")
    assert observed.parse_period("PT12H") == np.timedelta64(12, "h")
    assert observed.parse_period("none") == "never"
    assert observed.parse_period(None) is None
    with pytest.raises(RequestError, match="not a positive duration"):
        observed.parse_period("soon")
    assert observed.parse_reset("06:00", HOURLY) == np.datetime64("2031-07-01T06:00", "ns")
    with pytest.raises(RequestError, match="reset time"):
        observed.parse_reset("dawn", HOURLY)


def test_unit_factors_agree_with_pint():
    # pint (via MetPy) for every spelling pint can parse; liquid-water depths ×1000 kg m-3
    from metpy.units import units as ureg

    checked = 0
    for table, si in ((observed.RATE_UNITS, "kg m-2 s-1"), (observed.AMOUNT_UNITS, "kg m-2")):
        for unit, factor in table.items():
            spelled = unit.replace(" of water equivalent", "").replace("hr", "hour").replace("kg/(m2 s)", "kg/(m**2 s)")
            try:
                q = ureg.Quantity(1.0, spelled)
            except Exception:  # noqa: BLE001 - pint cannot read every spelling; the rest are checked
                continue
            if q.check("[length]") or q.check("[length]/[time]"):
                q = q * ureg.Quantity(1000.0, "kg m-3")  # liquid water
            assert factor == pytest.approx(q.to(si).magnitude, rel=1e-12), unit
            checked += 1
    assert checked > 25
    assert observed.classify("precip", {"units": "mm/day"}, "pr")[0] == "rate"
    assert observed.classify("precip", {"units": "m"}, "tp")[0] == "amount"
    with pytest.raises(FieldsError, match="neither as a rate"):
        observed.classify("precip", {"units": "furlongs"}, "pr")


def test_evaporation_sign_conventions():
    # CF standard-name table: evaporation flux positive upward
    assert observed.evaporation_sign({"standard_name": "water_evapotranspiration_flux"}, "evspsbl")[0] == 1.0
    # ECMWF parameter 182 'e': downward positive, evaporation negative (from memory)
    assert observed.evaporation_sign({"units": "m of water equivalent"}, "e")[0] == -1.0
    assert observed.evaporation_sign({"GRIB_paramId": 182}, "evaporation")[0] == -1.0
    assert observed.evaporation_sign({"positive": "down"}, "x")[0] == -1.0
    assert observed.evaporation_sign({"standard_name": "water_evapotranspiration_flux"}, "x", "down")[0] == -1.0
    with pytest.raises(RequestError, match="neither 'up' nor 'down'"):
        observed.evaporation_sign({}, "x", "sideways")


# ----------------------------------------------------------------------------------------
# through open_fields and compute


def fields_with_surface_water(ntime, step_h, precip=None, evap=None, condensate=None):
    """Mass-consistent level fields (tests/test_mass.py) on ``ntime`` steps of ``step_h`` hours,
    with optional uniform precipitation / evaporation variables and cloud condensate."""
    times = pd.date_range("2031-07-01T00", periods=ntime, freq=f"{step_h}h").values.astype("datetime64[ns]")
    nl = P_LEVELS.size
    lam, phi = np.meshgrid(np.radians(LON), np.radians(LAT))
    s = (P_LEVELS / 1e5)[:, None, None]
    q = 0.012 * s**3 * (1 + 0.5 * np.sin(2 * lam))[None]
    u = (10 + 5 * (1 - s)) * np.cos(phi)[None] / (1 - q)
    b = lambda a: np.broadcast_to(a, (ntime, nl) + lam.shape).copy()  # noqa: E731
    ds = levels_dataset(LON, LAT, P_LEVELS, b(u), b(0 * u), b(q), np.full((ntime,) + lam.shape, 101000.0), times=times)
    grid = (ntime,) + lam.shape
    for name, spec in (("precip", precip), ("evap", evap)):
        if spec is not None:
            var, values, attrs = spec(times)
            ds[var] = (("time", "lat", "lon"), np.broadcast_to(values[:, None, None], grid).copy(), attrs)
    if condensate is not None:
        ds["clwc"] = (("time", "plev", "lat", "lon"), condensate * b(q), {"units": "kg kg-1", "standard_name": "mass_fraction_of_cloud_liquid_water_in_air"})
        ds["ciwc"] = (("time", "plev", "lat", "lon"), 0.5 * condensate * b(q), {"units": "kg kg-1"})
    return open_fields(ds)


def era_style_precip(times):
    # ERA5-like: metres of water, each value the amount over the hour ending at its time
    return "tp", running(times, 1) / 1000.0, {"units": "m", "long_name": "Total precipitation"}


def cf_evaporation(times):
    return "evspsbl", np.full(len(times), 1.5e-5), {"units": "kg m-2 s-1", "standard_name": "water_evapotranspiration_flux"}


def ecmwf_evaporation(times):
    # ECMWF 'e': metres of water per hour ending at each time, negative for evaporation
    return "e", -np.full(len(times), 1.5e-5) * 3600.0 / 1000.0, {"units": "m of water equivalent", "long_name": "Evaporation"}


def test_precipitation_evaporation_and_closure_residual():
    f = fields_with_surface_water(13, 1, precip=era_style_precip, evap=cf_evaporation)
    assert f.extra_roles == {"precip": "tp", "evap": "evspsbl"}
    ds = compute(f, region_from_bbox(*BOX), accumulation_period="1h")
    t = seconds(ds["time"].values)
    # uniform fields: the area mean is the known rate, centred on the times inside
    np.testing.assert_allclose(ds["precipitation"].values[:-1], rate(t[:-1]), rtol=1e-9)
    np.testing.assert_allclose(ds["evaporation"].values, 1.5e-5, rtol=1e-12)
    assert ds["precipitation"].attrs["units"] == "kg m-2 s-1"
    np.testing.assert_allclose(ds["p_minus_e_observed"].values, ds["precipitation"].values - 1.5e-5, rtol=1e-12)
    np.testing.assert_allclose(ds["closure_residual"].values, ds["p_minus_e_observed"].values - ds["p_minus_e"].values, rtol=1e-12)
    summary = json.loads(ds.attrs["closure_summary"])
    # SI values with their units beside (the term catalogue's)
    assert summary["mean_precipitation"] == pytest.approx(np.mean(ds["precipitation"].values), rel=1e-9)
    assert summary["units"]["mean_precipitation"] == "kg m-2 s-1"
    assert summary["variables_used"]["precip"] == "tp"


def test_amount_without_period_is_left_out_with_a_warning():
    f = fields_with_surface_water(7, 1, precip=era_style_precip)
    ds = compute(f, region_from_bbox(*BOX))
    assert "precipitation" not in ds
    assert any("accumulation period is not stated" in w for w in json.loads(ds.attrs["warnings"]))


def test_cf_time_sum_gives_the_period():
    def summed(times):
        name, vals, attrs = era_style_precip(times)
        return name, vals, {**attrs, "cell_methods": "time: sum"}

    ds = compute(fields_with_surface_water(7, 1, precip=summed), region_from_bbox(*BOX))
    t = seconds(ds["time"].values)
    np.testing.assert_allclose(ds["precipitation"].values[:-1], rate(t[:-1]), rtol=1e-9)


def test_ecmwf_evaporation_sign_is_reversed():
    ds = compute(fields_with_surface_water(7, 1, evap=ecmwf_evaporation), region_from_bbox(*BOX), accumulation_period="1h")
    np.testing.assert_allclose(ds["evaporation"].values, 1.5e-5, rtol=1e-9)
    assert "ECMWF" in ds["evaporation"].attrs["sign_convention_in_file"]


def test_twelve_hourly_forecast_accumulations_through_compute():
    def forecast(times):
        return "tp", running(times, 12, 6) / 1000.0, {"units": "m"}

    ds = compute(fields_with_surface_water(25, 1, precip=forecast), region_from_bbox(*BOX),
                 accumulation_period="12h", accumulation_reset="06:00")
    t = seconds(ds["time"].values)
    np.testing.assert_allclose(ds["precipitation"].values[1:-1], rate(t[1:-1]), rtol=1e-9)


def test_total_water_scales_with_condensate_fraction():
    # condensate = 0.1 q (liquid) + 0.05 q (ice): every total-water term is 1.15 × the vapour one
    base = fields_with_surface_water(3, 6)
    f = fields_with_surface_water(3, 6, condensate=0.1)
    assert set(f.extra_roles) == {"ql", "qi"}
    ds = compute(f, region_from_bbox(*BOX))
    ref = compute(base, region_from_bbox(*BOX))
    assert "total_water_content" not in ref
    np.testing.assert_allclose(ds["total_water_content"].values, 1.15 * ds["precipitable_water"].values, rtol=1e-12)
    np.testing.assert_allclose(ds["total_water_convergence"].values, 1.15 * ds["vapour_convergence"].values, rtol=1e-9)
    np.testing.assert_allclose(ds["p_minus_e_total_water"].values, 1.15 * ds["p_minus_e"].values, rtol=1e-9)


def test_column_total_water():
    # column inputs: all-phase fluxes (CF eastward_atmosphere_water_transport_across_unit_distance)
    # and cloud columns; here 1.2 × the vapour flux and 0.2 × W, so total water is 1.2 × vapour
    ds = analytic.column_dataset(2.0, ntime=2)
    ds["tu"] = 1.2 * ds["qu"]
    ds["tu"].attrs = {"units": "kg m-1 s-1", "standard_name": "eastward_atmosphere_water_transport_across_unit_distance"}
    ds["tv"] = 1.2 * ds["qv"]
    ds["tv"].attrs = {"units": "kg m-1 s-1", "standard_name": "northward_atmosphere_water_transport_across_unit_distance"}
    ds["tclw"] = 0.2 * ds["w"]
    ds["tclw"].attrs = {"units": "kg m-2"}
    f = open_fields(ds)
    assert f.extra_roles == {"tu": "tu", "tv": "tv", "wl": "tclw"}
    out = compute(f, region_from_bbox(5, 43, 17, 49))
    np.testing.assert_allclose(out["total_water_import"].values, 1.2 * out["vapour_import"].values, rtol=1e-12)
    np.testing.assert_allclose(out["total_water_content"].values, 1.2 * out["precipitable_water"].values, rtol=1e-12)


def test_bad_requests_fail_even_without_surface_water():
    f = fields_with_surface_water(3, 6)
    with pytest.raises(RequestError, match="not a positive duration"):
        compute(f, region_from_bbox(*BOX), accumulation_period="fortnightish")
    with pytest.raises(RequestError, match="neither 'up' nor 'down'"):
        compute(f, region_from_bbox(*BOX), evaporation_positive="sideways")


def test_missing_precipitation_inside_the_region_is_reported():
    def gappy(times):
        vals = np.full(len(times), 3e-5)
        vals[2] = np.nan
        return "pr", vals, {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"}

    ds = compute(fields_with_surface_water(5, 6, precip=gappy), region_from_bbox(*BOX))
    assert np.isnan(ds["precipitation"].values[2]) and np.isfinite(ds["precipitation"].values[[0, 1, 3, 4]]).all()
    assert any("missing values inside the region" in w for w in json.loads(ds.attrs["warnings"]))


def test_command_line_accumulation_options_and_netcdf(tmp_path, capsys):
    import xarray as xr

    from app.cli import main

    times = pd.date_range("2031-07-01T00", periods=25, freq="h").values.astype("datetime64[ns]")
    # ERA5-forecast-like: both accumulate over 12 h from 06 and 18 UTC (one period for all
    # accumulated variables); 'e' counts evaporation negative (ECMWF)
    def e12(t):
        since = seconds(t) - (6 * 3600.0 + (np.ceil((seconds(t) - 6 * 3600.0) / 43200.0) - 1) * 43200.0)
        return "e", -1.5e-5 * since / 1000.0, {"units": "m of water equivalent"}

    f = fields_with_surface_water(25, 1, precip=lambda t: ("tp", running(t, 12, 6) / 1000.0, {"units": "m"}), evap=e12)
    src = tmp_path / "in.nc"
    raw = f.ds.rename({"level": "plev"}).assign_coords(plev=("plev", f.ds["level"].values, {"units": "Pa"}))
    raw = raw.rename({"precip": "tp", "evap": "e"})
    raw.to_netcdf(src)
    out = tmp_path / "b.csv"
    assert main(["run", str(src), "--bbox", "10,20,30,40", "--out", str(out), "--accumulation-period", "12h",
                 "--accumulation-reset", "06:00", "--netcdf", str(tmp_path / "b.nc")]) == 0
    text = capsys.readouterr().out
    assert "precipitation" in text and "closure residual" in text
    table = pd.read_csv(out)
    t = seconds(times)
    np.testing.assert_allclose(table["precipitation_mm_day"][1:-1], rate(t[1:-1]) * 86400, rtol=1e-5)
    np.testing.assert_allclose(table["evaporation_mm_day"], 1.5e-5 * 86400, rtol=1e-5)
    back = xr.open_dataset(tmp_path / "b.nc")
    assert back["closure_residual"].attrs["units"] == "kg m-2 s-1"
    assert json.loads(back.attrs["closure_summary"])["mass_correction"] == "applied"
    back.close()
