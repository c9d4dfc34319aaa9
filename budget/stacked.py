"""Many regions' stencils stacked into one sparse operator per term (used by budget.multi).

Each region's stencil (budget.stencil) acts on its own touched cells.  Moved onto the union of
all regions' cells and stacked row-wise, the boundary pieces of every region form one
interpolation matrix (pieces × union cells), and the cover and divergence weights one matrix
each (regions × union cells).  A block of time steps then costs three sparse products for the
vapour terms, whatever the number of regions, and the per-region and per-edge sums are sparse
sums over the pieces.  The formulas are those of a single region (ledger.block_sums,
closure.block_sums, attribution.block_sums), written for the stacked operator:

- outward flux of a piece: fu·(interp Qu) + fv·(interp Qv), with fu, fv the piece's normal
  factors (budget.stencil.Boundary.normal_factors), which is what ``Stencil.bu``/``bv`` hold;
- area means: Σ cover·x / area; area-method divergence: Σ div_u·Qu + div_v·Qv;
- boundary integrals of a scalar: Σ open length · (interp x) (budget.closure.open_lengths).

The result is a `budget.blocks.BlockSums` whose arrays carry a region axis after time; per-edge
sums are padded with NaN to the largest edge count (`BlockSums.of_region` cuts one region out).
tests/test_multi.py checks every region against its single run.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from . import closure
from .blocks import BlockSums
from .layers import column_top, layer_fractions, layer_integrals
from .stencil import TouchedCells


def _csr(parts: list, shape) -> sp.csr_matrix:
    """CSR matrices with the same column space stacked row-wise, from (indptr, indices, data)
    triples, with plain numpy (scipy's vstack costs more than the products for 100 regions)."""
    nnz = np.cumsum([0] + [ix.size for _, ix, _ in parts])
    indptr = np.concatenate([[0]] + [ip[1:] + off for (ip, _, _), off in zip(parts, nnz[:-1])])
    return sp.csr_matrix((np.concatenate([d for _, _, d in parts]).astype(float),
                          np.concatenate([ix for _, ix, _ in parts]).astype(np.int64), indptr.astype(np.int64)), shape=shape)


def _rows(values_per_region: list, n: int) -> sp.csr_matrix:
    """One row per region from (columns, values) pairs."""
    rows = list(values_per_region)
    return _csr([(np.array([0, c.size]), c, v) for c, v in rows], (len(rows), n))


@dataclass
class StackedStencil:
    """The stencils of several regions as one operator on the union of their cells."""

    cells: TouchedCells  # the union of the touched cells
    interp: sp.csr_matrix  # (piece × cell): bilinear interpolation to every region's pieces
    fu: np.ndarray  # (piece,) outward-flux factors: flux = fu·Qu + fv·Qv at the piece
    fv: np.ndarray
    region_sum: sp.csr_matrix  # (region × piece): 1 for the region's pieces
    length_sum: sp.csr_matrix  # (region × piece): piece lengths, m
    open_sum: sp.csr_matrix  # (region × piece): open piece lengths (closure.open_lengths), m
    edge_sum: sp.csr_matrix  # (edge × piece): every region's edges, one after another
    edge_open: sp.csr_matrix  # (edge × piece): open piece lengths per edge, m
    cell_sums: sp.csr_matrix  # (3 region × cell): cover (m2 inside each region), then the
    #   area-method divergence weights of Qu, then of Qv (Stencil.cover, div_u, div_v)
    area: np.ndarray  # (region,) m2
    total_length: np.ndarray  # (region,) m
    edge_region: np.ndarray  # (edge,) region of each edge
    edge_slot: np.ndarray  # (edge,) its place among the region's edges
    nedge: np.ndarray  # (region,) edges per region
    edge_names: list  # each region's edge names
    edge_length: np.ndarray  # (edge,) m

    @property
    def nregion(self) -> int:
        return int(self.area.size)

    @classmethod
    def of(cls, stencils, cells: TouchedCells, positions) -> "StackedStencil":
        """Stack ``stencils`` whose cells sit at ``positions`` of the union ``cells``."""
        n = cells.touched.size
        interps = [sp.csr_matrix(st.interp) for st in stencils]
        interp = _csr([(m.indptr, p[m.indices], m.data) for m, p in zip(interps, positions)], (sum(m.shape[0] for m in interps), n))
        factors = [st.boundary.normal_factors() for st in stencils]
        lengths = [st.boundary.lengths() for st in stencils]
        opens = [closure.open_lengths(st) for st in stencils]
        npiece = np.array([x.size for x in lengths])
        start = np.concatenate([[0], np.cumsum(npiece)])
        spans = [np.arange(start[k], start[k + 1]) for k in range(len(stencils))]
        nedge = np.array([len(st.boundary.edge_names) for st in stencils])
        edge_start = np.concatenate([[0], np.cumsum(nedge)])
        # each piece's edge among all regions' edges (Stencil.edge_sum: one 1 per piece)
        piece_edge = np.concatenate([edge_start[k] + np.asarray(st.boundary.edge) for k, st in enumerate(stencils)])
        shape_e = (int(edge_start[-1]), int(start[-1]))
        edges = sp.csr_matrix((np.ones(shape_e[1]), (piece_edge, np.arange(shape_e[1]))), shape=shape_e)
        return cls(
            cells=cells, interp=interp,
            fu=np.concatenate([f[0] for f in factors]), fv=np.concatenate([f[1] for f in factors]),
            region_sum=_rows([(s, np.ones(s.size)) for s in spans], shape_e[1]),
            length_sum=_rows(list(zip(spans, lengths)), shape_e[1]),
            open_sum=_rows(list(zip(spans, opens)), shape_e[1]),
            edge_sum=edges,
            edge_open=sp.csr_matrix((np.concatenate(opens), (piece_edge, np.arange(shape_e[1]))), shape=shape_e),
            cell_sums=_rows([(p, getattr(st, name)) for name in ("cover", "div_u", "div_v")
                             for st, p in zip(stencils, positions)], n),  # a list: one row each
            area=np.array([float(st.area) for st in stencils]),
            total_length=np.array([x.sum() for x in lengths]),
            edge_region=np.repeat(np.arange(len(stencils)), nedge),
            edge_slot=np.concatenate([np.arange(k) for k in nedge]).astype(int),
            nedge=nedge,
            edge_names=[list(st.boundary.edge_names) for st in stencils],
            edge_length=edges @ np.concatenate(lengths),
        )

    # -- sums over pieces, cells and edges, time first ---------------------------------------
    def per_region(self, m, x: np.ndarray) -> np.ndarray:
        """(time, region) from a per-piece or per-cell array ``x`` (piece|cell, time)."""
        return np.asarray(m @ x).T

    def padded(self, per_edge: np.ndarray) -> np.ndarray:
        """(edge, ...) sums as (region, max edges, ...), NaN where a region has fewer edges."""
        out = np.full((self.nregion, int(self.nedge.max())) + per_edge.shape[1:], np.nan)
        out[self.edge_region, self.edge_slot] = per_edge
        return out

    def edges(self, m, x: np.ndarray) -> np.ndarray:
        """Per-edge sums of piece values ``x`` (piece, time): (time, region, max edges)."""
        return self.padded(np.asarray(m @ x)).transpose(2, 0, 1)


class _Products:
    """A block's cell arrays (time, cell) side by side as one C-ordered (cell, k·time) matrix,
    so that each stacked operator costs one sparse product for all of them."""

    def __init__(self, arrays: dict):
        first = next(iter(arrays.values()))
        self.nt = first.shape[0]
        self.slot = {name: k for k, name in enumerate(arrays)}
        self.cells = np.empty((first.shape[1], self.nt * len(arrays)))
        for k, a in enumerate(arrays.values()):
            self.cells[:, k * self.nt:(k + 1) * self.nt] = a.T

    def apply(self, m) -> dict:
        """``m @ x`` for every array x: (rows of m, time) each."""
        out = np.asarray(m @ self.cells)
        return {name: out[:, k * self.nt:(k + 1) * self.nt] for name, k in self.slot.items()}


def block_sums(op: StackedStencil, c, vertical=None, attribute=None) -> BlockSums:
    """Every region's per-time-step sums of one block's columns ``c`` (a ledger.Columns on the
    union's cells): a BlockSums with a region axis after time."""
    extra = c.extra or {}
    arrays = {"qu": c.qu, "qv": c.qv, "w": c.w}
    arrays.update({k: extra[k] for k in ("fu", "fv", "mu", "tqu", "tqv", "tw", *closure.OBSERVED_ROLES) if k in extra})
    prod = _Products(arrays)
    p = prod.apply(op.interp)  # values at every piece, (piece, time)
    lin = prod.apply(op.cell_sums)  # cover, div_u, div_v rows of every region, (3 region, time)
    nr = op.nregion

    def area_mean(name):  # Σ cover·x / area
        return lin[name][:nr].T / op.area

    def divergence(ku, kv):  # area-mean divergence, area method
        return (lin[ku][nr:2 * nr] + lin[kv][2 * nr:]).T

    flux = op.fu[:, None] * p["qu"] + op.fv[:, None] * p["qv"]  # outward, kg s-1 per piece
    inward = np.clip(-flux, 0, None)
    sums = dict(
        imp=-op.per_region(op.region_sum, flux),
        inflow=op.per_region(op.region_sum, inward),
        outflow=op.per_region(op.region_sum, np.clip(flux, 0, None)),
        edge=-op.edges(op.edge_sum, flux),
        adiv=divergence("qu", "qv"),
        w=area_mean("w"),
        w_edge=op.edges(op.edge_open, p["w"]),
    )

    def import_(ku, kv):
        return -op.per_region(op.region_sum, op.fu[:, None] * p[ku] + op.fv[:, None] * p[kv])

    # dry air, total water and the files' P and E, as closure.block_sums per region
    if "mu" in extra:
        dflux = op.fu[:, None] * p["fu"] + op.fv[:, None] * p["fv"]  # outward dry-air flux per piece
        sums.update(dimp=-op.per_region(op.region_sum, dflux), dedge=-op.edges(op.edge_sum, dflux),
                    dadiv=divergence("fu", "fv"), mu=area_mean("mu"), mu_len=op.per_region(op.open_sum, p["mu"]))
    if "tw" in extra:
        sums.update(timp=import_("tqu", "tqv"), tadiv=divergence("tqu", "tqv"), tw=area_mean("tw"),
                    tw_len=op.per_region(op.open_sum, p["tw"]))
    for r in closure.OBSERVED_ROLES:
        if r in extra:
            sums[f"{r}_raw"] = area_mean(r)
    if attribute is not None:
        sums.update(_attribution_sums(op, attribute, p, inward))
        if attribute.layers is not None and c.levels is not None:
            sums["layer_edge"] = _layer_edges(op, vertical, attribute.layers, c.levels)
    return BlockSums(**sums, flagged=dict(c.flagged or {}))


def _attribution_sums(op: StackedStencil, attribute, p: dict, inward) -> dict:
    """Mean boundary IVT and the atmospheric-river inflow, as attribution.boundary_sums."""
    ivt = np.sqrt(p["qu"] * p["qu"] + p["qv"] * p["qv"])  # |Q| (np.hypot, to round-off, is slower)
    ar = np.where(ivt >= attribute.ar_threshold, inward, 0.0)
    return {
        "ivt_bnd": op.per_region(op.length_sum, ivt) / op.total_length,
        "ar_in": op.per_region(op.region_sum, ar),
        "ar_edge": op.edges(op.edge_sum, ar),
    }


def _layer_edges(op: StackedStencil, vertical, layers, lv: dict) -> np.ndarray:
    """Import of each layer per edge, (time, region, layer, max edges) in kg s-1, as
    attribution.layer_sums per region (the layer integrals per cell are computed once)."""
    dp_l = np.moveaxis(lv["dp"], 1, 0)  # (level, time, cell)
    frac = np.moveaxis(layer_fractions(dp_l, column_top(vertical, lv["ps"]), lv["ps"], layers), 1, 2)
    qu_l = layer_integrals(lv["qu"], frac, level_axis=1)  # (layer, time, cell)
    qv_l = layer_integrals(lv["qv"], frac, level_axis=1)
    nl, nt, nc = qu_l.shape
    p = _Products({"qu": qu_l.reshape(-1, nc), "qv": qv_l.reshape(-1, nc)}).apply(op.interp)  # (piece, layer*time)
    edge = -np.asarray(op.edge_sum @ (op.fu[:, None] * p["qu"] + op.fv[:, None] * p["qv"]))  # (edge, layer*time)
    return op.padded(edge.reshape(-1, nl, nt)).transpose(3, 0, 2, 1)
