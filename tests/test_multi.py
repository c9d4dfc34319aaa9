"""Many regions in one pass (budget.multi): exactly the numbers of single runs, one read."""

import json

import numpy as np
import pytest
import xarray as xr

import budget
from budget.errors import RegionError
from budget.multi import compute_each, compute_many, to_long_frame, union_of
from budget.region import load_region

# Three invented basins inside the sample's domain (10° W–20° E, 35–55° N): a large one, one
# nested inside it and one overlapping its eastern side (not real places).
BASINS = {
    "Broad Vale": [[0.0, 40.0], [12.0, 40.0], [12.0, 50.0], [0.0, 50.0], [0.0, 40.0]],
    "Inner Fen": [[4.0, 43.0], [8.5, 42.5], [9.0, 47.0], [5.0, 47.5], [4.0, 43.0]],
    "East Ridge": [[10.0, 38.0], [18.0, 39.0], [17.5, 46.0], [9.5, 45.0], [10.0, 38.0]],
}


def collection():
    return {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"name": name, "note": "invented"}, "geometry": {"type": "Polygon", "coordinates": [ring]}}
        for name, ring in BASINS.items()]}


@pytest.fixture(scope="module")
def basins_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("basins") / "three.geojson"
    p.write_text(json.dumps(collection()))
    return p


@pytest.fixture(scope="module")
def sample():
    from sample_fields import ensure_sample

    return ensure_sample()


def same(a, b, msg=""):
    """Equal to round-off. Tendencies difference large numbers (a dry-air column of 1e4 kg m-2
    changing by 1e-4 of it per step), so the masses' round-off shows at ~1e-11 of the series."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    assert a.shape == b.shape, msg
    scale = np.nanmax(np.abs(b)) if np.isfinite(b).any() else 1.0
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-9 * max(scale, 1e-300), err_msg=msg)
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=msg)


def named(path):
    return [(name, load_region(path=path, feature=name)) for name in BASINS]


@pytest.mark.parametrize("kind", ["levels", "column"])
def test_three_basins_in_one_pass_equal_three_single_runs(sample, basins_file, kind):
    # Reference: three single runs of budget.compute on the same fields (the engine's own
    # single-region path, checked elsewhere against analytic fields and the sample's truth).
    # The cell values are the same; the dense dot products (BLAS) may add them in another
    # order for arrays cut from a larger one, so the numbers agree to round-off.
    fields = budget.open_fields(sample.levels if kind == "levels" else sample.column)
    regions = named(basins_file)
    many = compute_each(fields, regions)
    for (rid, region), got in zip(regions, many):
        one = budget.compute(fields, region)
        assert set(one.data_vars) == set(got.data_vars)
        for v in one.data_vars:
            same(got[v].values, one[v].values, f"{rid}: {v}")
        assert got.attrs["region_area_m2"] == one.attrs["region_area_m2"]
        assert got.attrs["region_name"] == rid
    stacked = compute_many(fields, regions)
    assert stacked["p_minus_e"].dims == ("region", "time") and list(stacked["region"].values) == list(BASINS)
    for k, b in enumerate(many):
        np.testing.assert_array_equal(stacked["p_minus_e"].values[k], b["p_minus_e"].values)  # stacking copies
        n = b.sizes["edge"]
        np.testing.assert_array_equal(stacked["edge_import"].values[k, :, :n], b["edge_import"].values)
        assert np.isnan(stacked["edge_import"].values[k, :, n:]).all()
        assert list(stacked["edge_name"].values[k, :n]) == list(b["edge"].values)
    np.testing.assert_allclose(stacked["region_area_m2"].values, [b.attrs["region_area_m2"] for b in many])


def test_the_union_is_read_once_and_cells_are_taken_exactly(sample, basins_file):
    fields = budget.open_fields(sample.column)
    from budget.stencil import Grid, compile_stencil

    grid = Grid.from_fields(fields)
    sts = [compile_stencil(r, grid) for _, r in named(basins_file)]
    union, pos = union_of(sts)
    for st, p in zip(sts, pos):
        np.testing.assert_array_equal(union.touched[p], st.touched)
    # nested basin: every cell of Inner Fen is also a cell of Broad Vale, so the union adds none
    assert np.isin(sts[1].touched, sts[0].touched).all()
    assert union.touched.size < sum(st.touched.size for st in sts)


def test_long_table_has_region_after_time(sample, basins_file):
    from budget.export import to_frame

    fields = budget.open_fields(sample.column)
    regions = named(basins_file)
    stacked = compute_many(fields, regions)
    many = budget.multi.unstack(stacked)
    df = to_long_frame(stacked)
    assert list(df.columns[:2]) == ["time", "region"]
    assert len(df) == 3 * fields.ds.sizes["time"]
    for rid, b in zip(BASINS, many):
        one = to_frame(b)
        part = df[df["region"] == rid].drop(columns="region").reset_index(drop=True)
        assert part.equals(one)


def test_a_region_outside_the_grid_is_named(sample):
    fields = budget.open_fields(sample.column)
    far = budget.load_region(bbox="40,10,50,20")
    with pytest.raises(RegionError, match="Region 'Far Isle'"):
        compute_many(fields, [("Far Isle", far)])


def cli(*args):
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)], capture_output=True, text=True, timeout=600)


def test_cli_writes_one_long_table_and_a_region_dataset(sample, basins_file, tmp_path):
    import pandas as pd

    from budget.export import to_frame

    out = tmp_path / "basins.csv"
    r = cli("run", sample.column, "--region", basins_file, "--out", out, "--netcdf", tmp_path / "basins.nc", "--quiet")
    assert r.returncode == 0, r.stderr
    df = pd.read_csv(out)
    assert list(df.columns[:2]) == ["time", "region"] and list(df["region"].unique()) == list(BASINS)
    fields = budget.open_fields(sample.column)
    for rid, region in named(basins_file):
        one = to_frame(budget.compute(fields, region))
        part = df[df["region"] == rid]
        np.testing.assert_allclose(part["p_minus_e_mm_day"], one["p_minus_e_mm_day"], rtol=1e-5)  # CSV keeps 6 digits
    back = xr.open_dataset(tmp_path / "basins.nc")
    assert back["p_minus_e"].dims == ("region", "time") and back.sizes["region"] == 3
    # periods per region from the same pass
    r = cli("run", sample.column, "--region", basins_file, "--out", tmp_path / "daily.csv", "--aggregate", "day", "--quiet")
    assert r.returncode == 0, r.stderr
    daily = pd.read_csv(tmp_path / "daily.csv")
    assert list(daily["region"].unique()) == list(BASINS) and (daily.groupby("region").size() == 6).all()


def test_cli_names_an_invalid_basin_and_skips_it_when_asked(sample, tmp_path):
    import pandas as pd

    fc = collection()
    fc["features"].append({"type": "Feature", "properties": {"name": "Knotted Marsh", "note": "invented, crosses itself"},
                           "geometry": {"type": "Polygon", "coordinates": [[[0, 40], [6, 40], [0, 46], [6, 46], [0, 40]]]}})
    path = tmp_path / "four.geojson"
    path.write_text(json.dumps(fc))
    r = cli("run", sample.column, "--region", path, "--out", tmp_path / "four.csv")
    assert r.returncode != 0 and "Knotted Marsh" in r.stderr and "--skip-invalid" in r.stderr and "Traceback" not in r.stderr
    assert not (tmp_path / "four.csv").exists()
    r = cli("run", sample.column, "--region", path, "--out", tmp_path / "four.csv", "--skip-invalid", "--quiet")
    assert r.returncode == 0, r.stderr
    assert "skipped feature 'Knotted Marsh'" in r.stderr
    assert list(pd.read_csv(tmp_path / "four.csv")["region"].unique()) == list(BASINS)
    # --feature still picks one
    r = cli("run", sample.column, "--region", path, "--feature", "Inner Fen", "--out", tmp_path / "one.csv", "--quiet")
    assert r.returncode == 0, r.stderr
    assert "region" not in pd.read_csv(tmp_path / "one.csv").columns


LAYERS = "1000,850,700,500,300"


def test_layers_of_each_region_sum_to_its_column_and_equal_its_single_run(sample, basins_file):
    # References: (1) the layers tile the air column above the ground (budget.layers; the
    # mass-weighted layer sum of Boer 1982 and Trenberth 1991, CHECKS.md), so with the mass
    # correction off the layer imports add up to the column import of the files' winds to
    # round-off; (2) each region's single run of budget.compute with the same layers.
    from budget.attribution import AttributionOptions
    from budget.layers import parse_layers
    from budget.options import BudgetOptions, ClosureOptions

    fields = budget.open_fields(sample.levels)
    regions = named(basins_file)
    opts = BudgetOptions(closure=ClosureOptions(mass_correction="off"), attribution=AttributionOptions(layers=parse_layers(LAYERS)))
    ds = compute_many(fields, regions, options=opts)
    assert ds["layer_edge_import"].dims == ("region", "time", "layer", "edge")
    np.testing.assert_allclose(ds["layer_import"].sum("layer").values, ds["vapour_import"].values, rtol=1e-9)
    for k, ((rid, region), got) in enumerate(zip(regions, budget.multi.unstack(ds))):
        one = budget.compute(fields, region, options=opts)
        n = one.sizes["edge"]
        for v in ("layer_import", "layer_convergence", "layer_edge_import"):
            same(got[v].values, one[v].values, f"{rid}: {v}")
        np.testing.assert_allclose(ds["layer_edge_import"].values[k, :, :, :n].sum(axis=1), one["edge_import"].values,
                                   rtol=1e-9, atol=1e-9 * float(np.abs(one["edge_import"]).max()))
        assert np.isnan(ds["layer_edge_import"].values[k, :, :, n:]).all()


def test_cli_layers_for_many_regions_reach_the_long_table(sample, basins_file, tmp_path):
    # Reference: each region's single run (budget.compute with the same layers) through
    # budget.export.to_frame, the writer of a single run's CSV; the CSV keeps 6 digits.
    import pandas as pd

    from budget.attribution import AttributionOptions
    from budget.export import to_frame
    from budget.layers import parse_layers
    from budget.options import BudgetOptions

    out = tmp_path / "layers.csv"
    r = cli("run", sample.levels, "--region", basins_file, "--layers", LAYERS, "--out", out, "--quiet")
    assert r.returncode == 0, r.stderr
    df = pd.read_csv(out)
    cols = [c for c in df.columns if c.startswith("layer_") and c.endswith("_import_kg_s")]
    assert "layer_1000_850hPa_import_kg_s" in cols and len(cols) == 6  # with sfc–1000 and 300–top
    fields = budget.open_fields(sample.levels)
    opts = BudgetOptions(attribution=AttributionOptions(layers=parse_layers(LAYERS)))
    for rid, region in named(basins_file):
        one = to_frame(budget.compute(fields, region, options=opts))
        part = df[df["region"] == rid]
        for c in cols:
            np.testing.assert_allclose(part[c], one[c], rtol=1e-5, atol=1e-5 * float(np.abs(one[c]).max()))
