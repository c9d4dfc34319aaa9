"""The regional vapour budget: every term over time, one xarray.Dataset out.

P − E = −∇·Q − ∂W/∂t as area means over the region (CHECKS.md, the flux form of the continuity
equation for the vapour column).  The convergence is estimated twice from the same stencil:
the boundary line integral (default) and the area integral of the gridded divergence; their
difference measures the discretisation uncertainty.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from functools import partial

import numpy as np
import xarray as xr

from . import __version__, closure
from .constants import STANDARD_GRAVITY
from .errors import FieldsError, RequestError
from .stencil import Grid, Stencil, compile_stencil
from .stream import run_blocks

METHODS = ("boundary", "area")

#: Bytes all blocks in flight may hold in memory together (touched cells × levels × variables
#: as float64, with the temporaries of the column integrals); one block runs per worker thread.
CHUNK_BYTES = 64 * 2**20

#: At most this many steps per block: progress stays fine-grained and threads stay busy.
MAX_BLOCK_STEPS = 256


def _time_chunk(ds) -> int | None:
    """The dask chunk length along time of the first variable (None when not dask-backed)."""
    for v in ds.data_vars.values():
        ch = v.chunks
        if ch and "time" in v.dims:
            return int(max(ch[v.dims.index("time")]))  # a window may start mid-chunk
    return None


def _block_steps(fields, st, ds, nt: int) -> int:
    """Time steps per block: bounded by memory, whole dask time chunks when they fit.

    Independent of the record length, so memory stays flat however long the record is.
    """
    nlev = ds.sizes.get("level", 1)
    nvar = 4 if fields.kind == "levels" else 3
    box = len(np.unique(st.rows)) * len(np.unique(st.cols))
    temps = 3 if fields.kind == "levels" else 2  # float64 copies and temporaries per value
    per_step = max(1, box * nlev * nvar * 8 * temps)
    # the budget is shared by the blocks in flight, one per local worker thread
    per_block = CHUNK_BYTES // max(1, os.cpu_count() or 1)
    cap = max(1, min(MAX_BLOCK_STEPS, per_block // per_step))
    tchunk = _time_chunk(ds)
    if tchunk and cap >= tchunk:
        cap = (cap // tchunk) * tchunk
    return int(max(1, min(nt, cap)))


class _Shifted:
    """``func`` called with block slices moved by ``offset`` steps (picklable for clusters)."""

    def __init__(self, func, offset: int):
        self.func, self.offset = func, int(offset)

    def __call__(self, ts: slice):
        return self.func(slice(ts.start + self.offset, ts.stop + self.offset))


def _job_key(func, st, ds, region, chunk) -> str:
    """A name of this job for the resume folder: same inputs, region, window and options."""
    from dask.base import tokenize

    geo = region.to_geojson() if hasattr(region, "to_geojson") else None
    files = [str(f) for f in getattr(func.args[0], "files", [])]
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
    return tokenize(
        source, json.dumps(geo, sort_keys=True, default=str), int(chunk), repr(sorted(func.keywords.items())),
        st.touched, st.cover, st.bu.data, st.bv.data, st.div_u, st.div_v,
    )


@dataclass
class Columns:
    """Column quantities on the touched cells for a block of time steps (time × cell)."""

    qu: np.ndarray  # kg m-1 s-1
    qv: np.ndarray
    w: np.ndarray  # kg m-2
    ps: np.ndarray | None = None  # Pa (level inputs)
    levels: dict | None = None  # per-level arrays (time × level × cell) for profiles
    extra: dict | None = None  # closure terms per cell (budget.closure)


def _as_fields(fields):
    from .fields import Fields, open_fields

    if isinstance(fields, Fields):
        return fields
    return open_fields(fields)


def _time_window(ds, start, end):
    if start is None and end is None:
        return ds
    try:
        sel = ds.sel(time=slice(start, end))
    except (TypeError, ValueError, KeyError) as exc:
        raise RequestError(f"The time window {start!r}..{end!r} is not a valid ISO 8601 range ({exc}); write e.g. 2021-07-01 or 2021-07-01T06:00.") from None
    if sel.sizes["time"] == 0:
        t = ds["time"].values
        raise RequestError(
            f"No time steps between {start or 'the start'} and {end or 'the end'}; the fields run from "
            f"{np.datetime_as_string(t[0], unit='m')} to {np.datetime_as_string(t[-1], unit='m')} UTC."
        )
    return sel


#: Gaps narrower than this many rows or columns between touched cells are read through, so a
#: region costs few reads (common practice, no source).
GATHER_GAP = 16


def _runs(idx: np.ndarray, gap: int) -> list:
    """(start, stop) ranges covering the sorted indices ``idx``; gaps below ``gap`` read through."""
    cut = np.flatnonzero(np.diff(idx) > gap) + 1
    lo = np.concatenate([[0], cut])
    hi = np.concatenate([cut, [idx.size]])
    return [(int(idx[a]), int(idx[b - 1]) + 1) for a, b in zip(lo, hi)]


def _gather(data, rows_u, cols_u, r_pos, c_pos, tslice):
    """Values of the touched cells, (time, [level,] cell) as float64.

    ``data`` is a DataArray (one array back) or a Dataset (a dict of arrays back, every
    variable read in one pass). The touched rows and columns are grouped into runs and each
    run × run slab is read with plain slices: dask passes slices down to the file reader, so
    only those cells leave NetCDF/Zarr storage (index arrays would make dask load whole
    chunks). The reads run on dask's synchronous scheduler: a block is one task of the block
    runner (budget.stream), locally or on a cluster worker, and must not start a scheduler of
    its own.
    """
    import dask

    one = isinstance(data, xr.DataArray)
    ds = data.to_dataset(name="_") if one else data
    rows = np.asarray(rows_u)[r_pos]
    cols = np.asarray(cols_u)[c_pos]
    rr, cr = _runs(np.asarray(rows_u), GATHER_GAP), _runs(np.asarray(cols_u), GATHER_GAP)
    ri = np.searchsorted([a for a, _ in rr], rows, side="right") - 1
    ci = np.searchsorted([a for a, _ in cr], cols, side="right") - 1
    slabs = [ds.isel(time=tslice, lat=slice(r0, r1), lon=slice(c0, c1)) for r0, r1 in rr for c0, c1 in cr]
    slabs = dask.compute(*slabs, scheduler="synchronous")
    out = {}
    for name in ds.data_vars:
        lead = slabs[0][name].shape[:-2]
        arr = np.empty(lead + (rows.size,), np.float64)
        for a, (r0, _) in enumerate(rr):
            for b, (c0, _) in enumerate(cr):
                sel = np.flatnonzero((ri == a) & (ci == b))
                if sel.size:
                    vals = np.asarray(slabs[a * len(cr) + b][name].values)
                    arr[..., sel] = vals[..., rows[sel] - r0, cols[sel] - c0]
        out[name] = arr
    return out["_"] if one else out


class _Gatherer:
    """``g(name)``: the touched cells of one variable for one block; the first call reads
    every gridded variable of the dataset at once (one pass over the files per block)."""

    def __init__(self, ds, rows_u, cols_u, r_pos, c_pos, tslice):
        self.ds, self.args = ds, (rows_u, cols_u, r_pos, c_pos, tslice)
        self.cache = None

    def __call__(self, name):
        if self.cache is None:
            names = [n for n, v in self.ds.data_vars.items() if {"time", "lat", "lon"} <= set(v.dims)]
            self.cache = _gather(self.ds[names], *self.args) if names else {}
        if name in self.cache:
            return self.cache.pop(name)  # handed over once: the block owns it now
        return _gather(self.ds[name], *self.args)


def _check_finite(name, arr, mask, fields, st, t0):
    bad = ~np.isfinite(arr) & mask
    if bad.any():
        where = np.argwhere(bad)[0]
        cell = st.touched[where[-1]]
        j, i = divmod(int(cell), st.grid.shape[1])
        when = np.datetime_as_string(fields.ds["time"].values[t0 + where[0]], unit="m")
        src = fields.roles.get(name, name)
        raise FieldsError(
            f"Variable {src!r} is missing at ({st.grid.lon[i]:g}°E, {st.grid.lat[j]:g}°N) on {when} UTC, a cell this "
            "region needs; fill the gap in the files or draw the region away from it."
        )


def _columns(fields, st: Stencil, ds, tslice, t0, profiles: bool) -> Columns:
    from .vertical import column_integral

    rows_u, r_pos = np.unique(st.rows, return_inverse=True)
    cols_u, c_pos = np.unique(st.cols, return_inverse=True)
    g = _Gatherer(ds, rows_u, cols_u, r_pos, c_pos, tslice)
    if fields.kind == "column":
        qu, qv, w = g("qu"), g("qv"), g("w")
        for name, arr in (("qu", qu), ("qv", qv), ("w", w)):
            _check_finite(name, arr, np.ones(arr.shape, bool), fields, st, t0)
        return Columns(qu, qv, w, extra=closure.column_extras(ds, g, w))
    u, v, q, ps = g("u"), g("v"), g("q"), g("ps")
    _check_finite("ps", ps, np.ones(ps.shape, bool), fields, st, t0)
    dp = np.moveaxis(fields.vertical.thickness(ps), 0, 1)  # (time, level, cell)
    air = dp > 0
    for name, arr in (("u", u), ("v", v), ("q", q)):
        _check_finite(name, arr, air, fields, st, t0)
    qu = column_integral(q * u, dp, level_axis=1)
    qv = column_integral(q * v, dp, level_axis=1)
    w = column_integral(q, dp, level_axis=1)
    levels = {"qu": q * u, "qv": q * v, "dp": dp} if profiles else None
    extra = closure.level_extras(ds, g, q, u, v, dp, qu, qv, w)
    return Columns(qu, qv, w, ps=ps, levels=levels, extra=extra)


def _block(fields, st: Stencil, ds, tslice: slice, profiles: bool = False) -> dict:
    """Every per-time-step sum of one block of time steps: {name: array (time, ...)}."""
    c = _columns(fields, st, ds, tslice, tslice.start, profiles)
    flux = (st.bu @ c.qu.T + st.bv @ c.qv.T).T  # outward flux per piece, (time, piece)
    res = {
        "imp": -flux.sum(axis=1),
        "inflow": np.clip(-flux, 0, None).sum(axis=1),
        "outflow": np.clip(flux, 0, None).sum(axis=1),
        "edge": -(st.edge_sum @ flux.T).T,
        "adiv": c.qu @ st.div_u + c.qv @ st.div_v,
        "w": c.w @ st.cover / st.area,
    }
    res.update(closure.block_sums(st, c.extra, c.w))
    if profiles:
        length = st.piece_length
        res["density"] = -flux / length
        if c.levels is not None:
            fu, fv = st.boundary.normal_factors()
            lv = c.levels
            nb, nlev, npiece = lv["qu"].shape[0], lv["qu"].shape[1], length.size
            flat = lambda a: a.reshape(-1, a.shape[-1]).T  # (cell, time*level)  # noqa: E731
            back = lambda a: a.T.reshape(nb, nlev, npiece)  # noqa: E731
            dp = lv["dp"]
            # layer contributions (1/g) x Δp interpolated to the pieces, so that the curtain
            # times the layer thickness sums exactly to the import per unit length
            lay_u = back(st.interp @ flat(np.where(dp > 0, lv["qu"] * dp, 0.0)))
            lay_v = back(st.interp @ flat(np.where(dp > 0, lv["qv"] * dp, 0.0)))
            dp_p = back(st.interp @ flat(dp))
            layer = -(fu * lay_u + fv * lay_v) / length / STANDARD_GRAVITY  # kg m-1 s-1 per layer
            with np.errstate(invalid="ignore", divide="ignore"):
                res["curtain"] = np.where(dp_p > 0, layer / dp_p, np.nan)
            res["curtain_dp"] = dp_p
    return res


def _tendency(values: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Centred differences inside, one-sided at the ends (common practice, no source)."""
    if values.shape[0] < 2:
        return np.full(values.shape, np.nan)
    t = (times - times[0]) / np.timedelta64(1, "s")
    return np.gradient(values, t.astype(float), axis=0)


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
    mass_correction: bool | None = None,
    accumulation_period=None,
    accumulation_reset=None,
    evaporation_positive: str | None = None,
) -> xr.Dataset:
    """The vapour budget of ``region`` from ``fields`` (a Fields, a Dataset, or file paths).

    ``method`` picks the primary convergence estimate ("boundary" line integral or "area"
    integral of the gridded divergence); both are always reported. ``profiles`` adds the
    import per unit boundary length and, for level inputs, the normal-flux curtain.
    ``progress(done, total)`` is called after each time chunk.
    ``scheduler``: None (dask's local threads), "sync", or a dask.distributed address
    ("tcp://HOST:PORT") or Client to run the time blocks on a cluster (budget.stream).
    ``resume``: a folder where finished time blocks are kept; after an interruption the same
    call with the same folder computes only the rest; the folder is removed when done, unless
    ``keep_resume`` (the caller removes it once its outputs are written).

    ``mass_correction`` applies the barotropic dry-air mass correction (budget.mass): on by
    default for level inputs, off (unavailable) for column inputs; the uncorrected terms stay in
    the Dataset (``*_uncorrected``).  ``accumulation_period`` ("1h", "12h", "none"),
    ``accumulation_reset`` (e.g. "06:00") and ``evaporation_positive`` ("up"/"down") describe
    accumulated precipitation and evaporation in the files (budget.observed).
    """
    if method not in METHODS:
        raise RequestError(f"Unknown method {method!r}; choose 'boundary' or 'area'.")
    fields = _as_fields(fields)
    st = stencil if stencil is not None else compile_stencil(region, Grid.from_fields(fields))
    ds = _time_window(fields.ds, start, end)
    times = ds["time"].values
    nt = times.size

    chunk = _block_steps(fields, st, ds, nt)
    # Blocks read the un-windowed fields at shifted steps: a time window sliced onto the dask
    # arrays first would stop dask from passing the slab slices down to the file reader (it
    # then loads whole chunks), and error messages name the true time of a step.
    offset = int(np.searchsorted(fields.ds["time"].values, times[0])) if nt else 0
    func = partial(_block, fields, st, fields.ds, profiles=profiles)
    key = _job_key(func, st, ds, region, chunk) if resume is not None else ""
    blocks = run_blocks(_Shifted(func, offset), nt, chunk, progress=progress, scheduler=scheduler, store=resume, key=key,
                        keep_store=keep_resume)
    res = {k: np.concatenate([b[k] for b in blocks], axis=0) for k in blocks[0]}
    out = {k: res[k] for k in ("w", "imp", "inflow", "outflow", "adiv")}
    edge = res["edge"]
    density = res.get("density")
    curtain = res.get("curtain")
    curtain_dp = res.get("curtain_dp")
    tend = _tendency(out["w"], times)
    bconv = out["imp"] / st.area
    aconv = -out["adiv"]
    conv = bconv if method == "boundary" else aconv
    pme = conv - tend
    out["imp"], edge, bconv, aconv, conv, pme, *closed = closure.close(
        fields, st, times, res, method, tend, bconv, aconv, out["imp"], edge, mass_correction,
        accumulation_period, accumulation_reset, evaporation_positive,
    )
    return _assemble(fields, region, st, times, out, edge, tend, bconv, aconv, conv, pme, method, density, (curtain, curtain_dp), ds, closed)


def _assemble(fields, region, st, times, out, edge, tend, bconv, aconv, conv, pme, method, density, curtains, ds, closed=None):
    curtain, curtain_dp = curtains
    T = ("time",)

    def var(data, units, long_name, dims=T, **extra):
        return xr.Variable(dims, data, {"units": units, "long_name": long_name, **extra})

    scheme = fields.vertical.scheme if fields.vertical is not None else "pre-integrated columns from the files"
    conv_note = {
        "boundary": "outward flux through the densified boundary, Q bilinearly interpolated to piece midpoints",
        "area": "cover-weighted area mean of the centred-difference divergence on the sphere",
    }
    dv = {
        "precipitable_water": var(out["w"], "kg m-2", "area-mean precipitable water", method_detail="cover-weighted mean of W; 1 kg m-2 = 1 mm"),
        "pw_tendency": var(tend, "kg m-2 s-1", "tendency of area-mean precipitable water", method_detail="centred differences in time, one-sided at the ends"),
        "vapour_import": var(out["imp"], "kg s-1", "net water-vapour import through the boundary", method_detail=conv_note["boundary"]),
        "inflow": var(out["inflow"], "kg s-1", "water-vapour inflow through the boundary (pieces with inward flux)"),
        "outflow": var(out["outflow"], "kg s-1", "water-vapour outflow through the boundary (pieces with outward flux)"),
        "boundary_convergence": var(bconv, "kg m-2 s-1", "area-mean vapour-flux convergence, boundary method", method_detail=conv_note["boundary"]),
        "area_convergence": var(aconv, "kg m-2 s-1", "area-mean vapour-flux convergence, area method", method_detail=conv_note["area"]),
        "vapour_convergence": var(conv, "kg m-2 s-1", "area-mean vapour-flux convergence", method_detail=f"{method} method: {conv_note[method]}"),
        "p_minus_e": var(pme, "kg m-2 s-1", "precipitation minus evaporation (convergence minus tendency)", method_detail="P - E = -div(Q) - dW/dt"),
        "edge_import": var(edge, "kg s-1", "water-vapour import through each edge", dims=("time", "edge")),
    }
    bnd = st.boundary
    length = bnd.lengths()
    cum = np.concatenate([[0.0], np.cumsum(length)])
    coords = {
        "time": ("time", times),
        "edge": ("edge", np.asarray(bnd.edge_names, dtype=object)),
        "edge_length": ("edge", st.edge_sum @ length, {"units": "m", "long_name": "length of each edge"}),
    }
    if density is not None:
        dv["boundary_import_density"] = var(density, "kg m-1 s-1", "water-vapour import per unit boundary length", dims=("time", "piece"))
        coords["piece_distance"] = ("piece", 0.5 * (cum[:-1] + cum[1:]), {"units": "m", "long_name": "distance along the boundary"})
        coords["piece_lon"] = ("piece", bnd.mid_lon, {"units": "degrees_east"})
        coords["piece_lat"] = ("piece", bnd.mid_lat, {"units": "degrees_north"})
        coords["piece_edge"] = ("piece", bnd.edge)
        coords["vertex_distance"] = ("vertex", cum[bnd.vertex_piece], {"units": "m", "long_name": "distance of each vertex along the boundary"})
        if curtain is not None:
            dv["normal_flux_density"] = var(curtain, "kg m-1 s-1 Pa-1", "import per unit boundary length per unit pressure", dims=("time", "level", "piece"))
            dv["layer_thickness"] = var(curtain_dp, "Pa", "layer thickness above ground at each boundary piece", dims=("time", "level", "piece"))
            coords["level"] = ("level", ds["level"].values, dict(ds["level"].attrs))
    out = xr.Dataset(dv, coords=coords)
    out["time"].attrs.update({"long_name": "time", "standard_name": "time"})
    geo = region.to_geojson() if hasattr(region, "to_geojson") else None
    out.attrs.update(
        {
            "title": f"Fluxfence water-vapour budget of {getattr(region, 'name', None) or 'the region'}",
            "region_name": getattr(region, "name", None) or "region",
            "region_area_m2": float(st.area),
            "method": method,
            "vertical_scheme": scheme,
            "roles": json.dumps(fields.roles),
            "input_files": json.dumps([str(f) for f in fields.files]),
            "software": "fluxfence",
            "software_version": __version__,
            "region_geojson": json.dumps(geo) if geo is not None else "",
            "warnings": json.dumps(list(st.warnings) + list(getattr(fields, "warnings", []))),
            "sign_convention": "import and convergence positive when the region gains moisture",
            "Conventions": "CF-1.10",
        }
    )
    if closed is not None:  # closure terms (budget.closure): variables, attributes, warnings
        cvars, cattrs, cwarn = closed
        for name, v in cvars.items():
            out[name] = v
        out.attrs.update(cattrs)
        for name in ("vapour_import", "edge_import", "boundary_convergence", "area_convergence", "vapour_convergence", "p_minus_e"):
            out[name].attrs["mass_correction"] = cattrs["mass_correction"]
        for name in ("inflow", "outflow", "boundary_import_density", "normal_flux_density"):
            if name in out:
                out[name].attrs["mass_correction"] = "not included: from the files' winds"
        out.attrs["warnings"] = json.dumps(json.loads(out.attrs["warnings"]) + list(cwarn))
    return out
