"""Gridded column fields for maps (budget.maps.column_snapshot).

References: the analytic fields of budget.testing (Q = ∇χ + k×∇ψ, ∇·Q = ∇²χ in closed form,
CHECKS.md) for the convergence, which the centred-difference divergence on the sphere matches
to second order in the grid spacing; IVT magnitude is |Q| by definition (CHECKS.md, column
integrals); the level case is checked against the budget's own area mean of W, which uses the
same column integral (so the map and the budget cannot disagree).
"""

from __future__ import annotations

import numpy as np

from budget import testing
from budget.fields import open_fields
from budget.maps import column_snapshot


def test_convergence_matches_the_analytic_divergence():
    fields = open_fields(testing.column_dataset(1.0, ntime=2))
    snap = column_snapshot(fields, 1)
    LON, LAT = np.meshgrid(snap["lon"].values, snap["lat"].values)
    exact = -testing.divergence(LON, LAT) * 1.1  # the flux grows by 10 % per step
    inner = np.abs(LAT) < 80  # away from the poles, where 1/cos φ amplifies the differences
    err = np.abs(snap["convergence"].values - exact)[inner].max() / np.abs(exact[inner]).max()
    assert err < 1e-3  # second-order centred differences on a 1° grid
    np.testing.assert_allclose(snap["ivt"].values, np.hypot(snap["ivt_u"].values, snap["ivt_v"].values))
    ds = fields.ds.isel(time=1)
    np.testing.assert_allclose(snap["precipitable_water"].values, ds["w"].values)
    assert snap["convergence"].attrs["units"] == "kg m-2 s-1"


def test_level_fields_integrate_like_the_budget():
    import budget
    from budget.region import region_from_bbox

    fields = open_fields(testing.level_dataset(nt=2))
    snap = column_snapshot(fields, 0)
    # uniform fields: every cell holds the same column W; the budget's area mean is that W
    w = snap["precipitable_water"].values
    assert np.ptp(w) < 1e-12 * w.max()
    ds = budget.compute(fields, region_from_bbox(5, 35, 15, 45))
    np.testing.assert_allclose(ds["precipitable_water"].values[0], w[0, 0], rtol=1e-12)
    # IVT of a uniform wind (10, 2) m/s over W: |Q| = W |V| (q V integrates as q times V)
    np.testing.assert_allclose(snap["ivt"].values, w * np.hypot(10.0, 2.0), rtol=1e-12)
