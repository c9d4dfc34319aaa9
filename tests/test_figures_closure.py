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


# ---------------------------------------------------------------------------------------------
# the dry-air budget on screen: edge table, profile, curtain and its rate units
# ---------------------------------------------------------------------------------------------
#: a column-mass rate R (kg m-2 s-1) as a surface-pressure tendency: R·g Pa/s (hydrostatic
#: balance, standard gravity 9.80665 m s-2, CGPM 1901 / ISO 80000-3), × 86400 / 100 in hPa/day
TO_HPA_DAY = 9.80665 * 86400 / 100


@pytest.fixture(scope="module")
def profiled():
    s = ensure_sample()
    return budget.compute(budget.open_fields(s.levels), budget.load_region(path=s.basin), profiles=True)


def test_dry_rate_units_fit_air_not_liquid_water():
    from app.figures import rate_unit

    assert rate_unit("hPa/day", "dry") == "hPa/day" and rate_unit("kg/s", "dry") == "kg/s"
    # units of liquid water left on the selector fall back to the budget's own first unit
    assert rate_unit("mm/day", "dry") == "hPa/day" and rate_unit("m3/s", "dry") == "hPa/day"
    assert rate_unit("hPa/day", "vapour") == "mm/day" and rate_unit("m3/s", "vapour") == "m3/s"
    with pytest.raises(ValueError):
        rate_unit("furlongs", "dry")


def test_the_units_selector_follows_the_budget():
    from app.callbacks import units_for_budget

    options, value = units_for_budget("dry", "mm/day")
    assert [o["value"] for o in options] == ["hPa/day", "kg/s"] and value == "hPa/day"
    assert units_for_budget("dry", "kg/s")[1] == "kg/s"  # kg/s fits both: kept
    options, value = units_for_budget("vapour", "hPa/day")
    assert [o["value"] for o in options] == ["mm/day", "kg/s", "m3/s"] and value == "mm/day"


@pytest.mark.parametrize("unit", ["kg/s", "hPa/day"])
def test_dry_edge_table_is_the_dry_air_import_of_each_edge(profiled, unit):
    from app.figures import edge_rows

    ds = profiled
    rows = edge_rows(ds, unit, kind="dry")
    assert [r["edge"] for r in rows] == [str(e) for e in ds["edge"].values]
    kg_s = ds["dry_air_edge_import"].mean("time").values
    area = ds.attrs["region_area_m2"]
    expected = kg_s if unit == "kg/s" else kg_s / area * TO_HPA_DAY
    np.testing.assert_allclose([r["mean_value"] for r in rows], expected, rtol=1e-12)
    assert all(r["mean"].endswith(unit) for r in rows)
    # the edges add up to the net dry-air import of the period table
    total = {r["term"]: r for r in period_rows(ds, unit, kind="dry")}["Net dry-air import"]
    if unit == "kg/s":
        assert sum(r["mean_value"] for r in rows) == pytest.approx(total["mean_value"], rel=1e-9)
    # and differ from the water-vapour edges (air, not moisture)
    vapour = edge_rows(ds, "kg/s", kind="vapour")
    assert rows[0]["mean_value"] != pytest.approx(vapour[0]["mean_value"], rel=1e-3)


def test_dry_series_in_kg_per_s_is_the_mass_rate_over_the_region(profiled):
    from app.figures import series_figure

    ds = profiled
    area = ds.attrs["region_area_m2"]
    fig = series_figure(ds, "kg/s", kind="dry", name="Sample basin")
    conv = next(t for t in fig.data if t.name == "Dry-air convergence")
    np.testing.assert_allclose(conv.y, ds["dry_air_convergence"].values * area, rtol=1e-12)
    assert "rates in kg/s" in fig.layout.title.text and fig.layout.yaxis2.title.text == "rate (kg/s)"
    # mm/day left on the selector: dry air is shown in hPa/day, never as liquid water
    fig = series_figure(ds, "mm/day", kind="dry", name="Sample basin")
    conv = next(t for t in fig.data if t.name == "Dry-air convergence")
    np.testing.assert_allclose(conv.y, ds["dry_air_convergence"].values * TO_HPA_DAY, rtol=1e-12)
    assert "mm/day" not in fig.layout.title.text


def test_dry_profile_and_curtain_show_dry_air(profiled):
    from app.figures import curtain_figure, profile_figure

    ds = profiled
    prof = profile_figure(ds, 2, name="Sample basin", time_label="t", kind="dry")
    line = next(t for t in prof.data if t.name == "import density")
    np.testing.assert_allclose(line.y, ds["dry_air_import_density"].isel(time=2).values, rtol=1e-12)
    assert "Dry air crossing the boundary" in prof.layout.title.text
    curt = curtain_figure(ds, 2, name="Sample basin", time_label="t", kind="dry")
    z = np.asarray(curt.data[0].z, float)
    expected = ds["dry_air_normal_flux_density"].isel(time=2).transpose("level", "piece").values * 100
    np.testing.assert_allclose(z, expected, rtol=1e-12, equal_nan=True)  # per Pa -> per hPa
    assert "Inward dry air flux by height" in curt.layout.title.text
