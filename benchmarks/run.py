"""Fluxfence benchmark: the stencil against a careful hand-written full-grid budget.

    python benchmarks/run.py            # full run (360 hourly steps on a global 0.25° grid)
    python benchmarks/run.py --quick    # 48 steps, a minute or two
    python benchmarks/run.py --json results.json

Every measurement runs in a fresh Python process, so its peak memory (VmHWM, reset after
imports and file opening) belongs to that measurement alone. See benchmarks/README.md.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

# Invented regions of our own (lon, lat vertices, counter-clockwise), away from the 0° seam.
#: about 1.1e5 km², a river-basin size
BASIN = ([13.5, 17.0, 18.2, 16.0, 12.6], [45.6, 45.9, 47.9, 49.1, 48.0])
#: about 8e6 km², a continent size
CONTINENT = ([70.0, 88.0, 103.0, 101.0, 86.0, 72.0, 66.0], [18.0, 15.0, 24.0, 38.0, 44.0, 41.0, 30.0])
REGIONS = {"basin": BASIN, "continent": CONTINENT}


# ------------------------------------------------------------------------------------------
# measurement helpers (run inside the child process)
def _rss_reset():
    """Reset the peak-RSS mark of this process (Linux: /proc/self/clear_refs, value 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        pass


def _status_kib(field):
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    return 0


def _read_chars():
    with open("/proc/self/io") as fh:
        for line in fh:
            if line.startswith("rchar:"):
                return int(line.split()[1])
    return 0


REPEATS = 3  # each timing is the best of this many runs (the machine may be shared)


def best_of(fn, repeats=None):
    """Run ``fn`` under a Meter ``repeats`` times: the fastest time, the largest peak memory,
    the bytes of the last run, and the last result."""
    runs = []
    for _ in range(repeats or REPEATS):
        with Meter() as m:
            res = fn()
        runs.append(m)
    best = min(runs, key=lambda r: r.seconds)
    best.peak_mib = max(r.peak_mib for r in runs)
    best.peak_above_start_mib = max(r.peak_above_start_mib for r in runs)
    best.bytes_read = runs[-1].bytes_read
    best.all_seconds = [r.seconds for r in runs]
    return best, res


class Meter:
    """Wall time, bytes read through read(2)/pread(2), and peak RSS of a phase."""

    def __enter__(self):
        import gc

        gc.collect()
        _rss_reset()
        self.rss0 = _status_kib("VmRSS")
        self.r0 = _read_chars()
        self.t0 = time.perf_counter()
        return self

    def __exit__(self, *exc):
        self.seconds = time.perf_counter() - self.t0
        self.bytes_read = _read_chars() - self.r0
        self.peak_mib = _status_kib("VmHWM") / 1024
        self.peak_above_start_mib = (_status_kib("VmHWM") - self.rss0) / 1024
        return False


def _region(name):
    from budget.region import region_from_vertices

    lon, lat = REGIONS[name]
    return region_from_vertices(lon, lat, name=name)


def _truth(name, nt):
    """Exact area-mean convergence (kg m-2 s-1) per step: −g(n) ∬∇²χ dA / area."""
    import shapely

    from benchmarks import synthetic
    from budget import sphere
    from budget import testing as analytic

    lon, lat = REGIONS[name]
    geom = shapely.Polygon(list(zip(lon, lat)))
    area = abs(sphere.ring_area(np.asarray(lon, float), np.asarray(lat, float)))
    return -synthetic.g_of_t(np.arange(nt)) * analytic.area_integral_of_divergence(geom) / area


def _rel_err(est, truth):
    return float(np.max(np.abs(est - truth)) / np.max(np.abs(truth)))


def measure_tool(path, region_name, nt, scheduler=None):
    import warnings

    warnings.simplefilter("ignore")
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.stencil import Grid, compile_stencil

    fields = open_fields(path)
    times = fields.times[:nt]
    region = _region(region_name)
    t = time.perf_counter()
    st = compile_stencil(region, Grid.from_fields(fields))
    compile_s = time.perf_counter() - t
    t = time.perf_counter()  # first call: imports, file handles (reported apart)
    compute(fields, region, stencil=st, end=str(times[1]), scheduler=scheduler)
    first_s = time.perf_counter() - t
    m, ds = best_of(lambda: compute(fields, region, stencil=st, end=str(times[-1]), scheduler=scheduler))
    conv = ds["vapour_convergence"].values
    area_conv = ds["area_convergence"].values
    truth = _truth(region_name, nt)
    ntouched = int(st.touched.size)
    return {
        "what": "tool", "region": region_name, "steps": int(conv.size), "seconds": m.seconds,
        "s_per_step": m.seconds / conv.size, "compile_s": compile_s, "first_call_s": first_s,
        "bytes_read": m.bytes_read, "floor_bytes": ntouched * 3 * conv.size * 4, "touched_cells": ntouched,
        "peak_mib": m.peak_mib, "peak_above_start_mib": m.peak_above_start_mib,
        "rel_err": _rel_err(conv, truth), "rel_err_area_method": _rel_err(area_conv, truth),
        "area_km2": st.area / 1e6,
    }


def measure_floor(path, region_name, nt):
    """A raw gather of the touched cells with h5py: one slab read per variable and storage
    chunk of time (the same slabs the tool reads), fancy-indexed to the cells, as float64."""
    import h5py

    from budget.fields import open_fields
    from budget.blocks import GATHER_GAP, runs
    from budget.stencil import Grid, compile_stencil

    fields = open_fields(path)
    st = compile_stencil(_region(region_name), Grid.from_fields(fields))
    rows, cols = st.rows, st.cols
    rr = runs(np.unique(rows), GATHER_GAP)
    cr = runs(np.unique(cols), GATHER_GAP)
    with h5py.File(path, "r") as h:
        for v in ("qu", "qv", "w"):
            h[v][0, 0, 0]  # open the datasets first
        def gather():
            step = h["qu"].chunks[0]
            for t0 in range(0, nt, step):
                t1 = min(nt, t0 + step)
                for v in ("qu", "qv", "w"):
                    out = np.empty((t1 - t0, rows.size))
                    for r0, r1 in rr:
                        for c0, c1 in cr:
                            sel = (rows >= r0) & (rows < r1) & (cols >= c0) & (cols < c1)
                            slab = h[v][t0:t1, r0:r1, c0:c1]
                            out[:, sel] = slab[:, rows[sel] - r0, cols[sel] - c0]

        m, _ = best_of(gather)
    return {"what": "floor", "region": region_name, "steps": nt, "seconds": m.seconds,
            "s_per_step": m.seconds / nt, "bytes_read": m.bytes_read, "peak_mib": m.peak_mib,
            "peak_above_start_mib": m.peak_above_start_mib}


def measure_baseline(path, region_name, nt):
    """What a careful user writes by hand with xarray: centred-difference divergence on the
    sphere over the whole grid (periodic in longitude), a cell-centre mask of the polygon,
    cos(lat)-weighted means, computed lazily in the file's time chunks."""
    import warnings

    import shapely
    import xarray as xr

    from budget.constants import EARTH_RADIUS as a

    warnings.simplefilter("ignore")
    lon_v, lat_v = REGIONS[region_name]
    poly = shapely.Polygon(list(zip(lon_v, lat_v)))
    ds_all = xr.open_dataset(path, chunks={"time": 24})

    def budget(ds):
        lat = np.radians(ds["lat"])
        coslat = np.cos(lat)
        dlam = np.radians(float(ds["lon"][1] - ds["lon"][0]))
        dphi = np.radians(float(ds["lat"][1] - ds["lat"][0]))
        qu, qv = ds["qu"], ds["qv"]
        dqu = (qu.roll(lon=-1) - qu.roll(lon=1)) / (2 * dlam)
        qvc = qv * coslat
        dqv = (qvc.shift(lat=-1) - qvc.shift(lat=1)) / (2 * dphi)
        div = (dqu + dqv) / (a * coslat)
        LON, LAT = np.meshgrid(ds["lon"].values, ds["lat"].values)
        mask = xr.DataArray(shapely.contains_xy(poly, LON, LAT), dims=("lat", "lon"))
        wts = coslat * mask
        conv = -(div * wts).sum(("lat", "lon")) / wts.sum()
        pw = (ds["w"] * wts).sum(("lat", "lon")) / wts.sum()
        return xr.Dataset({"c": conv, "p": pw}).compute().to_array().values

    budget(ds_all.isel(time=slice(0, 1)))  # first call: imports, file handles
    m, (conv, pw) = best_of(lambda: budget(ds_all.isel(time=slice(0, nt))))
    truth = _truth(region_name, nt)
    return {"what": "baseline", "region": region_name, "steps": nt, "seconds": m.seconds,
            "s_per_step": m.seconds / nt, "bytes_read": m.bytes_read, "peak_mib": m.peak_mib,
            "peak_above_start_mib": m.peak_above_start_mib, "rel_err": _rel_err(conv, truth)}


def measure_levels(path, region_name, nt):
    """The 3-D case: u, v, q on 37 pressure levels and ps, regional 0.25° grid."""
    import warnings

    warnings.simplefilter("ignore")
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.stencil import Grid, compile_stencil

    fields = open_fields(path)
    region = _region(region_name)
    t = time.perf_counter()
    st = compile_stencil(region, Grid.from_fields(fields))
    compile_s = time.perf_counter() - t
    compute(fields, region, stencil=st, end=str(fields.times[1]))  # first call
    m, ds = best_of(lambda: compute(fields, region, stencil=st, end=str(fields.times[nt - 1])))
    conv = ds["vapour_convergence"].values
    unc = ds["vapour_convergence_uncorrected"].values if "vapour_convergence_uncorrected" in ds else conv
    truth = _truth(region_name, nt)
    return {"what": "levels", "region": region_name, "steps": int(conv.size), "seconds": m.seconds,
            "s_per_step": m.seconds / conv.size, "compile_s": compile_s, "bytes_read": m.bytes_read,
            "floor_bytes": int(st.touched.size) * (3 * fields.ds.sizes["level"] + 1) * conv.size * 4,
            "peak_mib": m.peak_mib, "peak_above_start_mib": m.peak_above_start_mib,
            "rel_err": _rel_err(unc, truth), "levels": int(fields.ds.sizes["level"]),
            "grid": f"{fields.lat.size}x{fields.lon.size}",
            "mass_correction": ds.attrs.get("mass_correction", "n/a")}


def measure_dashboard(repeats=5):
    """The dashboard's recompute after a region change: a new region on the bundled sample
    fields (already open), compiled and computed with profiles, as its background job does."""
    import warnings

    warnings.simplefilter("ignore")
    import sample_fields
    from budget.fields import open_fields
    from budget.ledger import compute
    from budget.region import load_region, region_from_vertices

    paths = sample_fields.ensure_sample()
    out = {}
    for kind in ("levels", "column"):
        fields = open_fields(getattr(paths, kind))
        basin = load_region(path=paths.basin)
        compute(fields, basin, profiles=True).load()  # warm: imports, file handles
        lon0 = np.asarray(basin.parts[0].exterior.lon, float)
        lat0 = np.asarray(basin.parts[0].exterior.lat, float)
        times = []
        for k in range(repeats):
            # the user drags one vertex: a new region every time
            lon = lon0.copy()
            lon[0] += 0.3 * (k + 1)
            region = region_from_vertices(lon, lat0, name=f"edited {k}")
            t = time.perf_counter()
            compute(fields, region, profiles=True).load()
            times.append(time.perf_counter() - t)  # every repeat is a new region: no best-of
        out[kind] = {"median_s": float(np.median(times)), "max_s": float(np.max(times)),
                     "grid": f"{fields.lat.size}x{fields.lon.size}", "steps": int(fields.times.size),
                     "levels": int(fields.ds.sizes.get("level", 1))}
    return {"what": "dashboard", **out}


# ------------------------------------------------------------------------------------------
# the parent: orchestrates child processes and prints the table
def _child(args: list[str]) -> dict:
    env = dict(os.environ)
    env.setdefault("PYTHONWARNINGS", "ignore")
    cmd = [sys.executable, str(Path(__file__).resolve()), "--measure", *map(str, args)]
    res = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=str(ROOT))
    if res.returncode != 0:
        raise SystemExit(f"benchmark step {' '.join(map(str, args))} failed:\n{res.stderr[-3000:]}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def _fmt_bytes(n):
    for unit in ("B", "KiB", "MiB", "GiB"):
        if abs(n) < 1024 or unit == "GiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="48 steps and fewer checks (a minute or two)")
    ap.add_argument("--steps", type=int, help="time steps of the global record (default 360; quick 48)")
    ap.add_argument("--level-steps", type=int, help="time steps of the 3-D case (default 48; quick 12)")
    ap.add_argument("--json", help="also write every figure to this JSON file")
    ap.add_argument("--measure", nargs="+", help=argparse.SUPPRESS)
    a = ap.parse_args(argv)

    if a.measure:
        kind, *rest = a.measure
        if kind == "tool":
            r = measure_tool(rest[0], rest[1], int(rest[2]), rest[3] if len(rest) > 3 and rest[3] != "-" else None)
        elif kind == "floor":
            r = measure_floor(rest[0], rest[1], int(rest[2]))
        elif kind == "baseline":
            r = measure_baseline(rest[0], rest[1], int(rest[2]))
        elif kind == "levels":
            r = measure_levels(rest[0], rest[1], int(rest[2]))
        elif kind == "dashboard":
            r = measure_dashboard()
        elif kind == "page":
            from benchmarks.browser_latency import measure

            r = measure()
        else:
            raise SystemExit(f"unknown measurement {kind}")
        print(json.dumps(r))
        return 0

    from benchmarks import synthetic

    nt = a.steps or (48 if a.quick else 360)
    nl = a.level_steps or (12 if a.quick else 48)
    short = max(2, nt // 10)
    t_all = time.perf_counter()
    print(f"Fluxfence benchmark ({'quick' if a.quick else 'full'}): cache {synthetic.cache_dir()}", flush=True)
    t = time.perf_counter()
    path = synthetic.column_file(nt)
    lpath = synthetic.levels_file(nl)
    print(f"synthetic fields ready in {time.perf_counter() - t:.1f} s: {path.name} ({_fmt_bytes(path.stat().st_size)}), "
          f"{lpath.name} ({_fmt_bytes(lpath.stat().st_size)})", flush=True)
    # read each file once so every contender starts from a warm page cache
    for p in (path, lpath):
        with open(p, "rb") as fh:
            while fh.read(64 * 2**20):
                pass

    results = {"steps": nt, "level_steps": nl, "cpu": os.cpu_count(), "regions": {},
               "load_before": os.getloadavg()[0]}
    for name in REGIONS:
        print(f"measuring {name} ...", flush=True)
        tool = _child(["tool", path, name, nt])
        base = _child(["baseline", path, name, nt])
        floor = _child(["floor", path, name, nt])
        tool_short = _child(["tool", path, name, short])
        results["regions"][name] = {"tool": tool, "baseline": base, "floor": floor, "tool_short": tool_short}
    print("measuring the 3-D case and the dashboard recompute ...", flush=True)
    results["levels"] = _child(["levels", lpath, "basin", nl])
    results["dashboard"] = _child(["dashboard"])
    if Path("/usr/bin/chromium").exists():
        print("measuring the dashboard in the browser ...", flush=True)
        results["page"] = _child(["page"])
    results["total_s"] = time.perf_counter() - t_all
    results["load_after"] = os.getloadavg()[0]

    print_table(results)
    if a.json:
        Path(a.json).write_text(json.dumps(results, indent=2))
    return 0


def print_table(r):
    nt = r["steps"]
    print()
    print(f"Global 0.25° grid (721 x 1440), {nt} hourly steps, float32 column fields (qu, qv, w), "
          f"NetCDF-4 uncompressed, chunks of 24 steps x whole grid; warm page cache; {r['cpu']} cores")
    head = f"{'':34}" + "".join(f"{n:>22}" for n in r["regions"])
    print(head)

    def row(label, fn):
        print(f"{label:34}" + "".join(f"{fn(v):>22}" for v in r["regions"].values()))

    row("region area (km²)", lambda v: f"{v['tool']['area_km2']:,.0f}")
    row("touched cells", lambda v: f"{v['tool']['touched_cells']:,}")
    row("stencil compile (s)", lambda v: f"{v['tool']['compile_s']:.3f}")
    row("tool first call, 2 steps (s)", lambda v: f"{v['tool']['first_call_s']:.3f}")
    row("tool: ms per step", lambda v: f"{1e3 * v['tool']['s_per_step']:.3f}")
    row("baseline: ms per step", lambda v: f"{1e3 * v['baseline']['s_per_step']:.2f}")
    row("speed-up (baseline / tool)", lambda v: f"{v['baseline']['s_per_step'] / v['tool']['s_per_step']:.0f}x")
    row("raw h5py gather: ms per step", lambda v: f"{1e3 * v['floor']['s_per_step']:.3f}")
    row("tool / raw gather", lambda v: f"{v['tool']['s_per_step'] / v['floor']['s_per_step']:.2f}x")
    row("tool error (boundary)", lambda v: f"{v['tool']['rel_err']:.2e}")
    row("tool error (area method)", lambda v: f"{v['tool']['rel_err_area_method']:.2e}")
    row("baseline error (cell mask)", lambda v: f"{v['baseline']['rel_err']:.2e}")
    row("tool bytes read", lambda v: _fmt_bytes(v["tool"]["bytes_read"]))
    row("touched-cell bytes (floor)", lambda v: _fmt_bytes(v["tool"]["floor_bytes"]))
    row("tool read / floor", lambda v: f"{v['tool']['bytes_read'] / v['tool']['floor_bytes']:.2f}x")
    row("baseline bytes read", lambda v: _fmt_bytes(v["baseline"]["bytes_read"]))
    row("tool peak RSS (MiB)", lambda v: f"{v['tool']['peak_mib']:.0f}")
    row("  of which above start", lambda v: f"{v['tool']['peak_above_start_mib']:.0f}")
    row("baseline peak RSS (MiB)", lambda v: f"{v['baseline']['peak_mib']:.0f}")
    row("  of which above start", lambda v: f"{v['baseline']['peak_above_start_mib']:.0f}")
    short = next(iter(r["regions"].values()))["tool_short"]["steps"]
    row(f"tool peak RSS, {short} steps (MiB)", lambda v: f"{v['tool_short']['peak_mib']:.0f}")
    row(f"memory {nt} / {short} steps", lambda v: f"{v['tool']['peak_mib'] / v['tool_short']['peak_mib']:.2f}x")
    lv = r["levels"]
    print()
    print(f"3-D case: {lv['levels']} pressure levels, regional 0.25° grid {lv['grid']}, {lv['steps']} steps, basin")
    print(f"  tool: {1e3 * lv['s_per_step']:.2f} ms per step, compile {lv['compile_s']:.3f} s, "
          f"read {_fmt_bytes(lv['bytes_read'])} (touched-cell floor {_fmt_bytes(lv['floor_bytes'])}), "
          f"peak RSS {lv['peak_mib']:.0f} MiB, error {lv['rel_err']:.2e} (uncorrected convergence), "
          f"mass correction: {lv['mass_correction']}")
    d = r["dashboard"]
    print()
    print("Engine recompute for a dashboard region (engine only, not the page; bundled sample fields, profiles on, fields already open):")
    for kind in ("levels", "column"):
        v = d[kind]
        print(f"  {kind:7} ({v['grid']}, {v['levels']} levels, {v['steps']} steps): median {v['median_s']:.3f} s, worst {v['max_s']:.3f} s")
    pg = r.get("page")
    if pg:
        print("Dashboard in headless Chromium (benchmarks/browser_latency.py): a typed box to its "
              f"budget drawn: median {pg['page_median_s']:.2f} s, worst {pg['page_max_s']:.2f} s; "
              f"the engine alone on the same boxes: median {pg['engine_median_s']:.3f} s")
    print()
    b = r["regions"]["basin"]
    checks = [
        ("basin ≥ 50x faster than the baseline", b["baseline"]["s_per_step"] / b["tool"]["s_per_step"] >= 50),
        ("basin at equal or better accuracy", b["tool"]["rel_err"] <= b["baseline"]["rel_err"]),
        ("basin within 3x of the raw gather", b["tool"]["s_per_step"] <= 3 * b["floor"]["s_per_step"]),
        ("continent within 3x of the raw gather", r["regions"]["continent"]["tool"]["s_per_step"] <= 3 * r["regions"]["continent"]["floor"]["s_per_step"]),
        ("memory flat: 10x record ≤ 1.2x peak", all(v["tool"]["peak_mib"] <= 1.2 * v["tool_short"]["peak_mib"] for v in r["regions"].values())),
        ("engine recompute for a dashboard region < 0.5 s", all(d[k]["median_s"] < 0.5 for k in ("levels", "column"))),
        *([("dashboard in the browser: region to budget < 1 s", pg["page_median_s"] < 1.0)] if pg else []),
    ]
    for label, ok in checks:
        print(f"  [{'met ' if ok else 'MISS'}] {label}")
    print(f"benchmark wall time {r['total_s']:.0f} s; 1-minute load average {r['load_before']:.1f} before, "
          f"{r['load_after']:.1f} after (above {r['cpu']} means other work shared the cores)")


if __name__ == "__main__":
    sys.exit(main())
