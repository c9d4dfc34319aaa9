"""`fluxfence run` with layers, atmospheric rivers, events and datasets side by side, on the
invented sample event, in-process through app.cli.main.

References: the layers tile the column (budget.layers), so the per-layer import columns add up
to the import column (mass correction off, both from the files' winds); the budget is linear
in humidity (W = (1/g)∫q dp), so a dataset whose humidity is 1.2 times another's has 1.2
times its precipitable water, and the range rows span the two.
"""

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app.cli import main
from sample_fields import ensure_sample


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("cliattr")
    paths = ensure_sample(d)
    src = xr.open_dataset(paths.levels)
    moist = src.copy()
    moist["hus"] = src["hus"] * 1.2
    moist.to_netcdf(d / "moist.nc")
    src.close()
    return d, paths


def test_layers_events_and_shares(demo, tmp_path, capsys):
    d, paths = demo
    out, events = tmp_path / "b.csv", tmp_path / "events.csv"
    code = main(["run", paths.levels, "--region", paths.basin, "--out", out, "--no-mass-correction",
                 "--layers", "1000,850,700,500,300", "--events", events, "--event-percentile", "80", "--quiet"])
    assert code == 0, capsys.readouterr().err
    df = pd.read_csv(out)
    layer_cols = [c for c in df.columns if c.startswith("layer_") and c.endswith("_import_kg_s")]
    assert "layer_1000_850hPa_import_kg_s" in layer_cols and len(layer_cols) == 6
    np.testing.assert_allclose(df[layer_cols].sum(axis=1), df["vapour_import_kg_s"], rtol=1e-5)  # %.6g in the CSV
    assert (df["ar_inflow_kg_s"] <= df["inflow_kg_s"] * (1 + 1e-5)).all()
    ev = pd.read_csv(events)
    assert len(ev) >= 1 and {"start", "end", "total_p_minus_e_mm", "top_edge", "ar_share"} <= set(ev.columns)


def test_datasets_side_by_side(demo, tmp_path, capsys):
    d, paths = demo
    out = tmp_path / "cmp.csv"
    code = main(["run", "--dataset", f"base={paths.levels}", "--dataset", f"moist={d / 'moist.nc'}",
                 "--region", paths.basin, "--out", out, "--no-mass-correction"])
    text = capsys.readouterr().out
    assert code == 0
    assert "spread" in text
    df = pd.read_csv(out)
    assert list(df.columns[:2]) == ["time", "dataset"]
    base = df[df.dataset == "base"].set_index("time")["precipitable_water_mm"]
    moist = df[df.dataset == "moist"].set_index("time")["precipitable_water_mm"]
    np.testing.assert_allclose(moist / base, 1.2, rtol=1e-5)
    np.testing.assert_allclose(df[df.dataset == "range_max"].set_index("time")["precipitable_water_mm"], moist, rtol=1e-6)
    np.testing.assert_allclose(df[df.dataset == "range_min"].set_index("time")["precipitable_water_mm"], base, rtol=1e-6)


@pytest.mark.parametrize("extra,word", [
    (["--layers", "100000,85000"], "hPa"),
    (["--ar-threshold", "-5"], "positive"),
    (["--event-percentile", "150", "--events", "EV"], "percentile"),
])
def test_bad_options_are_one_sentence(demo, tmp_path, capsys, extra, word):
    d, paths = demo
    extra = [str(tmp_path / "ev.csv") if x == "EV" else x for x in extra]
    code = main(["run", paths.levels, "--region", paths.basin, "--out", tmp_path / "x.csv", "--quiet", *extra])
    err = capsys.readouterr().err
    assert code != 0 and code != 70
    assert word in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "x.csv").exists()


def test_existing_events_file_is_kept(demo, tmp_path, capsys):
    d, paths = demo
    keep = tmp_path / "keep.csv"
    keep.write_text("precious\n")
    code = main(["run", paths.levels, "--region", paths.basin, "--out", tmp_path / "y.csv", "--events", keep, "--quiet"])
    assert code != 0 and "exists" in capsys.readouterr().err
    assert keep.read_text() == "precious\n" and not (tmp_path / "y.csv").exists()


# -- many regions: one catalogue with a region column --------------------------------------------
def test_events_of_many_regions_match_single_runs(demo, tmp_path, capsys):
    # Reference: the single-region path (--feature NAME --events), one run per region; the
    # many-region run reads the fields once and must give each region the same catalogue.
    import json

    from tests.test_multi import BASINS, collection

    d, paths = demo
    regions = tmp_path / "three.geojson"
    regions.write_text(json.dumps(collection()))
    many = tmp_path / "many_events.csv"
    code = main(["run", paths.levels, "--region", regions, "--out", tmp_path / "long.csv", "--events", many,
                 "--event-percentile", "80", "--quiet"])
    assert code == 0, capsys.readouterr().err
    ev = pd.read_csv(many)
    assert list(ev.columns[:2]) == ["region", "start"]
    assert set(ev["region"]) <= set(BASINS) and len(ev) >= 1
    for name in BASINS:
        one = tmp_path / f"{name}.csv"
        assert main(["run", paths.levels, "--region", regions, "--feature", name, "--out", tmp_path / f"{name}_b.csv",
                     "--events", one, "--event-percentile", "80", "--quiet"]) == 0
        single = pd.read_csv(one)
        mine = ev[ev["region"] == name].drop(columns="region").reset_index(drop=True)
        cols = ["start", "end", "steps", "total_p_minus_e_mm", "top_edge", "ar_share"]
        pd.testing.assert_frame_equal(mine[cols], single[cols], check_dtype=False, rtol=1e-5)


def test_events_with_each_feature_is_refused(demo, tmp_path, capsys):
    import json

    from tests.test_multi import collection

    d, paths = demo
    regions = tmp_path / "three.geojson"
    regions.write_text(json.dumps(collection()))
    code = main(["run", paths.levels, "--region", regions, "--each-feature", "--out", tmp_path / "each",
                 "--events", tmp_path / "ev.csv", "--quiet"])
    err = capsys.readouterr().err
    assert code != 0 and "--each-feature" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "each").exists() and not (tmp_path / "ev.csv").exists()


# -- datasets side by side: one output transaction (budget.outputs) -------------------------------
def _no_compute(monkeypatch):
    """Make any budget computation fail loudly, so a refusal is shown to come before it."""
    import budget.ledger

    def refuse(*a, **k):
        raise AssertionError("computed before the outputs were checked")

    monkeypatch.setattr(budget.ledger, "compute", refuse)


def test_datasets_existing_output_refused_before_computing(demo, tmp_path, capsys, monkeypatch):
    d, paths = demo
    keep = tmp_path / "cmp.csv"
    keep.write_text("precious\n")
    _no_compute(monkeypatch)
    code = main(["run", "--dataset", f"base={paths.levels}", "--dataset", f"moist={d / 'moist.nc'}",
                 "--region", paths.basin, "--out", keep, "--quiet"])
    err = capsys.readouterr().err
    assert code != 0 and code != 70 and "exists already" in err and "Traceback" not in err
    assert keep.read_text() == "precious\n"
    assert [p.name for p in tmp_path.iterdir()] == ["cmp.csv"]  # no temporary left


def test_datasets_input_as_output_refused(demo, tmp_path, capsys, monkeypatch):
    d, paths = demo
    before = (d / "moist.nc").read_bytes()
    _no_compute(monkeypatch)
    code = main(["run", "--dataset", f"base={paths.levels}", "--dataset", f"moist={d / 'moist.nc'}",
                 "--region", paths.basin, "--out", d / "moist.nc", "--overwrite", "--quiet"])
    err = capsys.readouterr().err
    assert code != 0 and "one of the inputs" in err and len(err.strip().splitlines()) == 1
    assert (d / "moist.nc").read_bytes() == before


@pytest.mark.parametrize("extra, column", [(["--layers", "1000,850,700"], "layer_1000_850hPa_import_kg_s"),
                                           (["--ar-threshold", "300"], "ar_inflow_kg_s")])
def test_many_regions_carry_layers_and_the_ar_threshold(demo, tmp_path, capsys, extra, column):
    # many-region runs (budget.multi.compute_many) carry the attribution options; reference:
    # each region's single run with the same option (--feature), whose CSV keeps 6 digits
    import json

    from tests.test_multi import collection

    d, paths = demo
    regions = tmp_path / "three.geojson"
    regions.write_text(json.dumps(collection()))
    assert main(["run", paths.levels, "--region", regions, "--out", tmp_path / "long.csv", "--quiet", *extra]) == 0
    long = pd.read_csv(tmp_path / "long.csv")
    assert main(["run", paths.levels, "--region", regions, "--feature", "East Ridge", "--out", tmp_path / "one.csv",
                 "--quiet", *extra]) == 0
    one = pd.read_csv(tmp_path / "one.csv")
    got = long.loc[long["region"] == "East Ridge", column].to_numpy()
    np.testing.assert_allclose(got, one[column].to_numpy(), rtol=1e-5, atol=1e-5 * float(np.abs(one[column]).max()))
