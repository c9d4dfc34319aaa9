"""Mean-flow and transient-eddy parts of a period's vapour import.

Over a period, the time mean of qV splits exactly into the flux of the mean state and the
mean of the departures: mean(qV) = q̄ V̄ + mean(q′V′) (CHECKS.md, "mean and transient-eddy
parts"). On pressure levels the layer thickness varies with the surface pressure, so the means
are mass-weighted per layer, q̄_k = Σ_t q Δp / Σ_t Δp (and so for u, v), and the mean-flow
column flux is (1/g) Σ_k q̄_k V̄_k Δp̄_k with Δp̄_k the mean thickness. The transient-eddy part
is the total mean flux minus the mean-flow part; with constant thickness it is exactly
(1/g) Σ_k mean(q′V′) Δp_k.

Why it matters: sampling daily instead of 6-hourly misses much of the transient-eddy
convergence (Seager and Henderson 2013, J. Climate 26, 7876-7901); this split shows how much
of a region's import the eddies carry in the files at hand.

The same stencil as the budget turns both parts into boundary imports, so the three numbers
(total, mean flow, transient eddies) add up exactly.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from . import plausible
from .blocks import Cells, Gatherer, block_steps
from .constants import STANDARD_GRAVITY
from .errors import RequestError
from .ledger import as_fields
from .stencil import Grid, compile_stencil
from .timeaxis import time_window, window_offset

PARTS = ("total", "mean_flow", "transient_eddy")


def decompose(fields, region, start=None, end=None, stencil=None) -> xr.Dataset:
    """Period-mean vapour import of ``region`` split into mean-flow and transient-eddy parts."""
    fields = as_fields(fields)
    if fields.kind != "levels":
        raise RequestError(
            "The mean-flow / transient-eddy split needs winds and humidity on levels (u, v, q, ps); "
            "these fields are pre-integrated columns, whose time means cannot be split."
        )
    st = stencil if stencil is not None else compile_stencil(region, Grid.from_fields(fields))
    ds = time_window(fields.ds, start, end)
    nt = ds.sizes["time"]
    if nt < 2:
        raise RequestError("The transient-eddy split needs at least two time steps; widen the period.")
    sums = _layer_sums(fields, st, window_offset(fields.ds["time"].values, ds["time"].values), nt,
                       block_steps(fields.kind, st, ds, nt))
    return _split(sums, st, ds["time"].values, nt)


def _layer_sums(fields, st, offset: int, nt: int, chunk: int) -> dict:
    """Time sums of Δp, qΔp, uΔp, vΔp per layer and cell, and of the column qVΔp per cell.

    Blocks read the un-windowed fields at shifted steps (as the budget does, budget.blocks),
    and every value that counts is checked (budget.plausible).
    """
    cells = Cells.of(st)
    full = fields.ds[["u", "v", "q", "ps"]]
    sums = None
    for t0 in range(offset, offset + nt, chunk):
        ts = slice(t0, min(offset + nt, t0 + chunk))
        g = Gatherer(full, cells, ts)
        u, v, q, ps = g("u"), g("v"), g("q"), g("ps")
        chk = plausible.Checker(plausible.Where(fields, st, t0))
        plausible.check_surface_pressure(chk, ps)
        dp = np.moveaxis(fields.vertical.thickness(ps), 0, 1)  # (time, level, cell)
        air = dp > 0
        plausible.check_levels(chk, u, v, q, air)
        u, v, q = (np.where(air, x, 0.0) for x in (u, v, q))
        part = {
            "dp": dp.sum(0),
            "qdp": (q * dp).sum(0),
            "udp": (u * dp).sum(0),
            "vdp": (v * dp).sum(0),
            "qudp": (q * u * dp).sum((0, 1)),
            "qvdp": (q * v * dp).sum((0, 1)),
        }
        sums = part if sums is None else {k: sums[k] + part[k] for k in sums}
    return sums


def _split(sums: dict, st, t, nt: int) -> xr.Dataset:
    """Total, mean-flow and transient-eddy imports from the layer sums."""
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = {k: np.where(sums["dp"] > 0, sums[k] / sums["dp"], 0.0) for k in ("qdp", "udp", "vdp")}
    dp_mean = sums["dp"] / nt
    g0 = STANDARD_GRAVITY
    total = (sums["qudp"] / nt / g0, sums["qvdp"] / nt / g0)
    mflow = ((mean["qdp"] * mean["udp"] * dp_mean).sum(0) / g0, (mean["qdp"] * mean["vdp"] * dp_mean).sum(0) / g0)
    eddy = (total[0] - mflow[0], total[1] - mflow[1])

    imports, edges = [], []
    for qu, qv in (total, mflow, eddy):
        flux = st.bu @ qu + st.bv @ qv  # outward flux per piece
        imports.append(-flux.sum())
        edges.append(-(st.edge_sum @ flux))
    imports = np.asarray(imports)
    return xr.Dataset(
        {
            "vapour_import": (("part",), imports, {"units": "kg s-1", "long_name": "period-mean water-vapour import"}),
            "vapour_convergence": (
                ("part",), imports / st.area, {"units": "kg m-2 s-1", "long_name": "period-mean area-mean vapour-flux convergence"}
            ),
            "edge_import": (("part", "edge"), np.asarray(edges), {"units": "kg s-1", "long_name": "period-mean import through each edge"}),
        },
        coords={"part": ("part", list(PARTS)), "edge": ("edge", list(st.boundary.edge_names))},
        attrs={
            "period_start": np.datetime_as_string(t[0], unit="s") + "Z",
            "period_end": np.datetime_as_string(t[-1], unit="s") + "Z",
            "time_steps": int(nt),
            "region_area_m2": float(st.area),
            "method": "mass-weighted layer means; transient eddy = total mean flux minus the mean-state flux",
            "note": "daily sampling misses much of the transient-eddy part (Seager and Henderson 2013)",
        },
    )
