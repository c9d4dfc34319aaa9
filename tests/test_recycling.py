"""Bulk recycling ratio (budget.recycling) against the published formula of Brubaker,
Entekhabi and Eagleson (1993, J. Climate 6, 1077-1089): rho = E A / (E A + 2 F_in), on cases
where E, A and F_in are set by construction."""

import numpy as np
import pytest
import xarray as xr

from budget.errors import RequestError
from budget.recycling import ASSUMPTIONS, bulk_ratio, period_ratio

DAY = 86400.0


def test_formula_limits_and_a_worked_value():
    # no inflow: all rain is recycled; no evaporation: none is
    assert bulk_ratio(1e-5, 1e12, 0.0) == pytest.approx(1.0)
    assert bulk_ratio(0.0, 1e12, 1e8) == pytest.approx(0.0)
    # E A equal to 2 F_in gives one half, whatever the values
    e = 2.0 / DAY  # 2 mm/day
    area = 5.0e11
    fin = e * area / 2.0
    assert bulk_ratio(e, area, fin) == pytest.approx(0.5)


def _ds(n=40, e_mm_day=3.0, inflow=2.0e8, area=1.0e12, with_e=True):
    t = np.datetime64("2030-06-01") + np.arange(n) * np.timedelta64(6, "h")
    ds = xr.Dataset(coords={"time": t}, attrs={"region_area_m2": area})
    ds["inflow"] = ("time", np.full(n, inflow))
    ds["p_minus_e"] = ("time", np.full(n, 1.0 / DAY))
    if with_e:
        ds["evaporation"] = ("time", np.full(n, e_mm_day / DAY))
    else:  # observed precipitation P = (P - E) + E by construction
        ds["precipitation"] = ("time", np.full(n, (1.0 + e_mm_day) / DAY))
    return ds


@pytest.mark.parametrize("with_e", [True, False])
def test_period_ratio_from_files_or_from_observed_precipitation(with_e):
    out = period_ratio(_ds(with_e=with_e))
    ea = 3.0 / DAY * 1.0e12
    assert out["recycling_ratio"] == pytest.approx(ea / (ea + 2 * 2.0e8))
    assert out["assumptions"] == ASSUMPTIONS
    assert ("files" in out["evaporation_source"]) == with_e


def test_no_evaporation_source_says_what_to_give():
    ds = _ds()
    ds = ds.drop_vars("evaporation")
    with pytest.raises(RequestError, match="evap"):
        period_ratio(ds)


def test_ratio_grows_with_region_size():
    # Trenberth (1999, J. Climate 12): for the same E, a larger region (A ~ L^2, F_in ~ L)
    # recycles more
    small = bulk_ratio(3 / DAY, 1e10, 1e7)
    large = bulk_ratio(3 / DAY, 1e12, 1e8)
    assert large > small
