"""The dashboard's period table carries the closure summary (pure figure builders, no browser)."""

import numpy as np
import pytest

import budget
from app.figures import period_rows
from sample_fields import ensure_sample


@pytest.fixture(scope="module")
def sample_budget():
    s = ensure_sample()
    return budget.compute(budget.open_fields(s.levels), budget.load_region(path=s.basin))


def test_period_table_shows_the_closure_terms(sample_budget):
    rows = {r["term"]: r for r in period_rows(sample_budget, "mm/day")}
    uncorrected = "P − E without the mass correction"  # labels: budget/terms.py
    effect = "Effect of the mass correction"
    assert uncorrected in rows and effect in rows
    assert rows["Dry-air residual"]["mean"].endswith("hPa/day")
    assert rows["Mass correction"]["mean"] == "applied"
    assert rows["Mass-correction speed (outward)"]["total"] == ""  # no total for a speed
    # the rows are the Dataset's own means in the shown units (mm/day = kg m-2 s-1 × 86400)
    mean_eff = float(sample_budget["mass_correction_convergence"].mean()) * 86400
    assert rows[effect]["mean_value"] == pytest.approx(mean_eff, rel=1e-9)
    # shown in hPa/day: Pa s-1 x 86400 / 100
    np.testing.assert_allclose(rows["Dry-air residual"]["mean_value"],
                               float(sample_budget["dry_air_residual_pressure"].mean()) * 864.0)


def test_column_inputs_show_no_correction_rows():
    s = ensure_sample()
    ds = budget.compute(budget.open_fields(s.column), budget.load_region(path=s.basin))
    terms = [r["term"] for r in period_rows(ds, "kg/s")]
    assert "Dry-air residual" not in terms and "P − E" in terms
    assert period_rows(ds, "kg/s", kind="dry")[0]["mean"].startswith("not available")


def test_dry_air_rows_in_kg_per_s_and_hpa_per_day(sample_budget):
    from budget.constants import STANDARD_GRAVITY

    ds = sample_budget
    rows = {r["term"]: r for r in period_rows(ds, "mm/day", kind="dry")}
    imp = ds["dry_air_import"].values
    assert rows["Net dry-air import"]["mean_value"] == pytest.approx(imp.mean(), rel=1e-12)
    assert rows["Net dry-air import"]["mean"].endswith(" kg/s")
    # a column-mass rate R (kg m-2 s-1) is a surface-pressure tendency R·g (Pa/s): hydrostatic
    # balance, with standard gravity g = 9.80665 m s-2 (CGPM 1901 / ISO 80000-3); × 86400 / 100
    # for hPa/day
    area = ds.attrs["region_area_m2"]
    to_hpa_day = 9.80665 * 86400 / 100
    assert STANDARD_GRAVITY == 9.80665
    as_ps = rows["Dry-air import as surface-pressure change"]
    assert as_ps["mean_value"] == pytest.approx((imp / area).mean() * to_hpa_day, rel=1e-12)
    resid = rows["Dry-air residual (tendency − convergence)"]["mean_value"]
    tend = rows["Change of dry-air mass"]["mean_value"]
    conv = rows["Dry-air convergence"]["mean_value"]
    assert resid == pytest.approx(tend - conv, abs=1e-9 * max(1.0, abs(tend)))
    both = rows["Surface-pressure tendency (dry air + vapour)"]["mean_value"]
    vapour = float(ds["pw_tendency"].mean()) * to_hpa_day
    assert both == pytest.approx(tend + vapour, rel=1e-9, abs=1e-12)
    assert rows["Mass-correction speed (outward)"]["mean"].endswith("cm/s")
