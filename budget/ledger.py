"""The regional vapour budget: every term over time, one xarray.Dataset out.

P − E = −∇·Q − ∂W/∂t as area means over the region (CHECKS.md, the flux form of the continuity
equation for the vapour column).  The convergence is estimated twice from the same stencil:
the boundary line integral (default) and the area integral of the gridded divergence; their
difference measures the discretisation uncertainty.

The record is cut into time blocks (budget.blocks sizes them and reads the touched cells,
budget.stream runs them); each block returns a `BlockSums`; after the last block the time
derivatives (budget.timeaxis), the closure (budget.closure) and the Dataset follow.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from functools import partial

import numpy as np
import xarray as xr

from . import __version__, attribution, closure, plausible, terms
from .blocks import BlockSums, Cells, Gatherer, Shifted, block_steps
from .constants import STANDARD_GRAVITY
from .errors import RequestError
from .options import METHODS, BudgetOptions, ClosureOptions, RunOptions
from .stencil import Grid, Stencil, compile_stencil
from .stream import run_blocks
from .timeaxis import SINGLE_STEP_NOTE, has_tendency, tendency, time_window, window_offset

__all__ = ["compute", "as_fields", "METHODS", "Columns"]


def as_fields(fields):
    """A `budget.fields.Fields` as it is, anything else (paths, a Dataset) through open_fields."""
    from .fields import Fields, open_fields

    if isinstance(fields, Fields):
        return fields
    return open_fields(fields)


def _job_key(func, st, ds, region, chunk) -> str:
    """A name of this job for the resume folder: same inputs, region, window and options."""
    from dask.base import tokenize

    geo = region.to_geojson() if hasattr(region, "to_geojson") else None
    return tokenize(
        source_token(func.args[0], ds), json.dumps(geo, sort_keys=True, default=str), int(chunk),
        repr(sorted(func.keywords.items())), st.touched, st.cover, st.bu.data, st.bv.data, st.div_u, st.div_v,
    )


def source_token(fields, ds):
    """What a resume key needs to know of the inputs (``ds``: the windowed fields)."""
    files = [str(f) for f in getattr(fields, "files", [])]
    if files and all(os.path.exists(f) for f in files):
        # inputs from files: their names, sizes and times, and what was read from them (dask
        # names of lazily opened files change from one process to the next)
        source = (
            [(f, os.path.getsize(f), os.path.getmtime(f)) for f in files],
            [(n, v.dims, v.shape, str(v.dtype), sorted((k, str(a)) for k, a in v.attrs.items())) for n, v in ds.data_vars.items()],
            ds["time"].values,
        )
    else:
        source = ds  # data in memory: its values
    return source


@dataclass
class Columns:
    """Column quantities on the touched cells for a block of time steps (time × cell)."""

    qu: np.ndarray  # kg m-1 s-1
    qv: np.ndarray
    w: np.ndarray  # kg m-2
    ps: np.ndarray | None = None  # Pa (level inputs)
    levels: dict | None = None  # per-level arrays (time × level × cell) for profiles
    extra: dict | None = None  # closure terms per cell (budget.closure)
    flagged: dict | None = None  # values accepted but counted (budget.plausible)


def read_columns(fields, st: Stencil, ds, tslice, profiles: bool, keep_levels: bool = False) -> Columns:
    """Read one block's touched cells, check every value (budget.plausible), integrate.

    ``st`` needs only ``grid``, ``touched``, ``rows`` and ``cols`` (budget.multi passes the
    union of several regions' cells)."""
    from .vertical import column_integral

    g = Gatherer(ds, Cells.of(st), tslice)
    chk = plausible.Checker(plausible.Where(fields, st, tslice.start))
    if fields.kind == "column":
        qu, qv, w = g("qu"), g("qv"), g("w")
        plausible.check_columns(chk, {"qu": qu, "qv": qv, "w": w})
        return Columns(qu, qv, w, extra=closure.column_extras(ds, g, w, chk), flagged=chk.counts)
    u, v, q, ps = g("u"), g("v"), g("q"), g("ps")
    plausible.check_surface_pressure(chk, ps)
    dp = np.moveaxis(fields.vertical.thickness(ps), 0, 1)  # (time, level, cell)
    plausible.check_levels(chk, u, v, q, dp > 0)
    qu = column_integral(q * u, dp, level_axis=1)
    qv = column_integral(q * v, dp, level_axis=1)
    w = column_integral(q, dp, level_axis=1)
    levels = {"qu": q * u, "qv": q * v, "dp": dp, "ps": ps} if (profiles or keep_levels) else None
    if profiles:  # the dry-air curtain: (1 − q) V = V − q V per level (budget.mass)
        levels.update(u=u, v=v)
    extra = closure.level_extras(ds, g, q, u, v, dp, qu, qv, w, chk)
    return Columns(qu, qv, w, ps=ps, levels=levels, extra=extra, flagged=chk.counts)


def _block(fields, st: Stencil, ds, tslice: slice, profiles: bool = False,
           attribute: attribution.AttributionOptions = attribution.AttributionOptions()) -> BlockSums:
    """Every per-time-step sum of one block of time steps."""
    c = read_columns(fields, st, ds, tslice, profiles, keep_levels=attribute.layers is not None)
    return block_sums(fields, st, c, profiles, attribute)


def block_sums(fields, st: Stencil, c: Columns, profiles: bool = False,
               attribute: attribution.AttributionOptions = attribution.AttributionOptions()) -> BlockSums:
    """The stencil's per-time-step sums of one block's columns (on the stencil's touched cells)."""
    flux = (st.bu @ c.qu.T + st.bv @ c.qv.T).T  # outward flux per piece, (time, piece)
    sums = dict(
        imp=-flux.sum(axis=1),
        inflow=np.clip(-flux, 0, None).sum(axis=1),
        outflow=np.clip(flux, 0, None).sum(axis=1),
        edge=-(st.edge_sum @ flux.T).T,
        adiv=c.qu @ st.div_u + c.qv @ st.div_v,
        w=c.w @ st.cover / st.area,
    )
    sums.update(closure.block_sums(st, c.extra, c.w, profiles=profiles))
    sums.update(attribution.block_sums(st, fields.vertical, attribute, c.qu, c.qv, c.levels))
    if profiles:
        sums["density"] = -flux / st.piece_length
        lv = c.levels
        if lv is not None:
            sums["curtain"], sums["curtain_dp"] = _curtain(st, lv["qu"], lv["qv"], lv["dp"])
            if "u" in lv and sums.get("dimp") is not None:  # dry air, (1 − q) V per level
                sums["dcurtain"], _ = _curtain(st, lv["u"] - lv["qu"], lv["v"] - lv["qv"], lv["dp"])
    return BlockSums(**sums, flagged=dict(c.flagged or {}))


def _curtain(st: Stencil, xu: np.ndarray, xv: np.ndarray, dp: np.ndarray):
    """Import per unit length per unit pressure at each boundary piece and level of the flux
    density (xu, xv) per level (q V for vapour, (1 − q) V for dry air), and the layer
    thickness there: (time, level, piece) each."""
    fu, fv = st.boundary.normal_factors()
    length = st.piece_length
    nb, nlev, npiece = xu.shape[0], xu.shape[1], length.size

    def to_pieces(a):  # (time, level, cell) -> (time, level, piece) by bilinear interpolation
        return (st.interp @ a.reshape(-1, a.shape[-1]).T).T.reshape(nb, nlev, npiece)

    # layer contributions (1/g) x Δp interpolated to the pieces, so that the curtain times the
    # layer thickness sums exactly to the import per unit length
    lay_u = to_pieces(np.where(dp > 0, xu * dp, 0.0))
    lay_v = to_pieces(np.where(dp > 0, xv * dp, 0.0))
    dp_p = to_pieces(dp)
    layer = -(fu * lay_u + fv * lay_v) / length / STANDARD_GRAVITY  # kg m-1 s-1 per layer
    with np.errstate(invalid="ignore", divide="ignore"):
        curtain = np.where(dp_p > 0, layer / dp_p, np.nan)
    return curtain, dp_p


def vapour_terms(sums: BlockSums, times, area: float, method: str) -> closure.VapourTerms:
    """The vapour budget's series from the block sums, before any correction."""
    tend = tendency(sums.w, times)
    bconv = sums.imp / area
    aconv = -sums.adiv
    conv = bconv if method == "boundary" else aconv
    return closure.VapourTerms(imp=sums.imp, edge=sums.edge, bconv=bconv, aconv=aconv, conv=conv, tend=tend, pme=conv - tend)


def _legacy_options(method, start, end, profiles, mass_correction, accumulation_period, accumulation_reset,
                    evaporation_positive, progress, stencil, scheduler, resume, keep_resume, options, run):
    """(BudgetOptions, RunOptions) from compute's keyword arguments or the option values."""
    if options is None:
        options = BudgetOptions(
            method=method, start=start, end=end, profiles=profiles,
            closure=ClosureOptions(mass_correction, accumulation_period, accumulation_reset, evaporation_positive),
        )
    elif (method, start, end, profiles, mass_correction, accumulation_period, accumulation_reset, evaporation_positive) != (
            "boundary", None, None, False, None, None, None, None):
        raise RequestError("Give the budget's options either as options=BudgetOptions(...) or as keywords, not both.")
    if run is None:
        run = RunOptions(scheduler=scheduler, resume=resume, keep_resume=keep_resume, progress=progress, stencil=stencil)
    elif (progress, stencil, scheduler, resume, keep_resume) != (None, None, None, None, False):
        raise RequestError("Give the run's options either as run=RunOptions(...) or as keywords, not both.")
    return options, run


def compute(
    fields,
    region,
    method: str = "boundary",
    start=None,
    end=None,
    profiles: bool = False,
    progress=None,
    stencil: Stencil | None = None,
    scheduler=None,
    resume=None,
    keep_resume: bool = False,
    mass_correction=None,
    accumulation_period=None,
    accumulation_reset=None,
    evaporation_positive: str | None = None,
    *,
    options: BudgetOptions | None = None,
    run: RunOptions | None = None,
) -> xr.Dataset:
    """The vapour budget of ``region`` from ``fields`` (a Fields, a Dataset, or file paths).

    The science goes in ``options`` (budget.options.BudgetOptions: method, time window,
    profiles, closure options), the execution in ``run`` (RunOptions: scheduler, resume folder,
    progress callback, a precompiled stencil, block size).  The keyword arguments are the same
    options spelled out one by one (``mass_correction`` None/True/False = "auto"/"on"/"off").
    """
    options, run = _legacy_options(method, start, end, profiles, mass_correction, accumulation_period,
                                   accumulation_reset, evaporation_positive, progress, stencil, scheduler,
                                   resume, keep_resume, options, run)
    if options.method not in METHODS:
        raise RequestError(f"Unknown method {options.method!r}; choose 'boundary' or 'area'.")
    fields = as_fields(fields)
    if options.attribution.layers is not None and fields.kind != "levels":
        raise RequestError("Import by layer needs winds and humidity on levels (u, v, q, ps); these fields are "
                           "pre-integrated columns, so leave out --layers or give level fields.")
    st = run.stencil if run.stencil is not None else compile_stencil(region, Grid.from_fields(fields))
    ds = time_window(fields.ds, options.start, options.end)
    times = ds["time"].values
    nt = times.size
    chunk = run.block_steps or block_steps(fields.kind, st, ds, nt)
    # Blocks read the un-windowed fields at shifted steps (budget.blocks.Shifted), and error
    # messages name the true time of a step.
    func = partial(_block, fields, st, fields.ds, profiles=options.profiles, attribute=options.attribution)
    key = _job_key(func, st, ds, region, chunk) if run.resume is not None else ""
    parts = run_blocks(Shifted(func, window_offset(fields.ds["time"].values, times)), nt, chunk,
                       progress=run.progress, scheduler=run.scheduler, store=run.resume, key=key,
                       keep_store=run.keep_resume)
    sums = BlockSums.concat(parts)
    return budget_dataset(fields, region, st, times, sums, options, ds)


def budget_dataset(fields, region, st: Stencil, times, sums: BlockSums, options: BudgetOptions, ds) -> xr.Dataset:
    """The budget Dataset of one region from its concatenated block sums (after the last block)."""
    vap = vapour_terms(sums, times, float(st.area), options.method)
    closed = closure.close(fields, st, times, sums, vap, options.method, options.closure)
    return _assemble(fields, region, st, times, sums, closed, options, ds)


def vapour_variables(sums: BlockSums, v: closure.VapourTerms, method: str, dims=("time",)) -> dict:
    """The vapour terms, their attributes from the term catalogue (budget.terms); ``dims`` are
    the series' dimensions (("time", "region") for budget.multi's stacked sums)."""
    conv = terms.term(f"{method}_convergence").method  # the primary estimate's method text
    series = tuple(dims)

    def var(name, data, dims=series, method=None):
        return xr.Variable(dims, data, terms.attrs(name, method))

    return {
        "precipitable_water": var("precipitable_water", sums.w),
        "pw_tendency": var("pw_tendency", v.tend),
        "vapour_import": var("vapour_import", v.imp),
        "inflow": var("inflow", sums.inflow),
        "outflow": var("outflow", sums.outflow),
        "boundary_convergence": var("boundary_convergence", v.bconv),
        "area_convergence": var("area_convergence", v.aconv),
        "vapour_convergence": var("vapour_convergence", v.conv, method=f"{method} method: {conv}"),
        "p_minus_e": var("p_minus_e", v.pme),
        "edge_import": var("edge_import", v.edge, dims=series + ("edge",)),
    }


def _profile_variables(sums: BlockSums, st: Stencil, ds, dv: dict, coords: dict) -> None:
    """Boundary profiles (profiles=True): import density along the boundary, the curtain."""
    if sums.density is None:
        return
    bnd = st.boundary
    cum = np.concatenate([[0.0], np.cumsum(bnd.lengths())])
    dv["boundary_import_density"] = xr.Variable(("time", "piece"), sums.density, terms.attrs("boundary_import_density"))
    coords["piece_distance"] = ("piece", 0.5 * (cum[:-1] + cum[1:]), {"units": "m", "long_name": "distance along the boundary"})
    coords["piece_lon"] = ("piece", bnd.mid_lon, {"units": "degrees_east"})
    coords["piece_lat"] = ("piece", bnd.mid_lat, {"units": "degrees_north"})
    coords["piece_edge"] = ("piece", bnd.edge)
    coords["vertex_distance"] = ("vertex", cum[bnd.vertex_piece], {"units": "m", "long_name": "distance of each vertex along the boundary"})
    if sums.curtain is not None:
        dims = ("time", "level", "piece")
        dv["normal_flux_density"] = xr.Variable(dims, sums.curtain, terms.attrs("normal_flux_density"))
        dv["layer_thickness"] = xr.Variable(dims, sums.curtain_dp, terms.attrs("layer_thickness"))
        coords["level"] = ("level", ds["level"].values, dict(ds["level"].attrs))
    if sums.ddensity is not None:  # dry air (level inputs), files' winds
        dv["dry_air_import_density"] = xr.Variable(("time", "piece"), sums.ddensity, terms.attrs("dry_air_import_density"))
    if sums.dcurtain is not None:
        dv["dry_air_normal_flux_density"] = xr.Variable(("time", "level", "piece"), sums.dcurtain,
                                                        terms.attrs("dry_air_normal_flux_density"))


def budget_warnings(fields, st, times, sums: BlockSums, closed) -> list:
    """Every warning of one region's budget: stencil, fields, single step, flagged values, closure."""
    out = list(st.warnings) + list(getattr(fields, "warnings", []))
    if not has_tendency(times):
        out.append(SINGLE_STEP_NOTE)
    source = {**dict(getattr(fields, "roles", {})), **dict(getattr(fields, "extra_roles", {}))}
    out += plausible.flagged_warning(sums.flagged, source)
    return out + list(closed.warnings)


def _assemble(fields, region, st, times, sums: BlockSums, closed, options: BudgetOptions, ds) -> xr.Dataset:
    method = options.method
    dv = vapour_variables(sums, closed.vapour, method)
    bnd = st.boundary
    coords = {
        "time": ("time", times),
        "edge": ("edge", np.asarray(bnd.edge_names, dtype=object)),
        "edge_length": ("edge", st.edge_sum @ bnd.lengths(), {"units": "m", "long_name": "length of each edge"}),
    }
    _profile_variables(sums, st, ds, dv, coords)
    avars, acoords = attribution.variables(sums, st, options.attribution)
    dv.update(avars)
    coords.update(acoords)
    out = xr.Dataset(dv, coords=coords)
    out["time"].attrs.update({"long_name": "time", "standard_name": "time"})
    out.attrs.update(region_attrs(region, st))
    out.attrs.update(shared_attrs(fields, method, sums))
    for name, v in closed.variables.items():
        out[name] = v
    out.attrs.update(closed.attrs)
    mark_correction(out, closed.correction.sentence)
    out.attrs["warnings"] = json.dumps(budget_warnings(fields, st, times, sums, closed))
    return out


def region_attrs(region, st) -> dict:
    """The budget's attributes that belong to its region (budget.multi makes them coordinates)."""
    geo = region.to_geojson() if hasattr(region, "to_geojson") else None
    return {
        "title": f"Fluxfence water-vapour budget of {getattr(region, 'name', None) or 'the region'}",
        "region_name": getattr(region, "name", None) or "region",
        "region_area_m2": float(st.area),
        "region_geojson": json.dumps(geo) if geo is not None else "",
    }


def shared_attrs(fields, method: str, sums: BlockSums) -> dict:
    """The budget's attributes that come from the inputs and options, not the region."""
    scheme = fields.vertical.scheme if fields.vertical is not None else "pre-integrated columns from the files"
    return {
        "method": method,
        "vertical_scheme": scheme,
        "roles": json.dumps(fields.roles),
        "derived_roles": json.dumps(dict(getattr(fields, "derived", {}) or {})),
        "input_files": json.dumps([str(f) for f in fields.files]),
        "software": "fluxfence",
        "software_version": __version__,
        "flagged_values": json.dumps({k: int(n) for k, n in sorted(sums.flagged.items())}),
        "sign_convention": "import and convergence positive when the region gains moisture",
        "Conventions": "CF-1.10",
    }


def mark_correction(out: xr.Dataset, sentence: str) -> None:
    """Say on each vapour variable whether the mass correction is in it."""
    for name in ("vapour_import", "edge_import", "boundary_convergence", "area_convergence", "vapour_convergence", "p_minus_e"):
        out[name].attrs["mass_correction"] = sentence
    for name in ("inflow", "outflow", "boundary_import_density", "normal_flux_density", "dry_air_import",
                 "dry_air_edge_import", "dry_air_import_density", "dry_air_normal_flux_density"):
        if name in out:
            out[name].attrs["mass_correction"] = "not included: from the files' winds"
