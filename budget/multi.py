"""Many regions in one pass over the data: 30 sub-basins cost one read of the record.

Each region compiles to its own stencil (budget.stencil); the union of the cells they touch is
read once per block of time steps and its columns integrated once (budget.ledger.read_columns);
each region then takes its own cells out of the union (an exact selection) and applies its own
stencil (budget.ledger.block_sums). So every region's numbers are exactly those of a single
run, nested and overlapping regions included, while the files are read once.

Results: one Dataset with a ``region`` dimension (``compute_many``), or the per-region
budgets (``compute_each``) for writers that want one file per region; ``to_long_frame`` gives
the long-format table (``time``, ``region``, then the CSV columns of budget.export).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd
import xarray as xr

from . import ledger
from .blocks import BlockSums, Shifted, block_steps
from .errors import FluxfenceError, RequestError
from .options import BudgetOptions, ClosureOptions, METHODS
from .stencil import Grid, compile_stencil
from .stream import run_blocks
from .timeaxis import time_window, window_offset


@dataclass(frozen=True)
class CellUnion:
    """The union of the cells several stencils touch, on their common grid (sorted flat indices)."""

    grid: Grid
    touched: np.ndarray

    @property
    def rows(self):
        return self.touched // self.grid.shape[1]

    @property
    def cols(self):
        return self.touched % self.grid.shape[1]


def union_of(stencils) -> tuple[CellUnion, list[np.ndarray]]:
    """The union of the stencils' touched cells and each stencil's positions in it."""
    touched = np.unique(np.concatenate([st.touched for st in stencils]))
    return CellUnion(stencils[0].grid, touched), [np.searchsorted(touched, st.touched) for st in stencils]


def restrict(columns: ledger.Columns, pos: np.ndarray, ncell: int) -> ledger.Columns:
    """The union's column values at one region's cells: every per-cell array (last axis ``ncell``)
    indexed by ``pos``, other entries kept."""

    def take(x):
        if isinstance(x, np.ndarray) and x.ndim and x.shape[-1] == ncell:
            return x[..., pos]
        if isinstance(x, dict):
            return {k: take(v) for k, v in x.items()}
        return x

    return ledger.Columns(**{k: take(getattr(columns, k)) for k in columns.__dataclass_fields__})


def _many_block(fields, union: CellUnion, stencils, positions, ds, attribute, tslice: slice) -> list[BlockSums]:
    """One block: read the union once, then every region's sums from its own cells."""
    c = ledger.read_columns(fields, union, ds, tslice, profiles=False, keep_levels=attribute.layers is not None)
    n = union.touched.size
    return [ledger.block_sums(fields, st, restrict(c, pos, n), attribute=attribute) for st, pos in zip(stencils, positions)]


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


def compute_each(fields, named_regions, method: str = "boundary", start=None, end=None, progress=None,
                 scheduler=None, closure: ClosureOptions | None = None, stencils=None) -> list[xr.Dataset]:
    """The budget of every (id, region) pair, from one pass over the data; a list of Datasets.

    Each Dataset is what ``budget.compute(fields, region, ...)`` returns for that region.
    """
    named_regions = list(named_regions)
    if not named_regions:
        raise RequestError("No regions to compute; give a region file with at least one valid feature.")
    if method not in METHODS:
        raise RequestError(f"Unknown method {method!r}; choose 'boundary' or 'area'.")
    fields = ledger.as_fields(fields)
    options = BudgetOptions(method=method, start=start, end=end, closure=closure or ClosureOptions())
    stencils = stencils if stencils is not None else compile_all(fields, named_regions)
    union, positions = union_of(stencils)
    ds = time_window(fields.ds, start, end)
    times = ds["time"].values
    chunk = block_steps(fields.kind, union, ds, times.size)
    func = partial(_many_block, fields, union, stencils, positions, fields.ds, options.attribution)
    parts = run_blocks(Shifted(func, window_offset(fields.ds["time"].values, times)), times.size, chunk,
                       progress=progress, scheduler=scheduler)
    out = []
    for k, ((rid, region), st) in enumerate(zip(named_regions, stencils)):
        sums = BlockSums.concat([p[k] for p in parts])
        out.append(ledger.budget_dataset(fields, region, st, times, sums, options, ds))
    return out


def stack(budgets, ids) -> xr.Dataset:
    """Per-region budgets as one Dataset with a ``region`` dimension.

    Series become (region, time). Edges differ between regions: ``edge_import`` is
    (region, time, edge) over the largest edge count, NaN-padded, with ``edge_name`` and
    ``edge_length`` per region. Per-region attributes become coordinates (``region_area_m2``,
    ``region_geojson``, ``warnings``); shared ones stay attributes.
    """
    parts = []
    for rid, b in zip(ids, budgets):
        b = b.drop_vars([v for v in b.data_vars if set(b[v].dims) - {"time", "edge"}])
        b = b.assign_coords(edge_name=("edge", np.asarray(b["edge"].values, dtype=object)))
        b = b.drop_vars("edge").assign_coords(edge=np.arange(b.sizes["edge"]))
        per_region = {k: b.attrs.get(k, "") for k in ("region_area_m2", "region_geojson", "warnings")}
        b.attrs = {k: v for k, v in b.attrs.items() if k not in per_region and k != "region_name"}
        b = b.expand_dims(region=[str(rid)])
        own = {k: (("region",) + b[k].dims, b[k].values[None]) for k in ("edge_name", "edge_length")}
        own.update({k: ("region", [v]) for k, v in per_region.items()})
        parts.append(b.assign_coords(own))
    out = xr.concat(parts, dim="region", join="outer", combine_attrs="drop_conflicts")
    out["region_area_m2"].attrs.update({"units": "m2", "long_name": "area of each region"})
    out.attrs["title"] = f"Fluxfence water-vapour budgets of {len(parts)} regions"
    return out


def compute_many(fields, named_regions, **kw) -> xr.Dataset:
    """The budgets of every (id, region) pair from one pass, as one Dataset with a ``region``
    dimension (see ``stack``); keywords as ``compute_each``."""
    named_regions = list(named_regions)
    return stack(compute_each(fields, named_regions, **kw), [rid for rid, _ in named_regions])


def to_long_frame(budgets, ids) -> pd.DataFrame:
    """One long table: ``time``, ``region``, then the CSV columns of budget.export, region by region."""
    from .export import to_frame

    frames = []
    for rid, b in zip(ids, budgets):
        df = to_frame(b)
        df.insert(1, "region", str(rid))
        frames.append(df)
    return pd.concat(frames, ignore_index=True)


def summary_frame(budgets, ids) -> pd.DataFrame:
    """One row per region: area, first and last time, steps, and the period mean of each summary
    column of the term catalogue (``mean_<column>``)."""
    from . import terms
    from .export import to_frame

    rows = []
    for rid, b in zip(ids, budgets):
        df = to_frame(b)
        row = {"region": str(rid), "area_km2": b.attrs["region_area_m2"] / 1e6, "first_time": df["time"].iloc[0],
               "last_time": df["time"].iloc[-1], "time_steps": len(df)}
        for col, _ in terms.summary_columns():
            if col.name in df:
                row[f"mean_{col.name}"] = df[col.name].mean()
        row["mass_correction"] = b.attrs.get("mass_correction", "")
        rows.append(row)
    return pd.DataFrame(rows)


def warnings_of(budgets, ids) -> list[str]:
    """Every region's warnings, each prefixed with the region's id."""
    out = []
    for rid, b in zip(ids, budgets):
        out += [f"{rid}: {w}" for w in json.loads(b.attrs.get("warnings", "[]"))]
    return out
