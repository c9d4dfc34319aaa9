"""Resume folders for many-region runs (issue 12): the same behaviour as a single run.

Real signals on the real `fluxfence run` subprocess, as tests/test_cli_files.py does for one
region (its helpers are reused): FLUXFENCE_HOLD makes the run wait after the computation or
between two outputs so that the signal lands there.  Exit statuses are the shell's 128 +
signal number (130 after Ctrl-C, 143 after SIGTERM).  The basins are invented shapes inside
the invented sample's domain (tests/test_multi.py), not real places.
"""

import json
import shutil
import signal
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from budget.errors import RequestError
from tests.test_cli_files import cli, one_line, snapshot, stop_at, temporaries
from tests.test_multi import collection

EXIT_REQUEST = RequestError.exit_code


@pytest.fixture(scope="module")
def sample():
    from sample_fields import ensure_sample

    return ensure_sample()


@pytest.fixture
def demo(sample, tmp_path):
    d = tmp_path / "demo"
    d.mkdir()
    shutil.copyfile(sample.column, d / Path(sample.column).name)
    (d / "three.geojson").write_text(json.dumps(collection()))
    return d


def many_args(demo, *extra):
    return ["run", demo / "demo_column.nc", "--region", demo / "three.geojson", "--quiet", *extra]


def test_ctrl_c_after_computing_keeps_the_steps_and_the_rerun_writes_them(demo, tmp_path):
    # Reference for the numbers: an uninterrupted run of the same command in another folder.
    out = tmp_path / "basins.csv"
    code, err = stop_at("computed", signal.SIGINT, many_args(demo, "--out", out))
    assert code == 130
    line = one_line(err, "computed steps are kept")
    partial = tmp_path / "basins.csv.partial"
    assert str(partial) in line and list(partial.glob("block_*"))
    assert not out.exists() and temporaries(tmp_path) == []
    r = cli(*many_args(demo, "--out", out))
    assert r.returncode == 0, r.stderr
    assert not partial.exists()  # removed only once the outputs are in place
    fresh = tmp_path / "fresh" / "basins.csv"
    fresh.parent.mkdir()
    assert cli(*many_args(demo, "--out", fresh)).returncode == 0
    got, want = pd.read_csv(out), pd.read_csv(fresh)
    assert list(got["region"].unique()) == ["Broad Vale", "Inner Fen", "East Ridge"] and len(got) == 3 * 21
    pd.testing.assert_frame_equal(got, want)


@pytest.mark.parametrize("sig, status", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_each_feature_stopped_before_writing_writes_none_and_keeps_the_steps(demo, tmp_path, sig, status):
    out = tmp_path / "batch"
    nc = tmp_path / "batch.nc"
    code, err = stop_at("computed", sig, many_args(demo, "--each-feature", "--out", out, "--netcdf", nc))
    assert code == status
    one_line(err, "no output was written")
    assert not out.exists() and not nc.exists() and temporaries(tmp_path) == []
    assert list((tmp_path / "batch.partial").glob("block_*"))
    r = cli(*many_args(demo, "--each-feature", "--out", out, "--netcdf", nc))
    assert r.returncode == 0, r.stderr
    assert sorted(p.name for p in out.iterdir()) == ["000_Broad_Vale.csv", "001_Inner_Fen.csv", "002_East_Ridge.csv", "summary.csv"]
    assert not (tmp_path / "batch.partial").exists()
    import xarray as xr

    with xr.open_dataset(nc) as back:
        assert back.sizes["region"] == 3
        one = pd.read_csv(out / "001_Inner_Fen.csv")
        # the NetCDF holds SI (kg m-2 s-1); the CSV mm/day = × 86400 (CHECKS.md, 1 kg m-2 = 1 mm)
        np.testing.assert_allclose(one["p_minus_e_mm_day"], back["p_minus_e"].sel(region="Inner Fen").values * 86400, rtol=1e-5)


def test_a_folder_of_another_run_names_the_ways_out_and_old_formats_are_refused(demo, tmp_path):
    out = tmp_path / "basins.csv"
    code, _ = stop_at("computed", signal.SIGINT, many_args(demo, "--out", out))
    assert code == 130
    partial = tmp_path / "basins.csv.partial"
    kept = snapshot(partial)
    changed = many_args(demo, "--out", out, "--start", "2025-01-16")  # another window: another run
    r = cli(*changed)
    assert r.returncode == EXIT_REQUEST
    line = one_line(r.stderr, "--restart")
    assert "--resume-dir" in line and snapshot(partial) == kept and not out.exists()
    r = cli(*changed, "--resume-dir", tmp_path / "elsewhere")
    assert r.returncode == 0, r.stderr
    assert snapshot(partial) == kept and not (tmp_path / "elsewhere").exists()
    # a single-region run's folder is another run too
    single = many_args(demo, "--out", tmp_path / "one.csv", "--feature", "Inner Fen", "--resume-dir", partial)
    r = cli(*single)
    assert r.returncode == EXIT_REQUEST and snapshot(partial) == kept
    one_line(r.stderr, "different run")
    # a folder written by an older block format is refused with a sentence, never misread
    man = partial / "manifest.json"
    old = json.loads(man.read_text())
    man.write_text(json.dumps({**old, "format": "fluxfence-blocks-1"}))
    again = tmp_path / "again.csv"  # the interrupted run's own command, its folder named
    r = cli(*many_args(demo, "--out", again, "--resume-dir", partial))
    assert r.returncode == EXIT_REQUEST and not again.exists()
    line = one_line(r.stderr, "another version")
    assert "--restart" in line
    r = cli(*many_args(demo, "--out", again, "--resume-dir", partial, "--restart"))
    assert r.returncode == 0, r.stderr
    assert not partial.exists() and len(pd.read_csv(again)) == 3 * 21
