"""The closure seam: the mass-correction state as data (budget.closure).

The correction itself is checked against Trenberth 1991's method in test_mass.py; here, that
the Dataset says whether it was applied in attributes a program can read without parsing a
sentence, for level and column inputs and for each setting.
"""

from __future__ import annotations

import numpy as np
import pytest

import budget
from budget import testing
from budget.closure import CorrectionState
from budget.errors import RequestError
from budget.fields import open_fields
from budget.options import ClosureOptions, BudgetOptions
from budget.region import region_from_bbox

REGION = (5.0, 35.0, 15.0, 45.0)


@pytest.fixture(scope="module")
def levels():
    return open_fields(testing.level_dataset(nt=3))


@pytest.mark.parametrize("setting, applied, status", [("auto", "on", "applied"), ("on", "on", "applied"),
                                                       ("off", "off", "switched_off")])
def test_level_inputs_state_the_correction_as_data(levels, setting, applied, status):
    opts = BudgetOptions(closure=ClosureOptions(mass_correction=setting))
    ds = budget.compute(levels, region_from_bbox(*REGION), options=opts)
    assert ds.attrs["mass_correction_applied"] == applied
    assert ds.attrs["mass_correction_status"] == status
    assert ds.attrs["mass_correction_setting"] == setting
    assert ds.attrs["mass_correction"] == CorrectionState(status, setting).sentence  # older readers


def test_column_inputs_have_no_correction_and_refuse_to_force_one():
    col = open_fields(testing.column_dataset(1.0, ntime=2))
    ds = budget.compute(col, region_from_bbox(*REGION))
    assert ds.attrs["mass_correction_applied"] == "off"
    assert ds.attrs["mass_correction_status"] == "unavailable"
    with pytest.raises(RequestError, match="pre-integrated columns"):
        budget.compute(col, region_from_bbox(*REGION), mass_correction="on")


def test_switching_off_keeps_the_uncorrected_numbers(levels):
    region = region_from_bbox(*REGION)
    off = budget.compute(levels, region, mass_correction=False)
    on = budget.compute(levels, region)
    # with the correction off, P - E is the uncorrected one; with it on, the uncorrected one
    # is still reported beside it (the same number in both runs)
    assert (off["p_minus_e"].values[1:-1] == off["p_minus_e_uncorrected"].values[1:-1]).all()
    assert (on["p_minus_e_uncorrected"].values == off["p_minus_e_uncorrected"].values).all()


def test_the_dataset_is_si_inside(levels):
    # DESIGN: SI inside (Pa, m s-1, kg kg-1, kg m-1 s-1, kg m-2); display units only at the edges
    ds = budget.compute(levels, region_from_bbox(*REGION))
    for name, da in ds.data_vars.items():
        assert "hPa" not in da.attrs["units"] and "day" not in da.attrs["units"], (name, da.attrs["units"])
    # the dry-air residual as a pressure tendency is g times the mass residual (hydrostatic)
    from budget.constants import STANDARD_GRAVITY

    np.testing.assert_allclose(ds["dry_air_residual_pressure"].values, ds["dry_air_residual"].values * STANDARD_GRAVITY, rtol=1e-15)
