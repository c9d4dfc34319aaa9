"""Scale: time blocks on local threads or a dask.distributed cluster, flat memory, progress,
Ctrl-C safety and resume.

Reference for the numbers: the divergence theorem on the sphere with the analytic fields of
budget/testing.py (Q = ∇χ + k×∇ψ, χ a sum of spherical harmonics, ∇²Y_l^m = −l(l+1)Y_l^m/a²;
CHECKS.md), so the net import of a polygon is −g(t)·∬∇²χ dA whatever the rotational part does.
The cluster is a dask.distributed LocalCluster on the loopback address only. No timed
assertions: memory is judged as a ratio, speed lives in benchmarks/.
"""

from __future__ import annotations

import json
import tracemalloc

import numpy as np
import pandas as pd
import pytest
import shapely
import xarray as xr

from budget import blocks as block_reader
from budget import ledger
from budget.errors import RequestError
from budget.fields import open_fields
from budget.ledger import compute
from budget.region import region_from_vertices
from budget.stencil import Grid, compile_stencil
from budget.stream import Interrupted, run_blocks
from budget import testing as analytic

# An invented polygon of our own (counter-clockwise), well inside the regional grid below.
POLY = ([2.0, 14.0, 21.0, 17.5, 9.0, 4.5], [41.0, 38.5, 46.0, 52.0, 49.0, 53.5])
BOX = (-20.0, 25.0, 40.0, 70.0)  # west, south, east, north of the regional grid


def g_of_t(n):
    return 1.0 + 0.3 * np.sin(2 * np.pi * np.asarray(n, float) / 17.0)


def h_of_t(n):
    return 1.0 + 0.5 * np.cos(2 * np.pi * np.asarray(n, float) / 11.0)


def write_column_file(path, nt, res=1.0, time_chunk=5):
    """Regional analytic column fields, float32, NetCDF-4 chunked in time."""
    w_, s_, e_, n_ = BOX
    lon = np.arange(w_, e_ + res / 2, res)
    lat = np.arange(s_, n_ + res / 2, res)
    LON, LAT = np.meshgrid(lon, lat)
    qu_d, qv_d, qu_r, qv_r = analytic.flux_parts(LON, LAT)
    n = np.arange(nt)
    g, h = g_of_t(n)[:, None, None], h_of_t(n)[:, None, None]
    w = (20.0 + 10.0 * np.cos(np.radians(LAT)) ** 2) * (1 + 0.02 * np.sin(n / 3.0))[:, None, None]
    times = np.datetime64("2031-05-01T00:00", "ns") + n * np.timedelta64(1, "h")
    ds = xr.Dataset(
        {
            "qu": (("time", "lat", "lon"), (g * qu_d + h * qu_r).astype("f4"), {"units": "kg m-1 s-1"}),
            "qv": (("time", "lat", "lon"), (g * qv_d + h * qv_r).astype("f4"), {"units": "kg m-1 s-1"}),
            "w": (("time", "lat", "lon"), w.astype("f4"), {"units": "kg m-2"}),
        },
        coords={"time": times, "lat": ("lat", lat, {"units": "degrees_north"}), "lon": ("lon", lon, {"units": "degrees_east"})},
        attrs={"title": "invented analytic test fields (not real weather)"},
    )
    enc = {v: {"chunksizes": (min(time_chunk, nt), lat.size, lon.size)} for v in ("qu", "qv", "w")}
    ds.to_netcdf(path, engine="netcdf4", encoding=enc)
    return path


def exact_import(nt):
    # net import = −∮Q·n dl = −∬∇·Q dA (divergence theorem); only the divergent part counts
    geom = shapely.Polygon(list(zip(*POLY)))
    return -g_of_t(np.arange(nt)) * analytic.area_integral_of_divergence(geom)


@pytest.fixture(scope="module")
def col40(tmp_path_factory):
    return write_column_file(tmp_path_factory.mktemp("scale") / "col40.nc", 40)


@pytest.fixture
def small_blocks(monkeypatch):
    """Blocks of 5 steps, so a short record still runs as many blocks."""
    monkeypatch.setattr(block_reader, "MAX_BLOCK_STEPS", 5)


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        dashboard_address=None, protocol="tcp", silence_logs=40,
    ) as c:
        yield c


def _same(a: xr.Dataset, b: xr.Dataset):
    assert set(a.data_vars) == set(b.data_vars)
    for name in a.data_vars:
        np.testing.assert_array_equal(a[name].values, b[name].values, err_msg=name)


# -- the result does not depend on where the blocks run ----------------------------------------
def test_threads_sync_and_cluster_give_identical_budgets(col40, small_blocks, cluster):
    from distributed import Client

    region = region_from_vertices(*POLY)
    fields = open_fields(col40)
    local = compute(fields, region)  # dask's threaded scheduler (default)
    sync = compute(fields, region, scheduler="sync")
    with Client(cluster, set_as_default=False) as client:
        remote = compute(fields, region, scheduler=client)
    by_address = compute(fields, region, scheduler=cluster.scheduler_address)
    assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
    _same(local, sync)
    _same(local, remote)
    _same(local, by_address)
    # and the numbers are right: the divergence theorem with the analytic fields; 0.5 % at 1°
    # as in tests/test_budget_analytic.py
    np.testing.assert_allclose(local["vapour_import"].values, exact_import(40), rtol=5e-3)


def test_progress_counts_steps_up_to_the_total(col40, small_blocks, cluster):
    region = region_from_vertices(*POLY)
    fields = open_fields(col40)
    for scheduler in (None, "sync", cluster.scheduler_address):
        calls = []
        compute(fields, region, scheduler=scheduler, progress=lambda d, t: calls.append((d, t)))
        done = [d for d, _ in calls]
        assert calls[0] == (0, 40) and calls[-1] == (40, 40), scheduler
        assert all(t == 40 for _, t in calls)
        assert done == sorted(done)  # never goes backwards, whatever order blocks finish in
        assert len(calls) == 1 + 40 // 5  # once at the start, then once per block


def test_unknown_scheduler_is_one_sentence():
    with pytest.raises(RequestError, match="Unknown scheduler"):
        run_blocks(lambda ts: {}, 3, 1, scheduler="fast please")


def test_unreachable_scheduler_is_one_sentence(col40):
    import socket

    with socket.socket() as s:  # a loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with pytest.raises(RequestError, match="Cannot reach the dask scheduler"):
        compute(open_fields(col40), region_from_vertices(*POLY), scheduler=f"tcp://127.0.0.1:{port}")


# -- memory is flat in the record length ------------------------------------------------------
def _peak_bytes(path, nt):
    fields = open_fields(path)
    region = region_from_vertices(*POLY)
    compute(fields, region, end=str(fields.times[1]), scheduler="sync")  # imports, file handles
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        ds = compute(fields, region, end=str(fields.times[nt - 1]), scheduler="sync")
        peak = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
    assert ds.sizes["time"] == nt
    return peak


def test_memory_stays_flat_when_the_record_grows_tenfold(tmp_path, monkeypatch):
    # blocks of 10 steps of a 0.25° regional grid: each block holds ~0.5 MB of cells
    monkeypatch.setattr(block_reader, "MAX_BLOCK_STEPS", 10)
    path = write_column_file(tmp_path / "long.nc", 200, res=0.25, time_chunk=10)
    # the smaller of two runs each: a first run may also fill one-off caches (imports, time
    # axes, earlier tests' state), which are not the computation's working memory
    short = min(_peak_bytes(path, 20) for _ in range(2))
    long = min(_peak_bytes(path, 200) for _ in range(2))
    # issue 5: a 10x longer record must not need more than ~1.2x the peak memory
    assert long <= 1.2 * short, (short, long)


# -- the gather reads slabs of touched cells, not whole chunks --------------------------------
class _Recording:
    """An array that remembers how many values each read asked for (a stand-in for a file)."""

    def __init__(self, data):
        self.data, self.shape, self.dtype, self.ndim = data, data.shape, data.dtype, data.ndim
        self.reads = []

    def __getitem__(self, key):
        out = self.data[key]
        self.reads.append(out.size)
        return out


def test_gather_asks_storage_for_slabs_not_whole_chunks():
    import dask.array as da

    src = analytic.column_dataset(0.25, ntime=4)  # global 0.25° grid, one time chunk
    rec = {}
    lazy = {}
    for name in ("qu", "qv", "w"):
        rec[name] = _Recording(src[name].values)
        lazy[name] = (src[name].dims, da.from_array(rec[name], chunks=(4, 720, 1440), asarray=False), src[name].attrs)
    ds = xr.Dataset(lazy, coords=src.coords)
    region = region_from_vertices(*POLY)
    got = compute(open_fields(ds), region, scheduler="sync")
    ref = compute(open_fields(src), region, scheduler="sync")
    _same(got, ref)
    st = compile_stencil(region, Grid.from_fields(open_fields(src)))
    slab = 4 * (np.ptp(st.rows) + 1) * (np.ptp(st.cols) + 1)  # values of the touched box
    chunk = 4 * 720 * 1440
    for name, r in rec.items():
        # one read of the touched box per variable (the index arrays used before made dask
        # read the whole 4 x 720 x 1440 chunk of each variable)
        assert sum(r.reads) <= slab < chunk / 100, (name, r.reads, slab)
    # a time window given to compute must not add a slicing layer that defeats this
    for r in rec.values():
        r.reads.clear()
    t = src["time"].values
    part = compute(open_fields(ds), region, start=str(t[1]), end=str(t[2]), scheduler="sync")
    for name in ("vapour_import", "precipitable_water", "edge_import"):
        np.testing.assert_allclose(part[name].values, ref[name].values[1:3], rtol=1e-12)
    for name, r in rec.items():
        assert sum(r.reads) <= slab / 2, (name, r.reads, slab)


# -- interruption and resume ------------------------------------------------------------------
class _StopAfter:
    """A progress callback that presses Ctrl-C after ``n`` blocks."""

    def __init__(self, n):
        self.n, self.calls = n, 0

    def __call__(self, done, total):
        self.calls += 1
        if self.calls > self.n:
            raise KeyboardInterrupt


def test_interrupted_run_keeps_whole_blocks_and_resumes_to_the_same_result(col40, small_blocks, tmp_path, monkeypatch):
    region = region_from_vertices(*POLY)
    fields = open_fields(col40)
    store = tmp_path / "run.partial"
    with pytest.raises(Interrupted) as info:
        compute(fields, region, scheduler="sync", resume=store, progress=_StopAfter(3))
    assert info.value.done == 15 and info.value.total == 40  # 3 blocks of 5 finished
    assert "15 of 40" in info.value.message() and str(store) in info.value.message()
    assert len(list(store.glob("block_*.npz"))) == 3
    assert not list(store.glob("*.tmp"))  # no half-written block

    blocks = []
    real = ledger._block
    monkeypatch.setattr(ledger, "_block", lambda *a, **k: blocks.append(a[3]) or real(*a, **k))
    resumed = compute(fields, region, resume=store)
    assert [b.start for b in sorted(blocks, key=lambda s: s.start)] == [15, 20, 25, 30, 35]  # only the rest
    assert not store.exists()  # removed once complete
    _same(resumed, compute(fields, region))


def test_resume_folder_of_another_run_is_refused(col40, small_blocks, tmp_path):
    fields = open_fields(col40)
    store = tmp_path / "p"
    with pytest.raises(Interrupted):
        compute(fields, region_from_vertices(*POLY), scheduler="sync", resume=store, progress=_StopAfter(1))
    other = region_from_vertices([0.0, 10.0, 10.0, 0.0], [40.0, 40.0, 50.0, 50.0])
    with pytest.raises(RequestError, match="different run"):
        compute(fields, other, resume=store)


def test_cli_ctrl_c_writes_nothing_then_resumes(col40, small_blocks, tmp_path, monkeypatch, capsys):
    from app import cli

    gj = tmp_path / "poly.geojson"
    ring = [list(p) for p in zip(*POLY)]
    gj.write_text(json.dumps({"type": "Polygon", "coordinates": [ring + [ring[0]]]}))
    out = tmp_path / "budget.csv"
    args = ["run", str(col40), "--region", str(gj), "--out", str(out), "--quiet"]

    real = cli._Progress.__call__
    state = {"n": 0}

    def press_ctrl_c(self, done, total):
        state["n"] += 1
        if state["n"] > 2:
            raise KeyboardInterrupt
        return real(self, done, total)

    monkeypatch.setattr(cli._Progress, "__call__", press_ctrl_c)
    assert cli.main(args) == 130
    err = capsys.readouterr().err
    assert "interrupted after 10 of 40 time steps; no output was written" in err  # 2 blocks of 5
    assert "budget.csv.partial" in err and "resume" in err
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith("budget.csv") and p.is_file()]

    monkeypatch.setattr(cli._Progress, "__call__", real)
    assert cli.main(args) == 0
    assert out.exists() and not (tmp_path / "budget.csv.partial").exists()
    fresh = tmp_path / "fresh.csv"
    assert cli.main(["run", str(col40), "--region", str(gj), "--out", str(fresh), "--quiet"]) == 0
    pd.testing.assert_frame_equal(pd.read_csv(out), pd.read_csv(fresh))


def test_cli_scheduler_flag_runs_on_the_cluster(col40, small_blocks, cluster, tmp_path):
    from app import cli

    out_c, out_l = tmp_path / "cluster.csv", tmp_path / "local.csv"
    common = [str(col40), "--bbox", "5,43,17,49", "--quiet"]
    assert cli.main(["run", *common, "--out", str(out_c), "--scheduler", cluster.scheduler_address]) == 0
    assert cli.main(["run", *common, "--out", str(out_l)]) == 0
    pd.testing.assert_frame_equal(pd.read_csv(out_c), pd.read_csv(out_l))


def test_interrupted_cluster_run_resumes_to_the_local_result(col40, small_blocks, cluster, tmp_path):
    region = region_from_vertices(*POLY)
    fields = open_fields(col40)
    store = tmp_path / "cluster.partial"
    with pytest.raises(Interrupted) as info:
        compute(fields, region, scheduler=cluster.scheduler_address, resume=store, progress=_StopAfter(2))
    assert 0 < info.value.done < 40
    kept = len(list(store.glob("block_*.npz")))
    assert kept * 5 == info.value.done  # what the message says is what is on disk
    resumed = compute(fields, region, scheduler=cluster.scheduler_address, resume=store)
    _same(resumed, compute(fields, region, scheduler="sync"))
    assert not store.exists()


@pytest.fixture
def storage_reads(monkeypatch):
    """Start recording the number of values each NetCDF read returns; returns the list."""
    from xarray.backends import netCDF4_

    def start():
        reads = []
        real = netCDF4_.NetCDF4ArrayWrapper._getitem

        def recording(self, key):
            out = real(self, key)
            reads.append(np.size(out))
            return out

        monkeypatch.setattr(netCDF4_.NetCDF4ArrayWrapper, "_getitem", recording)
        return reads

    return start


def test_descending_latitude_file_with_a_window_asks_storage_for_the_box_only(tmp_path, storage_reads):
    # Reanalysis files often store latitude north to south, and the command line passes
    # --start/--end to open_fields: neither may make a block read whole chunks.
    path = tmp_path / "desc.nc"
    write_column_file(tmp_path / "asc.nc", 12, res=0.25, time_chunk=12)
    with xr.open_dataset(tmp_path / "asc.nc") as asc:
        d = asc.load().isel(lat=slice(None, None, -1))
    d.to_netcdf(path, encoding={v: {"chunksizes": (12, d.sizes["lat"], d.sizes["lon"])} for v in ("qu", "qv", "w")})
    region = region_from_vertices(*POLY)
    t = d["time"].values
    fields = open_fields(path, start=str(t[2]), end=str(t[9]))
    reads = storage_reads()
    got = compute(fields, region, scheduler="sync")
    st = compile_stencil(region, Grid.from_fields(fields))
    box = 8 * (np.ptp(st.rows) + 1) * (np.ptp(st.cols) + 1)  # 8 steps in the window
    chunk = 12 * d.sizes["lat"] * d.sizes["lon"]
    assert box < chunk / 10
    assert len(reads) == 3 and max(reads) <= box, (reads, box, chunk)
    # and the same numbers as the ascending file without a window
    ref = compute(open_fields(tmp_path / "asc.nc"), region, scheduler="sync")
    np.testing.assert_allclose(got["vapour_import"].values, ref["vapour_import"].values[2:10], rtol=1e-12)


def test_cluster_workers_that_cannot_read_the_input_get_one_sentence(col40, cluster, tmp_path):
    import shutil

    copy = tmp_path / "gone.nc"
    shutil.copyfile(col40, copy)
    fields = open_fields(copy)  # opened here, then taken away before the workers read it
    copy.unlink()
    with pytest.raises(RequestError, match="could not read the input"):
        compute(fields, region_from_vertices(*POLY), scheduler=cluster.scheduler_address)


def test_multi_file_input_reads_the_touched_tiles_not_whole_grid_chunks(tmp_path, storage_reads):
    # Monthly files are the usual reanalysis layout: joined by open_mfdataset, they must not
    # make a basin read the whole grid of every step (the touched tiles are the floor dask
    # can reach through the join).
    write_column_file(tmp_path / "all.nc", 12, res=0.25, time_chunk=6)
    with xr.open_dataset(tmp_path / "all.nc") as full:
        full = full.load()
    for k, part in enumerate((slice(0, 6), slice(6, 12))):
        full.isel(time=part).to_netcdf(tmp_path / f"part{k}.nc")
    from budget.region import region_from_bbox

    region = region_from_bbox(0, 40, 4, 43)  # a basin-sized box inside one 128-cell tile
    fields = open_fields(sorted(str(p) for p in tmp_path.glob("part*.nc")))
    reads = storage_reads()
    got = compute(fields, region, scheduler="sync")
    from budget.fields import _TILE

    whole = 3 * 12 * full.sizes["lat"] * full.sizes["lon"]  # three variables, every step
    one_tile = 3 * 12 * _TILE * _TILE  # the box lies inside one tile
    assert sum(reads) <= one_tile < whole / 2, (sum(reads), one_tile, whole)
    ref = compute(open_fields(tmp_path / "all.nc"), region, scheduler="sync")
    np.testing.assert_allclose(got["vapour_import"].values, ref["vapour_import"].values, rtol=1e-12)
