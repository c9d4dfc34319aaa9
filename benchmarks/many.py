"""Many basins in one pass (budget.multi) against one basin, single runs and hand-written peers.

    python benchmarks/many.py            # 100 invented sub-basins, 720 hourly steps
    python benchmarks/many.py --quick    # 96 steps
    python benchmarks/many.py --basins 30 --steps 240 --json many.json

Fields: invented analytic column fields (budget.testing, as in benchmarks/synthetic.py) on a
regional 0.25° grid (10° W–40° E, 30–65° N), hourly, float32, time-chunked NetCDF-4 (24 steps
× the whole grid per chunk), written once to the benchmark cache folder. The exact area-mean
convergence of any polygon is known (divergence theorem), so every contender's error is shown.

Regions: an invented river system of N sub-basins (a jittered 10-wide lattice of
quadrilaterals over 5–25° E, 40–60° N; not real places). "one basin" is the first of them.

Rows (each the best of 3 runs in this process; page cache warmed first):
- one basin: budget.compute with a precompiled stencil;
- N basins, one pass: budget.multi.compute_many with precompiled stencils (it stacks them into
  one sparse operator per term, budget.stacked, inside the timed call);
- N basins, one run each: budget.compute in a loop (what --each-feature did before);
- by hand, full grid: a careful user's xarray budget on the whole grid per basin (centred
  differences on the sphere, a cell-centre mask, cos φ-weighted means), as in benchmarks/run.py;
- by hand, windowed: the same after cutting a window of the grid around each basin first (the
  strongest hand-written peer).
Hand-written rows for N basins are measured on min(N, 10) basins and scaled to N (printed).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from benchmarks import synthetic  # noqa: E402
from budget import testing as analytic  # noqa: E402

BOX = (-10.0, 30.0, 40.0, 65.0)  # W, S, E, N of the regional grid
RES = 0.25
SYSTEM = (5.0, 40.0, 25.0, 60.0)  # where the invented sub-basins lie
REPEATS = 3


def regional_file(nt: int) -> Path:
    """The regional column file with ``nt`` hourly steps (written on first use)."""
    path = synthetic.cache_dir() / f"column_regional_{RES:g}deg_{nt}steps.nc"
    if path.exists():
        return path
    import netCDF4

    lon = np.arange(BOX[0], BOX[2] + RES / 2, RES)
    lat = np.arange(BOX[1], BOX[3] + RES / 2, RES)
    LON, LAT = np.meshgrid(lon, lat)
    qu_d, qv_d = analytic.flux(LON, LAT, rotational=False)
    qu_a, qv_a = analytic.flux(LON, LAT, rotational=True)
    qu_r, qv_r = qu_a - qu_d, qv_a - qv_d
    w = 20.0 + 10.0 * np.cos(np.radians(LAT)) ** 2
    tmp = path.with_suffix(".nc.tmp")
    with netCDF4.Dataset(tmp, "w", format="NETCDF4") as nc:
        nc.title = "Fluxfence many-basin benchmark: invented analytic column fields (not real weather)"
        nc.createDimension("time", nt)
        nc.createDimension("lat", lat.size)
        nc.createDimension("lon", lon.size)
        vt = nc.createVariable("time", "f8", ("time",))
        vt.units, vt.standard_name, vt.calendar = "hours since 2031-01-01 00:00:00", "time", "standard"
        vt[:] = np.arange(nt)
        for nm, vals, units, sn in (("lat", lat, "degrees_north", "latitude"), ("lon", lon, "degrees_east", "longitude")):
            v = nc.createVariable(nm, "f8", (nm,))
            v.units, v.standard_name = units, sn
            v[:] = vals
        ch = (min(synthetic.TIME_CHUNK, nt), lat.size, lon.size)
        specs = {
            "qu": ("kg m-1 s-1", "eastward_atmosphere_water_vapor_transport_across_unit_distance"),
            "qv": ("kg m-1 s-1", "northward_atmosphere_water_vapor_transport_across_unit_distance"),
            "w": ("kg m-2", "atmosphere_mass_content_of_water_vapor"),
        }
        vs = {}
        for nm, (units, sn) in specs.items():
            vs[nm] = nc.createVariable(nm, "f4", ("time", "lat", "lon"), chunksizes=ch)
            vs[nm].units, vs[nm].standard_name = units, sn
        for t0 in range(0, nt, synthetic.TIME_CHUNK):
            n = np.arange(t0, min(nt, t0 + synthetic.TIME_CHUNK))
            g, h, f = (x(n)[:, None, None] for x in (synthetic.g_of_t, synthetic.h_of_t, synthetic.w_of_t))
            vs["qu"][t0: t0 + n.size] = (g * qu_d + h * qu_r).astype(np.float32)
            vs["qv"][t0: t0 + n.size] = (g * qv_d + h * qv_r).astype(np.float32)
            vs["w"][t0: t0 + n.size] = (f * w).astype(np.float32)
    os.replace(tmp, path)
    return path


def sub_basins(n: int) -> list[tuple[str, list, list]]:
    """``n`` invented sub-basins: quadrilaterals of a jittered lattice (deterministic)."""
    side = int(np.ceil(np.sqrt(n)))
    w, s, e, nn = SYSTEM
    xs, ys = np.linspace(w, e, side + 1), np.linspace(s, nn, side + 1)
    rng = np.random.default_rng(1234)
    X, Y = np.meshgrid(xs, ys)
    jit = 0.25 * (e - w) / side
    X[1:-1, 1:-1] += rng.uniform(-jit, jit, X[1:-1, 1:-1].shape)
    Y[1:-1, 1:-1] += rng.uniform(-jit, jit, Y[1:-1, 1:-1].shape)
    out = []
    for j in range(side):
        for i in range(side):
            if len(out) == n:
                return out
            lon = [X[j, i], X[j, i + 1], X[j + 1, i + 1], X[j + 1, i]]
            lat = [Y[j, i], Y[j, i + 1], Y[j + 1, i + 1], Y[j + 1, i]]
            out.append((f"sub-basin {len(out) + 1:03d}", lon, lat))
    return out


def truth(lon, lat, nt):
    """Exact area-mean convergence (kg m-2 s-1) per step: −g(n) ∬∇²χ dA / area."""
    import shapely

    from budget import sphere

    geom = shapely.Polygon(list(zip(lon, lat)))
    area = abs(sphere.ring_area(np.asarray(lon, float), np.asarray(lat, float)))
    return -synthetic.g_of_t(np.arange(nt)) * analytic.area_integral_of_divergence(geom) / area


def best_of(fn):
    times, res = [], None
    for _ in range(REPEATS):
        t = time.perf_counter()
        res = fn()
        times.append(time.perf_counter() - t)
    return min(times), res


def by_hand(ds, lon, lat, window: bool):
    """A careful user's budget of one basin with xarray: centred-difference divergence on the
    sphere, a cell-centre mask, cos φ-weighted means; ``window`` cuts the grid around the basin
    (2 cells of margin) before the divergence."""
    import shapely

    from budget.constants import EARTH_RADIUS as a

    if window:
        m = 2 * RES
        ds = ds.sel(lon=slice(min(lon) - m, max(lon) + m), lat=slice(min(lat) - m, max(lat) + m))
    rlat = np.radians(ds["lat"])
    coslat = np.cos(rlat)
    dlam, dphi = np.radians(RES), np.radians(RES)
    qu, qv = ds["qu"], ds["qv"]
    dqu = (qu.shift(lon=-1) - qu.shift(lon=1)) / (2 * dlam)
    qvc = qv * coslat
    dqv = (qvc.shift(lat=-1) - qvc.shift(lat=1)) / (2 * dphi)
    div = (dqu + dqv) / (a * coslat)
    LON, LAT = np.meshgrid(ds["lon"].values, ds["lat"].values)
    import xarray as xr

    mask = xr.DataArray(shapely.contains_xy(shapely.Polygon(list(zip(lon, lat))), LON, LAT), dims=("lat", "lon"))
    wts = coslat * mask
    conv = -(div * wts).sum(("lat", "lon")) / wts.sum()
    pw = (ds["w"] * wts).sum(("lat", "lon")) / wts.sum()
    return xr.Dataset({"c": conv, "p": pw}).compute()["c"].values


def rel_err(est, exact):
    return float(np.max(np.abs(est - exact)) / np.max(np.abs(exact)))


def run(nt: int, nbasins: int) -> dict:
    import warnings

    import xarray as xr

    import budget
    from budget.multi import compile_all, compute_many, unstack
    from budget.region import region_from_vertices

    warnings.simplefilter("ignore")
    path = regional_file(nt)
    basins = sub_basins(nbasins)
    fields = budget.open_fields(path)
    named = [(rid, region_from_vertices(lon, lat, name=rid)) for rid, lon, lat in basins]
    stencils = compile_all(fields, named)
    budget.compute(fields, named[0][1], stencil=stencils[0])  # warm: imports, page cache
    r = {"steps": nt, "basins": nbasins}
    r["one_s"], one = best_of(lambda: budget.compute(fields, named[0][1], stencil=stencils[0]))
    r["many_s"], stacked = best_of(lambda: compute_many(fields, named, stencils=stencils))
    many = unstack(stacked)
    t = time.perf_counter()
    singles = [budget.compute(fields, reg, stencil=st) for (_, reg), st in zip(named, stencils)]
    r["loop_s"] = time.perf_counter() - t
    diff = 0.0
    for a_, b_ in zip(many, singles):
        for v in ("p_minus_e", "vapour_convergence", "precipitable_water", "area_convergence"):
            scale = float(np.max(np.abs(b_[v].values)))
            diff = max(diff, float(np.max(np.abs(a_[v].values - b_[v].values))) / scale)
    r["many_vs_single_max_rel_diff"] = diff
    exact = [truth(lon, lat, nt) for _, lon, lat in basins]
    r["tool_rel_err"] = max(rel_err(m["vapour_convergence"].values, x) for m, x in zip(many, exact))
    ds = xr.open_dataset(path, chunks={"time": synthetic.TIME_CHUNK})
    k = min(nbasins, 10)
    for label, window in (("full", False), ("window", True)):
        by_hand(ds, basins[0][1], basins[0][2], window)  # warm
        r[f"hand_{label}_one_s"], c1 = best_of(lambda: by_hand(ds, basins[0][1], basins[0][2], window))
        t = time.perf_counter()
        cs = [by_hand(ds, lon, lat, window) for _, lon, lat in basins[:k]]
        r[f"hand_{label}_many_s"] = (time.perf_counter() - t) * nbasins / k
        r[f"hand_{label}_rel_err"] = max(rel_err(c, x) for c, x in zip(cs, exact[:k]))
    r["union_cells"] = int(np.unique(np.concatenate([st.touched for st in stencils])).size)
    r["one_cells"] = int(stencils[0].touched.size)
    return r


def print_table(r):
    n = r["basins"]
    print(f"\n{n} invented sub-basins, {r['steps']} hourly steps, regional 0.25° grid "
          f"(union of touched cells {r['union_cells']}, one basin {r['one_cells']})")
    scaled = f"measured on 10, scaled to {n}" if n > 10 else ""
    rows = [
        ("one basin (budget.compute)", r["one_s"], "", ""),
        (f"{n} basins, one pass (budget.multi)", r["many_s"], r["tool_rel_err"], ""),
        (f"{n} basins, one run each", r["loop_s"], "", ""),
        ("by hand, full grid, one basin", r["hand_full_one_s"], r["hand_full_rel_err"], ""),
        (f"by hand, full grid, {n} basins", r["hand_full_many_s"], "", scaled),
        ("by hand, windowed, one basin", r["hand_window_one_s"], r["hand_window_rel_err"], ""),
        (f"by hand, windowed, {n} basins", r["hand_window_many_s"], "", scaled),
    ]
    print(f"{'':<40}{'seconds':>10}{'rel. error':>12}")
    for label, s, err, note in rows:
        e = f"{err:.1e}" if err != "" else ""
        print(f"{label:<40}{s:>10.3f}{e:>12}  {note}")
    ratio = r["many_s"] / r["one_s"]
    print(f"\n{n} basins in one pass / one basin: {ratio:.2f}x  [{'met ' if ratio <= 3 else 'MISS'}] (target <= 3x)")
    print(f"one pass vs one run each: {r['loop_s'] / r['many_s']:.1f}x faster; "
          f"vs windowed by hand: {r['hand_window_many_s'] / r['many_s']:.1f}x; vs full grid by hand: {r['hand_full_many_s'] / r['many_s']:.1f}x")
    print(f"one pass vs single runs: max relative difference {r['many_vs_single_max_rel_diff']:.1e} (round-off)")
    print(f"load average: {os.getloadavg()[0]:.1f} (shared machine: compare rows of one run)")


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="96 steps")
    p.add_argument("--steps", type=int, default=None)
    p.add_argument("--basins", type=int, default=100)
    p.add_argument("--json", help="also write the figures here")
    a = p.parse_args(argv)
    nt = a.steps or (96 if a.quick else 720)
    r = run(nt, a.basins)
    print_table(r)
    if a.json:
        Path(a.json).write_text(json.dumps(r, indent=2))


if __name__ == "__main__":
    main()
