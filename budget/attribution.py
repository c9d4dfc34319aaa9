"""Where the water comes in: by layer, by edge, and where atmospheric rivers cross.

Per time step and computed from what the boundary stencil already interpolates (no extra
read):

- the import of each layer of the column (budget.layers), in total and per edge, and the
  layer's convergence (its import over the area: the boundary method for that layer);
- the mean IVT along the boundary, |Q| interpolated to the boundary pieces, length-weighted;
- the atmospheric-river inflow: the inflow through the boundary pieces where IVT meets a
  threshold, common choice 250 kg m-1 s-1 (Rutz, Steenburgh and Ralph 2014, Mon. Wea. Rev.
  142; Ralph et al. 2019, BAMS 100), in total and per edge.  Its share of the inflow over a
  period is Σ ar_inflow Δt / Σ inflow Δt.

Layer terms use the files' winds (no mass correction; the correction is one barotropic speed
for the whole column and would add W_L·c to each layer in proportion to its water).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from .layers import LayerSet, column_top, layer_fractions, layer_integrals

#: Atmospheric-river conditions: IVT ≥ 250 kg m-1 s-1 (Rutz, Steenburgh and Ralph 2014).
AR_IVT_THRESHOLD = 250.0


@dataclass(frozen=True)
class AttributionOptions:
    """What to attribute: layers (None: none) and the AR threshold (kg m-1 s-1)."""

    layers: LayerSet | None = None
    ar_threshold: float = AR_IVT_THRESHOLD


def boundary_sums(st, qu: np.ndarray, qv: np.ndarray, ar_threshold: float) -> dict:
    """Mean boundary IVT and AR inflow (total and per edge) for column fluxes (time, cell)."""
    pu = (st.interp @ qu.T).T  # (time, piece), kg m-1 s-1
    pv = (st.interp @ qv.T).T
    ivt = np.hypot(pu, pv)
    length = st.piece_length
    flux = (st.bu @ qu.T + st.bv @ qv.T).T  # outward, kg s-1 per piece
    inward = np.clip(-flux, 0.0, None)
    ar = np.where(ivt >= ar_threshold, inward, 0.0)
    return {
        "ivt_bnd": ivt @ length / length.sum(),
        "ar_in": ar.sum(axis=1),
        "ar_edge": (st.edge_sum @ ar.T).T,
    }


def layer_sums(st, vertical, layers: LayerSet, qu_lev, qv_lev, dp, ps) -> dict:
    """Import of each layer per edge, (time, layer, edge) in kg s-1, from the per-level
    fluxes q·u and q·v (time, level, cell), the thickness dp (time, level, cell) and ps
    (time, cell)."""
    dp_l = np.moveaxis(dp, 1, 0)  # (level, time, cell)
    frac = layer_fractions(dp_l, column_top(vertical, ps), ps, layers)  # (layer, level, time, cell)
    frac = np.moveaxis(frac, 1, 2)  # (layer, time, level, cell)
    qu_l = layer_integrals(qu_lev, frac, level_axis=1)  # (layer, time, cell)
    qv_l = layer_integrals(qv_lev, frac, level_axis=1)
    nl, nt, nc = qu_l.shape
    flux = st.bu @ qu_l.reshape(-1, nc).T + st.bv @ qv_l.reshape(-1, nc).T  # (piece, layer*time)
    edge = -(st.edge_sum @ flux)  # (edge, layer*time)
    return {"layer_edge": edge.T.reshape(nl, nt, -1).transpose(1, 0, 2)}


def block_sums(st, vertical, options: AttributionOptions, qu, qv, levels: dict | None) -> dict:
    """Every attribution sum of one block: boundary IVT and AR inflow from the column fluxes
    (time, cell); layer imports when layers are asked for and ``levels`` holds the per-level
    fluxes ``qu``, ``qv``, the thickness ``dp`` and ``ps``."""
    out = boundary_sums(st, qu, qv, options.ar_threshold)
    if options.layers is not None and levels is not None:
        out.update(layer_sums(st, vertical, options.layers, levels["qu"], levels["qv"], levels["dp"], levels["ps"]))
    return out


def variables(sums, st, options: AttributionOptions) -> tuple[dict, dict]:
    """Dataset variables (SI, attributes from the term catalogue budget.terms) and coordinates
    from the concatenated block sums (budget.blocks.BlockSums: ivt_bnd, ar_in, ar_edge,
    layer_edge)."""
    from . import terms

    out, coords = {}, {}
    thr = float(options.ar_threshold)
    if sums.ivt_bnd is not None:
        ar = f"inflow through boundary pieces with IVT >= {thr:g} kg m-1 s-1 (Rutz, Steenburgh and Ralph 2014); files' winds"
        out["boundary_mean_ivt"] = xr.Variable(("time",), sums.ivt_bnd, terms.attrs("boundary_mean_ivt"))
        out["ar_inflow"] = xr.Variable(("time",), sums.ar_in, {**terms.attrs("ar_inflow", ar), "ar_ivt_threshold": f"{thr:g} kg m-1 s-1"})
        out["ar_edge_inflow"] = xr.Variable(("time", "edge"), sums.ar_edge, {**terms.attrs("ar_edge_inflow", ar), "ar_ivt_threshold": f"{thr:g} kg m-1 s-1"})
    if sums.layer_edge is not None and options.layers is not None:
        lay = options.layers
        coords["layer"] = ("layer", lay.names(), {
            "long_name": "layer of the air column, surface first",
            "layer_bounds": ",".join(f"{b:g}" for b in lay.bounds) + (" hPa" if lay.kind == "pressure" else " sigma")})
        le = sums.layer_edge
        out["layer_edge_import"] = xr.Variable(("time", "layer", "edge"), le, terms.attrs("layer_edge_import"))
        out["layer_import"] = xr.Variable(("time", "layer"), le.sum(axis=2), terms.attrs("layer_import"))
        out["layer_convergence"] = xr.Variable(("time", "layer"), le.sum(axis=2) / st.area, terms.attrs("layer_convergence"))
    return out, coords


def ar_share(ds: xr.Dataset, weights=None) -> float:
    """The fraction of the period's inflow that crossed where IVT met the threshold."""
    w = np.ones(ds.sizes["time"]) if weights is None else np.asarray(weights, float)
    if not np.any(w > 0):  # a single step covers no time: its share is that step's own
        w = np.ones(ds.sizes["time"])
    fin = float(np.nansum(ds["inflow"].values * w))
    return float(np.nansum(ds["ar_inflow"].values * w) / fin) if fin > 0 else float("nan")
