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
    assert "P − E without the mass correction" in rows and "Effect of the mass correction" in rows
    assert rows["Dry-air residual"]["mean"].endswith("hPa day⁻¹")
    assert rows["Mass correction"]["mean"] == "applied"
    # the rows are the Dataset's own means in the shown units (mm/day = kg m-2 s-1 × 86400)
    mean_eff = float(sample_budget["mass_correction_convergence"].mean()) * 86400
    assert rows["Effect of the mass correction"]["mean_value"] == pytest.approx(mean_eff, rel=1e-9)
    # shown in hPa/day: Pa s-1 x 86400 / 100
    np.testing.assert_allclose(rows["Dry-air residual"]["mean_value"], float(sample_budget["dry_air_residual_pressure"].mean()) * 864.0)


def test_column_inputs_show_no_correction_rows():
    s = ensure_sample()
    ds = budget.compute(budget.open_fields(s.column), budget.load_region(path=s.basin))
    terms = [r["term"] for r in period_rows(ds, "kg/s")]
    assert "Dry-air residual" not in terms and "P − E" in terms
