"""The command line on the input cases of issues 9 and 12 that budget.fields answers: exit
code, one stderr sentence with the key words, no traceback, existing files unchanged; and the
cases that now work give the same numbers as the plain input (analytic round trips)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd

from tests.test_fields import make_column, make_levels, write
from tests.test_fields_humidity import as_form

BBOX = "20,-20,100,30"


def cli(*args):
    return subprocess.run([sys.executable, "-m", "app.cli", *map(str, args)],
                          capture_output=True, text=True, timeout=300)


def refused(r, code, *words):
    assert r.returncode == code, (r.returncode, r.stderr)
    lines = [x for x in r.stderr.strip().splitlines() if x.strip()]
    assert len(lines) == 1, r.stderr
    assert "Traceback" not in r.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])


def run_csv(tmp_path, name, *args):
    out = tmp_path / f"{name}.csv"
    r = cli("run", *args, "--bbox", BBOX, "--out", out, "--quiet")
    assert r.returncode == 0, r.stderr
    return pd.read_csv(out)


def test_var_q_equals_ps_is_named(tmp_path):
    path = write(make_levels(), tmp_path)
    keep = tmp_path / "keep.csv"
    keep.write_text("before\n")
    r = cli("run", path, "--bbox", BBOX, "--var", "q=ps", "--out", keep, "--overwrite")
    refused(r, 3, "'ps'", "cannot serve as q (specific humidity)")
    assert keep.read_text() == "before\n"


def test_no_time_is_refused(tmp_path):
    path = write(make_column(ntime=1).isel(time=0, drop=True), tmp_path)
    r = cli("run", path, "--bbox", BBOX, "--out", tmp_path / "x.csv")
    refused(r, 3, "no time dimension")
    assert not (tmp_path / "x.csv").exists()


def test_units_knots_gives_the_same_budget(tmp_path):
    plain = write(make_levels(), tmp_path, "plain.nc")
    ds = make_levels()
    for k in ("ua", "va"):  # the same winds in knots, labelled m s-1 (1 kt = 1852/3600 m/s)
        ds[k] = ds[k] / (1852.0 / 3600.0)
        ds[k].attrs["units"] = "m s-1"
    knots = write(ds, tmp_path, "knots.nc")
    a = run_csv(tmp_path, "a", plain)
    b = run_csv(tmp_path, "b", knots, "--units", "ua=knots", "--units", "va=knots")
    np.testing.assert_allclose(b["vapour_import_kg_s"], a["vapour_import_kg_s"], rtol=1e-6)


def test_two_files_with_their_own_units(tmp_path):
    whole = write(make_levels(ntime=4), tmp_path, "whole.nc")
    first = make_levels(ntime=4).isel(time=slice(0, 2))
    second = make_levels(ntime=4, q_units="g/kg", q_scale=1000.0).isel(time=slice(2, 4))
    parts = [write(first, tmp_path, "p1.nc"), write(second, tmp_path, "p2.nc")]
    a = run_csv(tmp_path, "a", whole)
    b = run_csv(tmp_path, "b", *parts)
    np.testing.assert_allclose(b["precipitable_water_mm"], a["precipitable_water_mm"], rtol=1e-6)


def test_relative_humidity_and_temperature_run(tmp_path):
    a = run_csv(tmp_path, "a", write(make_levels(ntime=3), tmp_path, "q.nc"))
    b = run_csv(tmp_path, "b", write(as_form("rh"), tmp_path, "rh.nc"))
    np.testing.assert_allclose(b["precipitable_water_mm"], a["precipitable_water_mm"], rtol=1e-6)
    np.testing.assert_allclose(b["vapour_import_kg_s"], a["vapour_import_kg_s"], rtol=1e-6)


def test_relative_humidity_without_temperature_is_refused(tmp_path):
    r = cli("run", write(as_form("rh").drop_vars("t"), tmp_path), "--bbox", BBOX,
            "--out", tmp_path / "x.csv")
    refused(r, 3, "'r'", "temperature", "--var t=")
