"""Attribution of the import (budget.attribution): AR share, boundary IVT and layers.

References: an analytic jet of known width crossing one edge (its share of the inflow follows
from the divergence theorem's line integral ∫ Qu a dφ along a meridian edge, CHECKS.md);
the layers tile the column (budget.layers), so the layer imports sum to the column import.
"""

import numpy as np
import pytest

from budget.attribution import AttributionOptions, boundary_sums, layer_sums
from budget.layers import parse_layers
from budget.region import region_from_bbox
from budget.stencil import Grid, compile_stencil
from budget.vertical import PressureLevels, column_integral


def _grid(step=0.25):
    lat = np.arange(-10.0, 20.0 + step / 2, step)
    lon = np.arange(-10.0, 20.0 + step / 2, step)
    return Grid(lat, lon, periodic=False)


def test_a_jet_of_known_width_crossing_one_edge():
    # eastward transport 100 kg m-1 s-1 everywhere but a jet of 400 between 2 and 4 N, with
    # linear flanks one grid step (0.25°) wide, so that bilinear interpolation reproduces it
    # exactly. The box 0-10 E, 0-10 N takes it in through its west edge, where the inflow is
    # ∫ Qu a dφ. IVT >= 250 on [1.875, 4.125] N: AR inflow ∝ 2·(325·0.125) + 400·2 = 881.25,
    # all inflow ∝ 100·7.5 + 2·(250·0.25) + 400·2 = 1675 (degree units), share 0.52612.
    g = _grid()
    st = compile_stencil(region_from_bbox(0, 0, 10, 10), g)
    LAT = g.lat[st.rows]
    prof = np.interp(LAT, [-90, 1.75, 2.0, 4.0, 4.25, 90], [100, 100, 400, 400, 100, 100])
    qu = prof[None, :]
    qv = np.zeros_like(qu)
    s = boundary_sums(st, qu, qv, 250.0)
    flux = (st.bu @ qu.T).T
    inflow = np.clip(-flux, 0, None).sum()
    assert s["ar_in"][0] / inflow == pytest.approx(881.25 / 1675, rel=5e-3)
    # all of it through the west edge ("W" for a box)
    names = list(st.boundary.edge_names)
    assert s["ar_edge"][0, names.index("W")] == pytest.approx(s["ar_in"][0])
    # with a threshold above the jet no inflow counts
    assert boundary_sums(st, qu, qv, 500.0)["ar_in"][0] == 0.0


def test_boundary_mean_ivt_of_a_uniform_transport():
    g = _grid(0.5)
    st = compile_stencil(region_from_bbox(0, 0, 10, 10), g)
    qu = np.full((2, st.touched.size), 300.0)
    qv = np.full((2, st.touched.size), 400.0)
    s = boundary_sums(st, qu, qv, 250.0)
    np.testing.assert_allclose(s["ivt_bnd"], 500.0, rtol=1e-12)  # |(300, 400)| = 500


def test_layer_imports_sum_to_the_column_import():
    g = _grid(0.5)
    st = compile_stencil(region_from_bbox(0, 0, 10, 10), g)
    rng = np.random.default_rng(3)
    p = np.array([200, 300, 500, 700, 850, 925, 1000]) * 100.0
    vert = PressureLevels(p)
    nt, nl, nc = 2, p.size, st.touched.size
    ps = rng.uniform(95000, 102000, (nt, nc))
    q = rng.uniform(0, 0.015, (nt, nl, nc))
    u = rng.normal(5, 10, (nt, nl, nc))
    v = rng.normal(0, 10, (nt, nl, nc))
    dp = np.moveaxis(vert.thickness(ps), 0, 1)  # (time, level, cell)
    out = layer_sums(st, vert, parse_layers("1000,850,500,300"), q * u, q * v, dp, ps)["layer_edge"]
    qu = column_integral(q * u, dp, level_axis=1)
    qv = column_integral(q * v, dp, level_axis=1)
    column = -(st.bu @ qu.T + st.bv @ qv.T).sum(axis=0)
    np.testing.assert_allclose(out.sum(axis=(1, 2)), column, rtol=1e-10)
    assert out.shape == (nt, len(parse_layers("1000,850,500,300").names()), len(st.boundary.edge_names))


def test_options_default_threshold_is_the_published_one():
    # Rutz, Steenburgh and Ralph 2014: IVT >= 250 kg m-1 s-1
    assert AttributionOptions().ar_threshold == 250.0


# -- through the whole budget, on the invented sample event ---------------------------------

@pytest.fixture(scope="module")
def sample_budget(tmp_path_factory):
    from budget.attribution import AttributionOptions as AO
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.options import BudgetOptions, ClosureOptions
    from budget.region import load_region
    from sample_fields import ensure_sample

    paths = ensure_sample(tmp_path_factory.mktemp("attr"))
    opts = BudgetOptions(closure=ClosureOptions(mass_correction="off"),
                         attribution=AO(layers=parse_layers("1000,850,700,500,300")))
    return compute(open_fields([str(paths.levels)]), load_region(path=str(paths.basin)), options=opts)


def test_sample_layers_sum_to_the_column_and_reach_the_csv(sample_budget):
    from budget.export import to_frame

    ds = sample_budget
    # the layers tile the column: their imports add up to the budget's import (correction off)
    np.testing.assert_allclose(ds["layer_import"].sum("layer").values, ds["vapour_import"].values, rtol=1e-9)
    np.testing.assert_allclose(ds["layer_edge_import"].sum("layer").values, ds["edge_import"].values, rtol=1e-9,
                               atol=1e-9 * float(np.abs(ds["edge_import"]).max()))
    np.testing.assert_allclose(ds["layer_convergence"].sum("layer").values, ds["boundary_convergence"].values, rtol=1e-9)
    df = to_frame(ds)
    assert "layer_1000_850hPa_import_kg_s" in df.columns
    assert "layer_850_700hPa_convergence_mm_day" in df.columns
    # AR inflow never exceeds the inflow; the boundary IVT is positive
    assert (ds["ar_inflow"].values <= ds["inflow"].values * (1 + 1e-12)).all()
    assert (ds["boundary_mean_ivt"].values > 0).all()
    assert "ar_inflow_kg_s" in df.columns and "boundary_mean_ivt_kg_m_s" in df.columns


def test_ar_share_of_a_single_step_is_that_steps_own():
    # One time step covers no interval (budget.periods.INTEGRATION_RULE gives it zero length),
    # yet the share of its inflow that crossed above the threshold is plain arithmetic:
    # AR inflow / inflow (a GFS analysis is one such step).
    import xarray as xr

    from budget.attribution import ar_share
    from budget.events import step_seconds

    ds = xr.Dataset({"inflow": ("time", [4.0e8]), "ar_inflow": ("time", [1.0e8])},
                    coords={"time": np.array(["2011-01-15T12"], "datetime64[ns]")})
    assert ar_share(ds, step_seconds(ds["time"].values)) == pytest.approx(0.25)
    two = xr.Dataset({"inflow": ("time", [4.0e8, 2.0e8]), "ar_inflow": ("time", [1.0e8, 0.0])},
                     coords={"time": np.array(["2011-01-15T12", "2011-01-15T18"], "datetime64[ns]")})
    # two equal intervals: (1e8 + 0) / (4e8 + 2e8)
    assert ar_share(two, step_seconds(two["time"].values)) == pytest.approx(1 / 6)
