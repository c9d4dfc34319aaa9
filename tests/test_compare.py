"""Datasets side by side (budget.compare), on the invented sample event.

References: identical datasets must show no spread (a tautology of the definition of a range,
but it exercises the common time axis); the budget is linear in specific humidity for fixed
winds and surface pressure (W = (1/g)∫q dp, Q = (1/g)∫qV dp), so a dataset whose humidity is
a known factor k times another's has W, the import and the convergence k times as large when
the dry-air mass correction (which depends on q through the dry-air mass) is off.
"""

import numpy as np
import pytest
import xarray as xr

from budget.compare import spread, stack
from budget.errors import RequestError
from budget.fields import open_fields
from budget.ledger import compute
from budget.region import load_region
from sample_fields import ensure_sample


@pytest.fixture(scope="module")
def sample(tmp_path_factory):
    d = tmp_path_factory.mktemp("cmp")
    paths = ensure_sample(d)
    src = xr.open_dataset(paths.levels)
    moist = src.copy()
    moist["hus"] = src["hus"] * 1.1
    moist_path = d / "moist.nc"
    moist.to_netcdf(moist_path)
    src.close()
    region = load_region(path=str(paths.basin))
    a = compute(open_fields([str(paths.levels)]), region, mass_correction=False)
    b = compute(open_fields([str(paths.levels)]), region, mass_correction=False)
    c = compute(open_fields([str(moist_path)]), region, mass_correction=False)
    return a, b, c


def test_identical_datasets_have_no_spread(sample):
    a, b, _ = sample
    s = spread(stack({"one": a, "two": b}))
    assert float(np.nanmax(np.abs(s["precipitable_water_range"].values))) == 0.0
    assert float(np.nanmax(np.abs(s["p_minus_e_range"].values))) == 0.0


def test_humidity_scaled_by_a_known_factor_gives_that_ratio(sample):
    a, _, c = sample
    st = stack({"base": a, "moist": c})
    for name in ("precipitable_water", "vapour_import", "boundary_convergence", "area_convergence"):
        ratio = st[name].sel(dataset="moist") / st[name].sel(dataset="base")
        np.testing.assert_allclose(ratio.values, 1.1, rtol=2e-6, err_msg=name)  # float32 file
    s = spread(st)
    np.testing.assert_allclose(s["precipitable_water_range"].values, 0.1 * a["precipitable_water"].values, rtol=1e-5)


def test_no_common_time_step_is_refused(sample):
    a, b, _ = sample
    late = b.assign_coords(time=b["time"].values + np.timedelta64(1, "h"))
    with pytest.raises(RequestError, match="share no time step"):
        stack({"a": a, "late": late})
    with pytest.raises(RequestError, match="at least two"):
        stack({"a": a})
