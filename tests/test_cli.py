"""The command line end to end on the sample event, and on each kind of bad input."""

import json
import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import budget
from budget.export import CSV_COLUMNS

REQUIRED = [
    "precipitable_water_mm", "vapour_convergence_mm_day", "pw_tendency_mm_day", "p_minus_e_mm_day",
    "vapour_import_kg_s", "inflow_kg_s", "outflow_kg_s", "area_convergence_mm_day", "p_minus_e_m3_s",
]


def cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)], capture_output=True, text=True, cwd=cwd, timeout=300)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    r = cli("sample", "--out", d)
    assert r.returncode == 0, r.stderr
    assert "Invented" in r.stdout
    return d


def test_sample_then_run_writes_the_documented_csv(demo, tmp_path):
    out = tmp_path / "basin.csv"
    nc = tmp_path / "basin.nc"
    r = cli("run", demo / "demo_levels.nc", "--region", demo / "basin.geojson", "--out", out, "--netcdf", nc)
    assert r.returncode == 0, r.stderr
    assert "P − E" in r.stdout and "Caution" in r.stdout
    df = pd.read_csv(out)
    assert list(df.columns[:1]) == ["time"]
    for col in REQUIRED:
        assert col in df.columns
    assert df["time"].str.match(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$").all()  # ISO 8601 UTC
    # the CSV holds what the Python API computes, in the named units (mm/day = kg m-2 s-1 × 86400)
    ds = budget.compute(budget.open_fields(demo / "demo_levels.nc"), budget.load_region(path=demo / "basin.geojson"))
    np.testing.assert_allclose(df["p_minus_e_mm_day"], ds["p_minus_e"].values * 86400, rtol=1e-5)
    np.testing.assert_allclose(df["p_minus_e_m3_s"], ds["p_minus_e"].values * ds.attrs["region_area_m2"] / 1000, rtol=1e-5)
    np.testing.assert_allclose(df["precipitable_water_mm"], ds["precipitable_water"].values, rtol=1e-5)
    # the NetCDF keeps units, per-edge terms, region geometry and provenance
    back = xr.open_dataset(nc)
    assert back["p_minus_e"].attrs["units"] == "kg m-2 s-1"
    assert "edge" in back["edge_import"].dims
    assert json.loads(back.attrs["region_geojson"])["type"] == "Feature"
    assert "demo_levels.nc" in back.attrs["input_files"]
    assert json.loads(back.attrs["roles"])["q"] == "hus"


def test_bbox_and_time_window(demo, tmp_path):
    out = tmp_path / "box.csv"
    r = cli("run", demo / "demo_column.nc", "--bbox", "0,40,12,50", "--start", "2025-01-16", "--end", "2025-01-17", "--out", out, "--quiet")
    assert r.returncode == 0, r.stderr
    df = pd.read_csv(out)
    assert len(df) == 5 and df["time"].iloc[0] == "2025-01-16T00:00:00Z"


def test_console_script_is_installed():
    exe = shutil.which("fluxfence")
    if exe is None:
        pytest.fail("the fluxfence console script is not on PATH; install with pip install -e .")
    r = subprocess.run([exe, "--version"], capture_output=True, text=True)
    assert r.returncode == 0 and budget.__version__ in r.stdout


def _bad(tmp_path, *args):
    out = tmp_path / "never.csv"
    r = cli(*args, "--out", out) if "--out" not in args else cli(*args)
    assert r.returncode != 0
    assert "Traceback" not in r.stderr
    lines = [ln for ln in r.stderr.strip().splitlines() if not ln.startswith("warning:")]
    assert len(lines) == 1, r.stderr  # one sentence
    assert not out.exists()
    return lines[0]


def test_missing_file(tmp_path, demo):
    msg = _bad(tmp_path, "run", tmp_path / "nope.nc", "--region", demo / "basin.geojson")
    assert "nope.nc" in msg


def test_invalid_geojson(tmp_path, demo):
    bad = tmp_path / "broken.geojson"
    bad.write_text("{ not json")
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--region", bad)
    assert "broken.geojson" in msg


def test_self_intersecting_polygon_names_the_edges(tmp_path, demo):
    bow = tmp_path / "bow.geojson"
    bow.write_text(json.dumps({"type": "Polygon", "coordinates": [[[0, 40], [10, 50], [10, 40], [0, 50], [0, 40]]]}))
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--region", bow)
    assert "cross" in msg and "→" in msg


def test_region_outside_the_data(tmp_path, demo):
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--bbox", "100,10,110,20")
    assert "grid" in msg and "longitudes" in msg


def test_bad_bbox(tmp_path, demo):
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--bbox", "5,43,17")
    assert "W,S,E,N" in msg or "four" in msg


def test_var_mapping_to_an_absent_variable(tmp_path, demo):
    msg = _bad(tmp_path, "run", demo / "demo_levels.nc", "--bbox", "0,40,12,50", "--var", "q=humidity")
    assert "humidity" in msg


def test_unknown_unit_names_variable_and_unit(tmp_path, demo):
    ds = xr.open_dataset(demo / "demo_column.nc")
    ds["pwat"].attrs["units"] = "furlongs"
    f = tmp_path / "odd_units.nc"
    ds.to_netcdf(f)
    msg = _bad(tmp_path, "run", f, "--bbox", "0,40,12,50")
    assert "furlongs" in msg and "pwat" in msg


def test_empty_time_window(tmp_path, demo):
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--bbox", "0,40,12,50", "--start", "2030-01-01")
    assert "2025-01-15" in msg


def test_existing_output_is_never_overwritten_or_truncated(tmp_path, demo):
    out = tmp_path / "keep.csv"
    out.write_text("precious\n")
    r = cli("run", demo / "demo_column.nc", "--bbox", "0,40,12,50", "--out", out)
    assert r.returncode != 0 and "--overwrite" in r.stderr
    assert out.read_text() == "precious\n"
    # a failing run with --overwrite leaves the old file intact too
    r = cli("run", demo / "demo_column.nc", "--bbox", "100,10,110,20", "--out", out, "--overwrite")
    assert r.returncode != 0
    assert out.read_text() == "precious\n"
    assert not list(tmp_path.glob(".keep.csv.*"))  # no temporary left behind


def test_missing_output_folder(tmp_path, demo):
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--bbox", "0,40,12,50", "--out", tmp_path / "no" / "such" / "x.csv")
    assert "does not exist" in msg


def test_csv_column_names_carry_units():
    for name, _, unit in CSV_COLUMNS:
        assert name.endswith(("_mm", "_mm_day", "_kg_s", "_m3_s")) or "_kg_m2" in name or "_m_s" in name or "_hpa" in name, name


def _features(path, boxes):
    feats = [
        {"type": "Feature", "properties": {"name": name, "note": "invented"},
         "geometry": {"type": "Polygon", "coordinates": [[[w, s], [e, s], [e, n], [w, n], [w, s]]]}}
        for name, (w, s, e, n) in boxes.items()
    ]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    return path


def test_each_feature_writes_one_budget_per_region_and_a_summary(demo, tmp_path):
    boxes = {"Invented North": (0, 45, 10, 52), "Invented South/East": (8, 38, 18, 44)}
    regions = _features(tmp_path / "two.geojson", boxes)
    out = tmp_path / "batch"
    r = cli("run", demo / "demo_column.nc", "--region", regions, "--each-feature", "--out", out, "--quiet")
    assert r.returncode == 0, r.stderr
    summary = pd.read_csv(out / "summary.csv")
    assert list(summary["region"]) == list(boxes)
    for (name, bbox), fname in zip(boxes.items(), summary["file"]):
        # each file equals the single-region run of the same box
        one = budget.compute(budget.open_fields(demo / "demo_column.nc"), budget.load_region(bbox=bbox))
        df = pd.read_csv(out / fname)
        np.testing.assert_allclose(df["p_minus_e_mm_day"], one["p_minus_e"].values * 86400, rtol=1e-5)
    assert summary["mean_p_minus_e_mm_day"].notna().all()


def test_each_feature_names_the_bad_feature_before_computing(demo, tmp_path):
    regions = _features(tmp_path / "bad.geojson", {"Inside": (0, 45, 10, 52), "Far away": (100, 10, 110, 20)})
    out = tmp_path / "batch"
    msg = _bad(tmp_path, "run", demo / "demo_column.nc", "--region", regions, "--each-feature", "--out", out)
    assert "Feature 1 (Far away)" in msg
    assert not out.exists()  # nothing written when one region cannot be computed


def test_eddies_flag_prints_the_split(demo, tmp_path):
    r = cli("run", demo / "demo_levels.nc", "--region", demo / "basin.geojson", "--out", tmp_path / "e.csv", "--eddies")
    assert r.returncode == 0, r.stderr
    assert "transient eddies" in r.stdout and "mean flow" in r.stdout


def test_a_file_that_is_not_netcdf(tmp_path):
    bad = tmp_path / "notes.nc"
    bad.write_text("not a netcdf file\n")
    msg = _bad(tmp_path, "run", bad, "--bbox", "0,40,10,50")
    assert "notes.nc" in msg and "not NetCDF" in msg and "xarray" not in msg
