"""The block runner and its resume folder (budget.stream).

No outside reference applies to bookkeeping; each check states the behaviour the README and
DEVELOPERS.md promise (blocks in time order, a resume folder of another run or another
format refused with a sentence, never misread).  Scheduler, memory and storage-read checks
are in test_scale.py.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from budget import compute
from budget.blocks import BlockSums
from budget.errors import RequestError
from budget.fields import open_fields
from budget.region import region_from_bbox
from budget.stream import BlockStore, run_blocks


def _block(ts: slice) -> BlockSums:
    t = np.arange(ts.start, ts.stop, dtype=float)
    e = t[:, None]
    return BlockSums(w=t, imp=t, inflow=t, outflow=t, edge=e, adiv=t, w_edge=e)


@pytest.mark.parametrize("scheduler", [None, "sync"])
def test_blocks_come_back_in_time_order(scheduler):
    got = run_blocks(_block, 11, 3, scheduler=scheduler)
    assert [b.w.tolist() for b in got] == [[0, 1, 2], [3, 4, 5], [6, 7, 8], [9, 10]]


def test_a_store_keeps_blocks_and_a_rerun_reads_them(tmp_path):
    store = tmp_path / "run.partial"
    calls = []

    def counted(ts):
        calls.append(ts.start)
        return _block(ts)

    run_blocks(counted, 6, 2, scheduler="sync", store=store, key="job", keep_store=True)
    assert sorted(p.name for p in store.glob("block_*.npz")) == [
        "block_000000000_000000002.npz", "block_000000002_000000004.npz", "block_000000004_000000006.npz"]
    calls.clear()
    again = run_blocks(counted, 6, 2, scheduler="sync", store=store, key="job")
    assert calls == [] and np.concatenate([b.w for b in again]).tolist() == [0, 1, 2, 3, 4, 5]
    assert not store.exists()


def test_an_old_format_resume_folder_is_refused(tmp_path):
    # a folder left by the version that kept string-keyed dicts (format 1)
    store = tmp_path / "budget.csv.partial"
    store.mkdir()
    (store / "manifest.json").write_text(json.dumps({"format": "fluxfence-blocks-1", "key": "abc"}))
    np.savez(store / "block_000000000_000000002.npz", w=np.zeros(2), imp=np.zeros(2))
    with pytest.raises(RequestError, match=r"budget\.csv\.partial.*another version of Fluxfence.*delete it to start afresh"):
        BlockStore(store, "abc")
    # and through compute, whatever the job
    col = tmp_path / "col.nc"
    from budget import testing

    testing.column_dataset(2.0, ntime=2).to_netcdf(col)
    with pytest.raises(RequestError, match="another version of Fluxfence"):
        compute(open_fields(col), region_from_bbox(0, 0, 20, 20), resume=store)
    assert (store / "block_000000000_000000002.npz").exists()  # refused, not deleted


def test_a_store_of_another_run_is_refused(tmp_path):
    store = tmp_path / "p"
    BlockStore(store, "one")
    with pytest.raises(RequestError, match="different run"):
        BlockStore(store, "two")
