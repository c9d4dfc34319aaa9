"""Many regions' stencils stacked into one sparse operator per term (used by budget.multi).

Each region's stencil (budget.stencil) acts on its own touched cells.  Moved onto the union of
all regions' cells and stacked row-wise, the boundary pieces of every region form one
interpolation matrix (pieces × union cells), and the cover and divergence weights one matrix
each (regions × union cells).  Sums over pieces that are linear in the fields (per-edge import,
∮ W dl, the dry-air and total-water imports) are folded into the interpolation once, as
matrices on the cells; only the terms that are not linear (inflow, outflow, IVT, the
atmospheric-river inflow) need the values at every piece.  A block of time steps then costs a
few sparse products, whatever the number of regions.  The formulas are those of a single
region (ledger.block_sums, closure.block_sums, attribution.block_sums), written for the
stacked operator:

- outward flux of a piece: fu·(interp Qu) + fv·(interp Qv), with fu, fv the piece's normal
  factors (budget.stencil.Boundary.normal_factors), which is what ``Stencil.bu``/``bv`` hold;
- area means: Σ cover·x / area; area-method divergence: Σ div_u·Qu + div_v·Qv;
- boundary integrals of a scalar: Σ open length · (interp x) (budget.closure.open_lengths).

The result is a `budget.blocks.BlockSums` whose arrays carry a region axis after time; per-edge
sums are padded with NaN to the largest edge count (`BlockSums.of_region` cuts one region out).
The sums add in another order than a single run's, so they agree with it to round-off;
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
    edge_sum: sp.csr_matrix  # (edge × piece): every region's edges, one after another
    edge_region_sum: sp.csr_matrix  # (region × edge): 1 for the region's edges
    # linear sums over the pieces folded into the interpolation (matrices on the cells)
    open_cells: sp.csr_matrix  # (region × cell): ∮ x dl over open pieces (closure.open_lengths), m
    edge_open_cells: sp.csr_matrix  # (edge × cell): the same per edge
    edge_bu: sp.csr_matrix  # (edge × cell): outward flux through each edge from Qu (Stencil.bu summed)
    edge_bv: sp.csr_matrix
    cover: sp.csr_matrix  # (region × cell): m2 of each cell inside the region (Stencil.cover)
    div_u: sp.csr_matrix  # (region × cell): area-method divergence weights (Stencil.div_u, div_v)
    div_v: sp.csr_matrix
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
        fu, fv = np.concatenate([f[0] for f in factors]), np.concatenate([f[1] for f in factors])
        # the linear sums over pieces, one sparse product with the interpolation: rows are
        # ∮ over open pieces per region, the same per edge, the outward flux per edge from Qu, from Qv
        nreg, (ne, npc) = len(stencils), shape_e
        piece_region = np.repeat(np.arange(nreg), npiece)
        lw = np.concatenate(opens)
        rows = np.concatenate([piece_region, nreg + piece_edge, nreg + ne + piece_edge, nreg + 2 * ne + piece_edge])
        fold = sp.csr_matrix((np.concatenate([lw, lw, fu, fv]), (rows, np.tile(np.arange(npc), 4))),
                             shape=(nreg + 3 * ne, npc)) @ interp
        fold = sp.csr_matrix(fold)
        return cls(
            cells=cells, interp=interp,
            fu=fu, fv=fv,
            region_sum=_rows([(s, np.ones(s.size)) for s in spans], shape_e[1]),
            length_sum=_rows(list(zip(spans, lengths)), shape_e[1]),
            edge_sum=edges,
            edge_region_sum=_rows([(np.arange(edge_start[k], edge_start[k + 1]), np.ones(nedge[k]))
                                   for k in range(len(stencils))], shape_e[0]),
            open_cells=fold[:nreg], edge_open_cells=fold[nreg:nreg + ne],
            edge_bu=fold[nreg + ne:nreg + 2 * ne], edge_bv=fold[nreg + 2 * ne:],
            cover=_rows([(p, st.cover) for st, p in zip(stencils, positions)], n),
            div_u=_rows([(p, st.div_u) for st, p in zip(stencils, positions)], n),
            div_v=_rows([(p, st.div_v) for st, p in zip(stencils, positions)], n),
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


class _Cells:
    """A block's cell arrays (time, cell), each transposed once into a C-ordered (cell, time)
    block, so that sparse products need no further copies: ``cells[name]``."""

    def __init__(self, arrays: dict):
        first = next(iter(arrays.values()))
        self.slot = {name: k for k, name in enumerate(arrays)}
        self.data = np.empty((len(arrays), first.shape[1], first.shape[0]))
        for k, a in enumerate(arrays.values()):
            self.data[k] = a.T

    def __getitem__(self, name) -> np.ndarray:
        return self.data[self.slot[name]]


def block_sums(op: StackedStencil, c, vertical=None, attribute=None) -> BlockSums:
    """Every region's per-time-step sums of one block's columns ``c`` (a ledger.Columns on the
    union's cells): a BlockSums with a region axis after time.

    Values at the pieces are needed where a sum is not linear (inflow, outflow, IVT, the AR
    inflow); every linear sum over pieces is folded into one matrix on the cells."""
    extra = c.extra or {}
    arrays = {"qu": c.qu, "qv": c.qv, "w": c.w}
    arrays.update({k: extra[k] for k in ("fu", "fv", "mu", "tqu", "tqv", "tw", *closure.OBSERVED_ROLES) if k in extra})
    x = _Cells(arrays)
    pu, pv = op.interp @ x["qu"], op.interp @ x["qv"]  # (piece, time)

    def area_mean(name):  # Σ cover·x / area
        return (op.cover @ x[name]).T / op.area

    def divergence(ku, kv):  # area-mean divergence, area method
        return (op.div_u @ x[ku] + op.div_v @ x[kv]).T

    def edge_import(ku, kv):  # (edge, time)
        return -(op.edge_bu @ x[ku] + op.edge_bv @ x[kv])

    flux = op.fu[:, None] * pu + op.fv[:, None] * pv  # outward, kg s-1 per piece
    inward = np.clip(-flux, 0, None)
    sums = dict(
        imp=-op.per_region(op.region_sum, flux),
        inflow=op.per_region(op.region_sum, inward),
        outflow=op.per_region(op.region_sum, np.clip(flux, 0, None)),
        edge=-op.edges(op.edge_sum, flux),
        adiv=divergence("qu", "qv"),
        w=area_mean("w"),
        w_edge=op.padded(op.edge_open_cells @ x["w"]).transpose(2, 0, 1),
    )
    # dry air, total water and the files' P and E, as closure.block_sums per region
    if "mu" in extra:
        dedge = edge_import("fu", "fv")
        sums.update(dimp=op.per_region(op.edge_region_sum, dedge), dedge=op.padded(dedge).transpose(2, 0, 1),
                    dadiv=divergence("fu", "fv"), mu=area_mean("mu"), mu_len=op.per_region(op.open_cells, x["mu"]))
    if "tw" in extra:
        sums.update(timp=op.per_region(op.edge_region_sum, edge_import("tqu", "tqv")), tadiv=divergence("tqu", "tqv"),
                    tw=area_mean("tw"), tw_len=op.per_region(op.open_cells, x["tw"]))
    for r in closure.OBSERVED_ROLES:
        if r in extra:
            sums[f"{r}_raw"] = area_mean(r)
    if attribute is not None:
        sums.update(_attribution_sums(op, attribute, pu, pv, inward))
        if attribute.layers is not None and c.levels is not None:
            sums["layer_edge"] = _layer_edges(op, vertical, attribute.layers, c.levels)
    return BlockSums(**sums, flagged=dict(c.flagged or {}))


def _attribution_sums(op: StackedStencil, attribute, pu, pv, inward) -> dict:
    """Mean boundary IVT and the atmospheric-river inflow, as attribution.boundary_sums."""
    ivt = np.sqrt(pu * pu + pv * pv)  # |Q| (np.hypot, to round-off, is slower)
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
    x = _Cells({"qu": qu_l.reshape(-1, nc), "qv": qv_l.reshape(-1, nc)})  # (cell, layer*time) each
    edge = -(op.edge_bu @ x["qu"] + op.edge_bv @ x["qv"])  # (edge, layer*time)
    return op.padded(edge.reshape(-1, nl, nt)).transpose(3, 0, 2, 1)
