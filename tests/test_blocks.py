"""The touched-cell block reader, block sizing and the BlockSums format (budget.blocks).

References: the gather must return exactly what numpy's own indexing of the full array
returns for the touched cells (numpy is the reference); block sizes follow the memory rule
stated in budget/blocks.py (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from budget import blocks
from budget.blocks import BLOCK_FORMAT, BlockSums, Cells, Gatherer, block_steps, gather, runs
from budget.errors import RequestError


class _Touched:
    """A stand-in stencil: just the touched rows and columns."""

    def __init__(self, rows, cols):
        self.rows, self.cols = np.asarray(rows), np.asarray(cols)


def _grid_ds(nt=4, nlat=60, nlon=80, chunks=None):
    rng = np.random.default_rng(7)
    ds = xr.Dataset(
        {
            "a": (("time", "lat", "lon"), rng.normal(size=(nt, nlat, nlon))),
            "b": (("time", "level", "lat", "lon"), rng.normal(size=(nt, 3, nlat, nlon))),
        },
        coords={"time": np.arange(nt), "lat": np.arange(nlat), "lon": np.arange(nlon)},
    )
    return ds.chunk(chunks) if chunks else ds


def test_runs_read_through_small_gaps():
    assert runs(np.array([1, 2, 3, 10, 40, 41]), gap=16) == [(1, 11), (40, 42)]
    assert runs(np.array([5]), gap=16) == [(5, 6)]


@pytest.mark.parametrize("chunks", [None, {"time": 2, "lat": 16, "lon": 16}])
def test_gather_returns_exactly_the_touched_cells(chunks):
    ds = _grid_ds(chunks=chunks)
    rows = np.array([3, 3, 4, 50, 51, 20, 59])  # scattered: several runs in each direction
    cols = np.array([0, 70, 71, 5, 6, 40, 79])
    cells = Cells.of(_Touched(rows, cols))
    got = gather(ds, cells, slice(1, 3))
    full = ds.load()
    np.testing.assert_array_equal(got["a"], full["a"].values[1:3][:, rows, cols])
    np.testing.assert_array_equal(got["b"], full["b"].values[1:3][:, :, rows, cols])
    one = gather(ds["a"], cells, slice(0, 4))
    np.testing.assert_array_equal(one, full["a"].values[:, rows, cols])


def test_gatherer_reads_every_variable_once_and_hands_each_over_once():
    ds = _grid_ds()
    cells = Cells.of(_Touched([1, 2], [3, 4]))
    g = Gatherer(ds, cells, slice(0, 2))
    first = g("a")
    assert set(g.cache) == {"b"}  # the first call read both; "a" was handed over
    np.testing.assert_array_equal(g("a"), first)  # asked again: read again, same values


def test_block_size_is_bounded_by_memory_and_not_by_the_record_length(monkeypatch):
    st = _Touched(np.arange(100), np.arange(100))  # 100 x 100 touched box
    ds = _grid_ds(nt=2)
    monkeypatch.setattr(blocks.os, "cpu_count", lambda: 2)
    n = block_steps("column", st, ds, 10_000)
    per_step = 100 * 100 * 3 * 3 * 8 * 2  # box x levels x variables x bytes x temporaries
    assert n == min(blocks.MAX_BLOCK_STEPS, blocks.CHUNK_BYTES // 2 // per_step)
    assert block_steps("column", st, ds, 100_000) == n  # independent of the record length
    assert block_steps("column", st, ds, 3) == 3


def _sums(nt, offset=0.0, with_dry=True):
    t = np.arange(nt, dtype=float) + offset
    edge = np.stack([t, 2 * t], axis=1)
    kw = dict(w=t, imp=t, inflow=t, outflow=t, edge=edge, adiv=t, w_edge=edge)
    if with_dry:
        kw.update(dimp=t, dadiv=t, mu=t, mu_len=t)
    return BlockSums(**kw, flagged={"q": 2})


def test_block_sums_round_trip_through_plain_arrays():
    s = _sums(3)
    arrays = s.to_arrays()
    assert int(arrays["fluxfence_block_format"]) == BLOCK_FORMAT
    back = BlockSums.from_arrays(arrays)
    for name in ("w", "edge", "mu_len"):
        np.testing.assert_array_equal(getattr(back, name), getattr(s, name))
    assert back.tw is None and back.curtain is None and back.flagged == {"q": 2}


def test_concat_joins_blocks_in_time_and_adds_the_counts():
    joined = BlockSums.concat([_sums(2), _sums(3, offset=2.0)])
    np.testing.assert_array_equal(joined.w, [0, 1, 2, 3, 4])
    assert joined.edge.shape == (5, 2) and joined.flagged == {"q": 4}
    assert joined.timp is None


def test_blocks_of_an_older_format_are_refused_with_a_sentence():
    old = {"w": np.zeros(2), "imp": np.zeros(2)}  # the string-keyed dicts of format 1
    with pytest.raises(RequestError, match="another version of Fluxfence.*delete it to start afresh"):
        BlockSums.from_arrays(old, where="The folder 'run.partial'")
    with pytest.raises(TypeError):
        BlockSums(w=np.zeros(1), imp=np.zeros(1), inflow=np.zeros(1), outflow=np.zeros(1),
                  edge=np.zeros((1, 1)), adiv=np.zeros(1), w_edge=np.zeros((1, 1)), nonsense=np.zeros(1))
