"""compute(): options as values, the public API, the single-step message (budget.ledger).

The budget's numbers are checked elsewhere against outside references (test_budget_analytic.py:
divergence theorem with analytic fields; test_sample_budget.py: the invented event's exact
budget; test_mass.py: Trenberth 1991 correction).  Here: that the option values give the
same numbers as the keywords (the analytic import of budget.testing is the reference), and
that the seams say what they promise.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely

import budget
from budget import testing
from budget.errors import RequestError
from budget.fields import open_fields
from budget.options import BudgetOptions, ClosureOptions, RunOptions
from budget.region import region_from_bbox

BOX = (10.0, 20.0, 30.0, 40.0)


@pytest.fixture(scope="module")
def fields():
    return open_fields(testing.column_dataset(1.0, ntime=3))


def test_options_values_and_keywords_give_the_same_budget(fields):
    region = region_from_bbox(*BOX)
    a = budget.compute(fields, region, method="area", scheduler="sync")
    b = budget.compute(fields, region, options=BudgetOptions(method="area"), run=RunOptions(scheduler="sync", block_steps=1))
    for name in ("vapour_convergence", "p_minus_e", "edge_import"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=1e-12)  # blocks of 1 step: round-off only
    # reference: divergence theorem, −∬∇·Q dA over the box (Gauss quadrature of the analytic
    # divergence, budget.testing) times the flux's growth 1 + 0.1 t; the area method on a 1°
    # grid agrees within 1 % (second-order scheme, see test_budget_analytic.py)
    exact = -testing.area_integral_of_divergence(shapely.box(*BOX)) * (1 + 0.1 * np.arange(3))
    np.testing.assert_allclose(b["vapour_convergence"].values * b.attrs["region_area_m2"], exact, rtol=0.01)


def test_options_are_checked_and_not_given_twice(fields):
    with pytest.raises(RequestError, match="choose 'boundary' or 'area'"):
        BudgetOptions(method="line")
    with pytest.raises(RequestError, match="'auto', 'on' or 'off'"):
        ClosureOptions(mass_correction="sometimes")
    assert ClosureOptions(mass_correction=False).mass_correction == "off"
    assert ClosureOptions(mass_correction=None).mass_correction == "auto"
    with pytest.raises(RequestError, match="not both"):
        budget.compute(fields, region_from_bbox(*BOX), method="area", options=BudgetOptions())


def test_public_api_is_listed_and_reachable():
    for name in budget.__all__:
        assert getattr(budget, name) is not None, name
    # README's Python example writes the CSV through budget.export after `import budget`
    assert callable(budget.export.write_csv)
    assert {"open_fields", "load_region", "compute", "export"} <= set(budget.__all__)
    with pytest.raises(AttributeError):
        budget.no_such_thing  # noqa: B018


def test_a_single_step_says_plainly_why_p_minus_e_is_empty(fields):
    region = region_from_bbox(*BOX)
    one = open_fields(testing.column_dataset(1.0, ntime=1))
    ds = budget.compute(one, region)
    assert np.isnan(ds["p_minus_e"].values).all() and np.isfinite(ds["vapour_convergence"].values).all()
    warnings = json.loads(ds.attrs["warnings"])
    assert any("a tendency needs at least two" in w and "P - E" in w for w in warnings)
    two = budget.compute(fields, region)
    assert not any("tendency needs" in w for w in json.loads(two.attrs["warnings"]))


def test_term_attributes_come_from_the_catalogue(fields):
    from budget import terms

    ds = budget.compute(fields, region_from_bbox(*BOX))
    for name, da in ds.data_vars.items():
        t = terms.term(name)
        assert da.attrs["units"] == t.units and da.attrs["long_name"] == t.long_name, name
        if t.standard_name:
            assert da.attrs["standard_name"] == t.standard_name
