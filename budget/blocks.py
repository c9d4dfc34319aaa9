"""Touched-cell reads by time block, block sizing, and the block sums (also the resume format).

A budget reads only the cells its stencil touches.  Per block of time steps the touched rows
and columns are grouped into runs and each run × run slab is read with plain slices: dask
passes slices down to the file reader, so only those cells leave NetCDF/Zarr storage (index
arrays, or an ``isel`` with arrays on the dask arrays, would make dask load whole chunks).
Every gridded variable of a block is read in one ``dask.compute(scheduler="synchronous")``:
a block is one task of the block runner (budget.stream), locally or on a cluster worker, and
must not start a scheduler of its own.  tests/test_scale.py checks the reads at the storage
layer.

Block size: at most MAX_BLOCK_STEPS steps, a CHUNK_BYTES memory budget shared by one block per
core, whole dask time chunks where they fit.  It does not depend on the record length, so
memory stays flat however long the record is.

`BlockSums` is what a block hands back: every per-time-step sum the budget needs, typed.  It is
also what a resume folder keeps on disk (``to_arrays`` / ``from_arrays``, with a format
version, so a folder written by an older version is refused with a sentence, never misread).
Many regions in one pass (budget.stacked) use the same class with a region axis after time
and per-edge sums NaN-padded (``of_region`` cuts one region out); the on-disk layout is the
same, and the resume key of such a run names all its regions, so a single run's folder and a
many-region run's folder are never taken for each other.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, fields as dc_fields

import numpy as np
import xarray as xr

from .errors import RequestError

#: Bytes all blocks in flight may hold in memory together (touched cells × levels × variables
#: as float64, with the temporaries of the column integrals); one block runs per worker thread.
CHUNK_BYTES = 64 * 2**20

#: At most this many steps per block: progress stays fine-grained and threads stay busy.
MAX_BLOCK_STEPS = 256

#: Gaps narrower than this many rows or columns between touched cells are read through, so a
#: region costs few reads (common practice, no source).
GATHER_GAP = 16


# -- block sizing ----------------------------------------------------------------------------
def time_chunk(ds) -> int | None:
    """The dask chunk length along time of the first variable (None when not dask-backed)."""
    for v in ds.data_vars.values():
        ch = v.chunks
        if ch and "time" in v.dims:
            return int(max(ch[v.dims.index("time")]))  # a window may start mid-chunk
    return None


def block_steps(kind: str, st, ds, nt: int) -> int:
    """Time steps per block for ``kind`` ("levels" or "column") inputs on stencil ``st``."""
    nlev = ds.sizes.get("level", 1)
    nvar = 4 if kind == "levels" else 3
    box = len(np.unique(st.rows)) * len(np.unique(st.cols))
    temps = 3 if kind == "levels" else 2  # float64 copies and temporaries per value
    per_step = max(1, box * nlev * nvar * 8 * temps)
    # the budget is shared by the blocks in flight, one per local worker thread
    per_block = CHUNK_BYTES // max(1, os.cpu_count() or 1)
    cap = max(1, min(MAX_BLOCK_STEPS, per_block // per_step))
    tchunk = time_chunk(ds)
    if tchunk and cap >= tchunk:
        cap = (cap // tchunk) * tchunk
    return int(max(1, min(nt, cap)))


class Shifted:
    """``func`` called with block slices moved by ``offset`` steps (picklable for clusters).

    Blocks read the un-windowed fields at shifted steps: a time window sliced onto the dask
    arrays first would stop dask from passing the slab slices down to the file reader.
    """

    def __init__(self, func, offset: int):
        self.func, self.offset = func, int(offset)

    def __call__(self, ts: slice):
        return self.func(slice(ts.start + self.offset, ts.stop + self.offset))


# -- touched-cell reads ----------------------------------------------------------------------
def runs(idx: np.ndarray, gap: int) -> list:
    """(start, stop) ranges covering the sorted indices ``idx``; gaps below ``gap`` read through."""
    cut = np.flatnonzero(np.diff(idx) > gap) + 1
    lo = np.concatenate([[0], cut])
    hi = np.concatenate([cut, [idx.size]])
    return [(int(idx[a]), int(idx[b - 1]) + 1) for a, b in zip(lo, hi)]


@dataclass(frozen=True)
class Cells:
    """The touched cells of a stencil as unique rows/columns and each cell's position in them."""

    rows_u: np.ndarray
    cols_u: np.ndarray
    r_pos: np.ndarray
    c_pos: np.ndarray
    dims: tuple = ("lat", "lon")  # row and column dims (("y", "x") on projected grids)

    @classmethod
    def of(cls, st) -> "Cells":
        rows_u, r_pos = np.unique(st.rows, return_inverse=True)
        cols_u, c_pos = np.unique(st.cols, return_inverse=True)
        grid = getattr(st, "grid", None)
        return cls(rows_u, cols_u, r_pos, c_pos, tuple(getattr(grid, "dims", ("lat", "lon"))))


def gather(data, cells: Cells, tslice: slice):
    """Values of the touched cells, (time, [level,] cell) as float64.

    ``data`` is a DataArray (one array back) or a Dataset (a dict of arrays back, every
    variable read in one pass of slabs with plain slices, see the module docstring).
    """
    import dask

    one = isinstance(data, xr.DataArray)
    ds = data.to_dataset(name="_") if one else data
    rows = np.asarray(cells.rows_u)[cells.r_pos]
    cols = np.asarray(cells.cols_u)[cells.c_pos]
    rr, cr = runs(np.asarray(cells.rows_u), GATHER_GAP), runs(np.asarray(cells.cols_u), GATHER_GAP)
    ri = np.searchsorted([a for a, _ in rr], rows, side="right") - 1
    ci = np.searchsorted([a for a, _ in cr], cols, side="right") - 1
    ydim, xdim = cells.dims
    slabs = [ds.isel({"time": tslice, ydim: slice(r0, r1), xdim: slice(c0, c1)}) for r0, r1 in rr for c0, c1 in cr]
    slabs = dask.compute(*slabs, scheduler="synchronous")
    # each slab's cells as flat positions in the slab (np.take on a flat slab is several times
    # faster than indexing two axes with index arrays)
    picks = []
    for a, (r0, r1) in enumerate(rr):
        for b, (c0, c1) in enumerate(cr):
            sel = np.flatnonzero((ri == a) & (ci == b))
            if sel.size:
                picks.append((a * len(cr) + b, sel, (rows[sel] - r0) * (c1 - c0) + (cols[sel] - c0)))
    out = {}
    for name in ds.data_vars:
        lead = slabs[0][name].shape[:-2]
        if len(picks) == 1:  # one slab holds every cell, in order
            k, _, flat = picks[0]
            vals = np.asarray(slabs[k][name].values)
            out[name] = np.take(vals.reshape(lead + (-1,)), flat, axis=-1).astype(np.float64, copy=False)
            continue
        arr = np.empty(lead + (rows.size,), np.float64)
        for k, sel, flat in picks:
            vals = np.asarray(slabs[k][name].values)
            arr[..., sel] = np.take(vals.reshape(lead + (-1,)), flat, axis=-1)
        out[name] = arr
    return out["_"] if one else out


class Gatherer:
    """``g(name)``: the touched cells of one variable for one block; the first call reads
    every gridded variable of the dataset at once (one pass over the files per block)."""

    def __init__(self, ds, cells: Cells, tslice: slice):
        self.ds, self.cells, self.tslice = ds, cells, tslice
        self.cache = None

    def __call__(self, name):
        if self.cache is None:
            names = [n for n, v in self.ds.data_vars.items() if {"time", *self.cells.dims} <= set(v.dims)]
            self.cache = gather(self.ds[names], self.cells, self.tslice) if names else {}
        if name in self.cache:
            return self.cache.pop(name)  # handed over once: the block owns it now
        return gather(self.ds[name], self.cells, self.tslice)


# -- block sums ------------------------------------------------------------------------------
#: Version of the BlockSums layout; a resume folder of another version is refused.
BLOCK_FORMAT = 4

_VERSION_KEY = "fluxfence_block_format"

#: BlockSums fields whose last axis is the region's edges (a new per-edge sum goes here too).
EDGE_FIELDS = ("edge", "w_edge", "dedge", "ar_edge", "layer_edge")


@dataclass
class BlockSums:
    """Every per-time-step sum of one block (or, after `concat`, of the whole record).

    Arrays have time first.  Optional sums are None when the inputs do not allow them.
    """

    # the vapour budget (budget.ledger)
    w: np.ndarray  # area-mean precipitable water, kg m-2
    imp: np.ndarray  # net vapour import, kg s-1
    inflow: np.ndarray  # kg s-1
    outflow: np.ndarray  # kg s-1
    edge: np.ndarray  # import per edge, kg s-1 (time, edge)
    adiv: np.ndarray  # area-mean divergence, area method, kg m-2 s-1
    w_edge: np.ndarray  # ∮ W dl per edge over open pieces, kg s-1 per m s-1 (time, edge)
    # dry air (budget.closure, level inputs)
    dimp: np.ndarray | None = None  # dry-air import, kg s-1
    dadiv: np.ndarray | None = None  # dry-air divergence, area method, kg m-2 s-1
    mu: np.ndarray | None = None  # area-mean dry-air column mass, kg m-2
    mu_len: np.ndarray | None = None  # ∮ μ dl over open pieces, kg m-1
    dedge: np.ndarray | None = None  # dry-air import per edge, kg s-1 (time, edge)
    ddensity: np.ndarray | None = None  # dry-air import per unit length, kg m-1 s-1 (time, piece; profiles)
    dcurtain: np.ndarray | None = None  # the same per unit pressure, kg m-1 s-1 Pa-1 (time, level, piece)
    # total water (budget.closure, inputs with condensate)
    timp: np.ndarray | None = None
    tadiv: np.ndarray | None = None
    tw: np.ndarray | None = None
    tw_len: np.ndarray | None = None
    # area means of the files' precipitation and evaporation as read (budget.observed)
    precip_raw: np.ndarray | None = None
    evap_raw: np.ndarray | None = None
    # boundary profiles (profiles=True)
    density: np.ndarray | None = None  # import per unit length, kg m-1 s-1 (time, piece)
    curtain: np.ndarray | None = None  # kg m-1 s-1 Pa-1 (time, level, piece)
    curtain_dp: np.ndarray | None = None  # Pa (time, level, piece)
    # where the water comes in (budget.attribution)
    ivt_bnd: np.ndarray | None = None  # length-weighted mean IVT along the boundary, kg m-1 s-1
    ar_in: np.ndarray | None = None  # inflow where IVT meets the AR threshold, kg s-1
    ar_edge: np.ndarray | None = None  # the same per edge (time, edge)
    layer_edge: np.ndarray | None = None  # import per layer and edge, kg s-1 (time, layer, edge)
    # values accepted but flagged (budget.plausible), per input variable
    flagged: dict = field(default_factory=dict)

    def to_arrays(self) -> dict:
        """Plain arrays for an ``.npz`` file, with the format version."""
        out = {_VERSION_KEY: np.asarray(BLOCK_FORMAT)}
        for f in dc_fields(self):
            value = getattr(self, f.name)
            if f.name == "flagged":
                out.update({f"flagged:{k}": np.asarray(int(n)) for k, n in value.items()})
            elif value is not None:
                out[f.name] = np.asarray(value)
        return out

    @classmethod
    def from_arrays(cls, arrays: dict, where: str = "the resume folder") -> "BlockSums":
        """Back from `to_arrays`; a block of another format is a RequestError."""
        version = int(arrays[_VERSION_KEY]) if _VERSION_KEY in arrays else 1
        if version != BLOCK_FORMAT:
            raise RequestError(
                f"{where} holds finished steps written by another version of Fluxfence (block format "
                f"{version}, this one reads {BLOCK_FORMAT}); delete it to start afresh."
            )
        names = {f.name for f in dc_fields(cls)} - {"flagged"}
        flagged = {k.split(":", 1)[1]: int(v) for k, v in arrays.items() if k.startswith("flagged:")}
        return cls(**{k: v for k, v in arrays.items() if k in names}, flagged=flagged)

    def of_region(self, k: int, nedge: int) -> "BlockSums":
        """Region ``k`` of a stacked BlockSums (budget.stacked: a region axis after time, per-edge
        sums NaN-padded on the last axis) as one region's BlockSums, with its ``nedge`` edges."""
        kw = {}
        for f in dc_fields(self):
            value = getattr(self, f.name)
            if f.name == "flagged" or value is None:
                continue
            value = value[:, k]
            kw[f.name] = value[..., :nedge] if f.name in EDGE_FIELDS else value
        return type(self)(**kw, flagged=dict(self.flagged))

    @classmethod
    def concat(cls, parts: list) -> "BlockSums":
        """Blocks in time order joined into one record."""
        kw = {}
        for f in dc_fields(cls):
            if f.name == "flagged":
                continue
            vals = [getattr(p, f.name) for p in parts]
            kw[f.name] = None if vals[0] is None else np.concatenate(vals, axis=0)
        flagged: dict = {}
        for p in parts:
            for k, n in p.flagged.items():
                flagged[k] = flagged.get(k, 0) + int(n)
        return cls(**kw, flagged=flagged)
