"""Many regions in one pass over the data: 100 sub-basins cost little more than one.

Each region compiles to its own stencil (budget.stencil); the stencils are stacked into one
sparse operator per term on the union of the cells they touch (budget.stacked).  Per block of
time steps the union is read once and its columns integrated once (budget.ledger.read_columns),
and every region's sums come from a few sparse products.  After the last block one vectorised
assembly builds the Dataset with a ``region`` dimension: the vapour terms for all regions at
once; the closure (mass correction, observed P and E) and the attribution variables per region
through the single-region code on the region's slice of the sums.  Every region's numbers are
those of a single run to round-off (tests/test_multi.py), nested and overlapping regions
included.

Results: one Dataset with a ``region`` dimension (``compute_many``; a resume folder keeps
finished blocks like a single run's), or the per-region budgets (``compute_each`` =
``unstack``) for writers that want one file per region; ``to_long_frame`` gives the
long-format table (``time``, ``region``, then the CSV columns of budget.export).
"""

from __future__ import annotations

import json
from dataclasses import fields as dc_fields
from functools import partial

import numpy as np
import pandas as pd
import xarray as xr

from . import attribution, ledger, stacked
from . import closure as closure_mod
from .blocks import BlockSums, Shifted, block_steps
from .errors import FluxfenceError, RequestError
from .options import BudgetOptions, ClosureOptions, METHODS
from .stacked import StackedStencil
from .stencil import Grid, TouchedCells, compile_stencil
from .stream import run_blocks
from .timeaxis import time_window, window_offset


def union_of(stencils) -> tuple[TouchedCells, list[np.ndarray]]:
    """The union of the stencils' touched cells and each stencil's positions in it."""
    touched = np.unique(np.concatenate([st.touched for st in stencils]))
    return TouchedCells(stencils[0].grid, touched), [np.searchsorted(touched, st.touched) for st in stencils]


def _stacked_block(fields, op: StackedStencil, ds, attribute, tslice: slice) -> BlockSums:
    """One block: read the union once, every region's sums from the stacked operator."""
    c = ledger.read_columns(fields, op.cells, ds, tslice, profiles=False, keep_levels=attribute.layers is not None)
    return stacked.block_sums(op, c, fields.vertical, attribute)


def compile_all(fields, named_regions, labels=None) -> list:
    """A stencil for each (id, region); a region that fails is named in the sentence (by its
    label, default "Region 'id'")."""
    grid = Grid.from_fields(fields)
    out = []
    for k, (rid, region) in enumerate(named_regions):
        try:
            out.append(compile_stencil(region, grid))
        except FluxfenceError as exc:
            label = labels[k] if labels else f"Region '{rid}'"
            raise type(exc)(f"{label}: {exc}") from None
    return out


def compute_many(fields, named_regions, method: str = "boundary", start=None, end=None, progress=None,
                 scheduler=None, closure: ClosureOptions | None = None, stencils=None, *,
                 options: BudgetOptions | None = None, resume=None, keep_resume: bool = False) -> xr.Dataset:
    """The budgets of every (id, region) pair from one pass over the data: one Dataset with a
    ``region`` dimension (see `assemble`).

    The science goes in ``options`` (or the keywords ``method``, ``start``, ``end``,
    ``closure``); ``resume`` is a folder keeping finished blocks (budget.stream), kept after
    the run when ``keep_resume``. Profiles are not computed for many regions.
    """
    named_regions = list(named_regions)
    if not named_regions:
        raise RequestError("No regions to compute; give a region file with at least one valid feature.")
    if options is None:
        options = BudgetOptions(method=method, start=start, end=end, closure=closure or ClosureOptions())
    if options.method not in METHODS:
        raise RequestError(f"Unknown method {options.method!r}; choose 'boundary' or 'area'.")
    fields = ledger.as_fields(fields)
    if options.attribution.layers is not None and fields.kind != "levels":
        raise RequestError("Import by layer needs winds and humidity on levels (u, v, q, ps); these fields are "
                           "pre-integrated columns, so leave out --layers or give level fields.")
    stencils = stencils if stencils is not None else compile_all(fields, named_regions)
    union, positions = union_of(stencils)
    op = StackedStencil.of(stencils, union, positions)
    ds = time_window(fields.ds, options.start, options.end)
    times = ds["time"].values
    chunk = block_steps(fields.kind, union, ds, times.size)
    func = partial(_stacked_block, fields, op, fields.ds, options.attribution)
    key = _job_key(fields, ds, named_regions, op, chunk, options.attribution) if resume is not None else ""
    parts = run_blocks(Shifted(func, window_offset(fields.ds["time"].values, times)), times.size, chunk,
                       progress=progress, scheduler=scheduler, store=resume, key=key, keep_store=keep_resume)
    return assemble(fields, named_regions, stencils, op, times, BlockSums.concat(parts), options)


def _job_key(fields, ds, named_regions, op: StackedStencil, chunk: int, attribute) -> str:
    """A name of a many-region job for the resume folder: inputs, every region, window, options."""
    from dask.base import tokenize

    geo = [(str(rid), r.to_geojson() if hasattr(r, "to_geojson") else None) for rid, r in named_regions]
    return tokenize("many-regions", ledger.source_token(fields, ds), json.dumps(geo, sort_keys=True, default=str),
                    int(chunk), repr(attribute), op.cells.touched, op.interp.data, op.cover.data, op.edge_bu.data, op.area)


def compute_each(fields, named_regions, **kw) -> list[xr.Dataset]:
    """The budget of every (id, region) pair, from one pass over the data; a list of Datasets.

    Each Dataset is what ``budget.compute(fields, region, ...)`` returns for that region (to
    round-off); keywords as ``compute_many``.
    """
    return unstack(compute_many(fields, named_regions, **kw))


#: Per-region attributes of a single budget that become ``region`` coordinates when stacked.
REGION_COORDS = ("region_area_m2", "region_geojson", "warnings", "closure_summary")


def _stack_variables(per_region: list, nt: int, max_edge: int) -> xr.Variable:
    """One region's Variables (time first) as one with a region axis after time; a trailing
    ``edge`` axis is NaN-padded to ``max_edge``."""
    v0 = next(v for v in per_region if v is not None)
    shape = [nt, len(per_region)] + [max_edge if d == "edge" else n for d, n in zip(v0.dims[1:], v0.shape[1:])]
    out = np.full(shape, np.nan)
    for k, v in enumerate(per_region):
        if v is not None:
            out[(slice(None), k) + tuple(slice(0, n) for n in v.shape[1:])] = v.values
    return xr.Variable(("time", "region") + v0.dims[1:], out, dict(v0.attrs))


def _restack_vapour(parts: list, template: closure_mod.VapourTerms) -> closure_mod.VapourTerms:
    """Per-region vapour terms (after each region's closure) back into (time, region[, edge])."""
    out = {}
    for f in dc_fields(template):
        full = np.full(np.shape(getattr(template, f.name)), np.nan)
        for k, v in enumerate(parts):
            x = getattr(v, f.name)
            full[(slice(None), k) + tuple(slice(0, n) for n in x.shape[1:])] = x
        out[f.name] = full
    return closure_mod.VapourTerms(**out)


def _vapour_of(v: closure_mod.VapourTerms, k: int, nedge: int) -> closure_mod.VapourTerms:
    return closure_mod.VapourTerms(**{f.name: getattr(v, f.name)[:, k, :nedge] if f.name == "edge" else getattr(v, f.name)[:, k]
                                      for f in dc_fields(v)})


def assemble(fields, named_regions, stencils, op: StackedStencil, times, sums: BlockSums,
             options: BudgetOptions) -> xr.Dataset:
    """The Dataset of every region from the stacked block sums: series (region, time), edges
    (region, time, edge) NaN-padded with ``edge_name``/``edge_length``/``edge_count`` per region,
    per-region attributes as coordinates (REGION_COORDS), shared ones as attributes.

    The vapour terms are computed for all regions at once; each region's closure (the mass
    correction, observed P and E) and attribution variables come from the single-region code
    (budget.closure, budget.attribution) on its slice of the sums."""
    method = options.method
    nt, max_edge = times.size, int(op.nedge.max())
    vap = ledger.vapour_terms(sums, times, op.area, method)
    closed, attributed, coords_a, warns = [], [], {}, []
    for k, st in enumerate(stencils):
        one = sums.of_region(k, int(op.nedge[k]))
        c = closure_mod.close(fields, st, times, one, _vapour_of(vap, k, int(op.nedge[k])), method, options.closure)
        closed.append(c)
        avars, coords_a = attribution.variables(one, st, options.attribution)
        attributed.append(avars)
        warns.append(json.dumps(ledger.budget_warnings(fields, st, times, one, c)))
    dv = ledger.vapour_variables(sums, _restack_vapour([c.vapour for c in closed], vap), method, dims=("time", "region"))
    for group in ([c.variables for c in closed], attributed):
        for name in dict.fromkeys(n for g in group for n in g):
            dv[name] = _stack_variables([g.get(name) for g in group], nt, max_edge)
    names = np.full((len(stencils), max_edge), "", dtype=object)
    for k, en in enumerate(op.edge_names):
        names[k, : len(en)] = en
    lengths = op.padded(op.edge_length)
    regions = [ledger.region_attrs(r, st) for (_, r), st in zip(named_regions, stencils)]
    coords = {
        "time": ("time", times, {"long_name": "time", "standard_name": "time"}),
        "region": ("region", [str(rid) for rid, _ in named_regions]),
        "edge": ("edge", np.arange(max_edge)),
        "edge_name": (("region", "edge"), names),
        "edge_length": (("region", "edge"), lengths, {"units": "m", "long_name": "length of each edge"}),
        "edge_count": ("region", op.nedge.astype(int), {"long_name": "number of edges of each region"}),
        "region_area_m2": ("region", op.area, {"units": "m2", "long_name": "area of each region"}),
        "region_geojson": ("region", [r["region_geojson"] for r in regions]),
        "warnings": ("region", warns),
        "closure_summary": ("region", [c.attrs.get("closure_summary", "") for c in closed]),
        **coords_a,
    }
    out = xr.Dataset(dv, coords=coords).transpose("region", "time", ...)
    out.attrs.update(ledger.shared_attrs(fields, method, sums))
    out.attrs.update({k: v for k, v in closed[0].attrs.items() if k != "closure_summary"})
    out.attrs["title"] = f"Fluxfence water-vapour budgets of {len(stencils)} regions"
    ledger.mark_correction(out, closed[0].correction.sentence)
    return out


def unstack(ds: xr.Dataset) -> list[xr.Dataset]:
    """A stacked budget (``compute_many``) as one Dataset per region, each as ``budget.compute``
    returns it: its own edges, per-region coordinates back as attributes."""
    out = []
    for k, rid in enumerate(ds["region"].values):
        n = int(ds["edge_count"].values[k])
        b = ds.isel(region=k, edge=slice(0, n))
        names = np.asarray(b["edge_name"].values, dtype=object)
        attrs = dict(ds.attrs)
        attrs.update({c: b[c].item() for c in REGION_COORDS})
        attrs["region_area_m2"] = float(attrs["region_area_m2"])
        attrs["region_name"] = str(rid)
        attrs["title"] = f"Fluxfence water-vapour budget of {rid}"
        b = b.drop_vars(["region", "edge_name", "edge_count", *REGION_COORDS]).assign_coords(edge=names)
        b.attrs = attrs
        out.append(b)
    return out


def to_long_frame(ds: xr.Dataset) -> pd.DataFrame:
    """One long table of a stacked budget: ``time``, ``region``, then the CSV columns of
    budget.export (the same values as ``export.to_frame`` of each region), region by region."""
    from . import terms

    nreg, nt = ds.sizes["region"], ds.sizes["time"]
    area = ds["region_area_m2"].values[:, None]
    stamps = [np.datetime_as_string(t, unit="s") + "Z" for t in ds["time"].values]
    cols = {"time": stamps * nreg, "region": np.repeat([str(r) for r in ds["region"].values], nt)}
    for col, term in terms.csv_columns():
        if term.name not in ds:
            continue
        if "layer" in term.dims:  # one column per layer, as budget.export
            for lay in ds["layer"].values:
                values = ds[term.name].sel(layer=lay).transpose("region", "time").values
                cols[col.name.format(layer=lay)] = terms.to_display(term, values, col.unit, area).ravel()
        else:
            values = ds[term.name].transpose("region", "time").values
            cols[col.name] = terms.to_display(term, values, col.unit, area).ravel()
    return pd.DataFrame(cols)


def summary_frame(ds: xr.Dataset) -> pd.DataFrame:
    """One row per region of a stacked budget: area, first and last time, steps, and the
    period mean of each summary column of the term catalogue (``mean_<column>``)."""
    from . import terms

    df = to_long_frame(ds)
    nt = ds.sizes["time"]
    out = pd.DataFrame({
        "region": [str(r) for r in ds["region"].values],
        "area_km2": ds["region_area_m2"].values / 1e6,
        "first_time": df["time"].iloc[0], "last_time": df["time"].iloc[nt - 1], "time_steps": nt,
    })
    for col, _ in terms.summary_columns():
        if col.name in df:  # ids need not be unique: take each region's rows by position
            out[f"mean_{col.name}"] = pd.DataFrame(df[col.name].to_numpy().reshape(-1, nt).T).mean().values
    out["mass_correction"] = ds.attrs.get("mass_correction", "")
    return out


def warnings_of(ds: xr.Dataset) -> list[str]:
    """Every region's warnings, each prefixed with the region's id."""
    out = []
    for rid, text in zip(ds["region"].values, ds["warnings"].values):
        out += [f"{rid}: {w}" for w in json.loads(str(text) or "[]")]
    return out
