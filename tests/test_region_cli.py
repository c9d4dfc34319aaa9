"""The region options through the command line: a bbox that starts with a minus, typed with a
space as users do, and a region file nested too deep.  Runs on the invented sample event."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import budget
from budget.region import region_from_bbox

from tests.region_support import box_area


def cli(*args):
    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)],
                          capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    r = cli("sample", "--out", d)
    assert r.returncode == 0, r.stderr
    return d


def test_bbox_starting_with_a_minus_typed_with_a_space(demo, tmp_path):
    spaced, joined = tmp_path / "spaced.csv", tmp_path / "joined.csv"
    r = cli("run", demo / "demo_column.nc", "--bbox", "-5,40,5,50", "--out", spaced, "--quiet")
    assert r.returncode == 0, r.stderr
    r = cli("run", demo / "demo_column.nc", "--bbox=-5,40,5,50", "--out", joined, "--quiet")
    assert r.returncode == 0, r.stderr
    a, b = pd.read_csv(spaced), pd.read_csv(joined)
    pd.testing.assert_frame_equal(a, b)
    # the box is the one typed: its area is R² Δλ (sin φ2 − sin φ1) (CHECKS.md, derived)
    ds = budget.compute(budget.open_fields(demo / "demo_column.nc"), region_from_bbox(-5, 40, 5, 50))
    assert ds.attrs["region_area_m2"] == pytest.approx(box_area(-5, 40, 5, 50), rel=1e-12)
    # kg m-2 s-1 × 86400 = mm/day (CHECKS.md, conversions)
    np.testing.assert_allclose(a["p_minus_e_mm_day"], ds["p_minus_e"].values * 86400, rtol=1e-5)


def test_bbox_with_a_minus_still_needs_four_numbers(demo, tmp_path):
    r = cli("run", demo / "demo_column.nc", "--bbox", "-5,40,5", "--out", tmp_path / "x.csv")
    assert r.returncode != 0 and "Traceback" not in r.stderr
    assert "four numbers" in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_region_file_nested_100000_deep(demo, tmp_path):
    deep = tmp_path / "deep.geojson"
    deep.write_text('{"type": "Polygon", "coordinates": ' + "[" * 100_000 + "]" * 100_000 + "}")
    r = cli("run", demo / "demo_column.nc", "--region", deep, "--out", tmp_path / "x.csv")
    assert r.returncode != 0 and r.returncode != 70, r.stderr
    assert "Traceback" not in r.stderr and "RecursionError" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "nested too deep" in lines[0]
    assert not (tmp_path / "x.csv").exists()
