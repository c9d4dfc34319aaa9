"""Synthetic fields for the benchmark, written to NetCDF once and reused from a cache folder.

The fields are analytic (budget.testing): Q = g(t)·∇χ + h(t)·k×∇ψ with χ a sum of
spherical harmonics, so the area-mean convergence over any polygon is known exactly:
−g(t)·∬∇²χ dA / area (divergence theorem; ∇²Y_l^m = −l(l+1)Y_l^m/a²).  Precipitable water
is (20 + 10 cos²φ)·(1 + 0.05 sin(2πt/24 h)).  Everything is float32 on disk.

Layout: uncompressed NetCDF-4, chunked in time (24 steps × the whole grid per chunk), the
time-chunked layout of a typical reanalysis download.  The cache folder lies outside the
repository: $FLUXFENCE_BENCH_CACHE or ~/.cache/fluxfence-bench.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from budget import testing as analytic  # noqa: E402  (one home for the analytic fields)

TIME_CHUNK = 24
STEP_HOURS = 1
T0 = np.datetime64("2031-01-01T00:00", "ns")


def cache_dir() -> Path:
    d = Path(os.environ.get("FLUXFENCE_BENCH_CACHE", Path.home() / ".cache" / "fluxfence-bench"))
    d.mkdir(parents=True, exist_ok=True)
    return d


def g_of_t(n):
    """Time factor of the divergent part at step n."""
    n = np.asarray(n, float)
    return 1.0 + 0.3 * np.sin(2 * np.pi * n / 72.0)


def h_of_t(n):
    """Time factor of the rotational part (it must not change any budget)."""
    n = np.asarray(n, float)
    return 1.0 + 0.5 * np.cos(2 * np.pi * n / 30.0)


def w_of_t(n):
    n = np.asarray(n, float)
    return 1.0 + 0.05 * np.sin(2 * np.pi * n / 24.0)


def global_grid(res=0.25):
    lon = np.arange(0.0, 360.0, res)  # 1440 centres, 0..359.75
    lat = np.arange(-90.0, 90.0 + res / 2, res)  # 721 centres, poles included
    return lon, lat


def _parts(lon, lat):
    LON, LAT = np.meshgrid(lon, lat)
    # keep the poles finite: the analytic flux divides by cos φ
    LATc = np.clip(LAT, -89.999, 89.999)
    w = 20.0 + 10.0 * np.cos(np.radians(LAT)) ** 2
    return (*analytic.flux_parts(LON, LATc), w)


def column_file(nt: int, res: float = 0.25, name: str | None = None) -> Path:
    """The global column file with ``nt`` hourly steps (written on first use)."""
    path = cache_dir() / (name or f"column_global_{res:g}deg_{nt}steps.nc")
    if path.exists():
        return path
    import netCDF4

    lon, lat = global_grid(res)
    qu_d, qv_d, qu_r, qv_r, w = _parts(lon, lat)
    tmp = path.with_suffix(".nc.tmp")
    with netCDF4.Dataset(tmp, "w", format="NETCDF4") as nc:
        nc.title = "Fluxfence benchmark: invented analytic column fields (not real weather)"
        nc.createDimension("time", nt)
        nc.createDimension("lat", lat.size)
        nc.createDimension("lon", lon.size)
        vt = nc.createVariable("time", "f8", ("time",))
        vt.units = "hours since 2031-01-01 00:00:00"
        vt.standard_name = "time"
        vt.calendar = "standard"
        vt[:] = np.arange(nt) * STEP_HOURS
        for nm, vals, units, sn in (("lat", lat, "degrees_north", "latitude"), ("lon", lon, "degrees_east", "longitude")):
            v = nc.createVariable(nm, "f8", (nm,))
            v.units, v.standard_name = units, sn
            v[:] = vals
        ch = (min(TIME_CHUNK, nt), lat.size, lon.size)
        specs = {
            "qu": ("kg m-1 s-1", "eastward_atmosphere_water_vapor_transport_across_unit_distance"),
            "qv": ("kg m-1 s-1", "northward_atmosphere_water_vapor_transport_across_unit_distance"),
            "w": ("kg m-2", "atmosphere_mass_content_of_water_vapor"),
        }
        vs = {}
        for nm, (units, sn) in specs.items():
            v = nc.createVariable(nm, "f4", ("time", "lat", "lon"), chunksizes=ch)
            v.units, v.standard_name = units, sn
            vs[nm] = v
        for t0 in range(0, nt, TIME_CHUNK):
            n = np.arange(t0, min(nt, t0 + TIME_CHUNK))
            g, h, f = g_of_t(n)[:, None, None], h_of_t(n)[:, None, None], w_of_t(n)[:, None, None]
            vs["qu"][t0 : t0 + n.size] = (g * qu_d + h * qu_r).astype(np.float32)
            vs["qv"][t0 : t0 + n.size] = (g * qv_d + h * qv_r).astype(np.float32)
            vs["w"][t0 : t0 + n.size] = (f * w).astype(np.float32)
    os.replace(tmp, path)
    return path


#: The 37 pressure levels of a common reanalysis distribution (hPa), top first.
LEVELS_HPA = np.array(
    [1, 2, 3, 5, 7, 10, 20, 30, 50, 70, 100, 125, 150, 175, 200, 225, 250, 300, 350, 400, 450,
     500, 550, 600, 650, 700, 750, 775, 800, 825, 850, 875, 900, 925, 950, 975, 1000], float
)
PS = 100000.0  # Pa, constant surface pressure: every level lies above ground


def q_profile(p_pa):
    """Specific humidity (kg/kg) decaying upward: 0.012 (p/ps)^3."""
    return 0.012 * (np.asarray(p_pa) / PS) ** 3


def wind_shape(p_pa):
    """Vertical shape of the wind: 1 + p/ps (dimensionless)."""
    return 1.0 + np.asarray(p_pa) / PS


def column_factor():
    """(1/g) Σ q_k s_k Δp_k with beta-factor layers written out by hand (every level above
    ground, ps = 1000 hPa = the bottom level): the factor relating the level wind
    amplitude to the column flux, so Q = U·factor exactly for the engine's layer scheme."""
    from budget.constants import STANDARD_GRAVITY

    p = LEVELS_HPA * 100.0
    mid = 0.5 * (p[1:] + p[:-1])
    upper = np.concatenate([[p[0]], mid])
    lower = np.concatenate([mid, [PS]])
    dp = lower - upper
    return float(np.sum(q_profile(p) * wind_shape(p) * dp) / STANDARD_GRAVITY)


def levels_file(nt: int, box=(-20.0, 25.0, 40.0, 65.0), res: float = 0.25) -> Path:
    """A regional 0.25° file on 37 pressure levels: u, v, q (time, level, lat, lon), ps."""
    w_, s_, e_, n_ = box
    path = cache_dir() / f"levels_{w_:g}_{s_:g}_{e_:g}_{n_:g}_{res:g}deg_{nt}steps.nc"
    if path.exists():
        return path
    import netCDF4

    lon = np.arange(w_, e_ + res / 2, res)
    lat = np.arange(s_, n_ + res / 2, res)
    qu_d, qv_d, qu_r, qv_r, _ = _parts(lon, lat)
    fac = column_factor()
    p = LEVELS_HPA * 100.0
    q = q_profile(p)[:, None, None]
    s = wind_shape(p)[:, None, None]
    tmp = path.with_suffix(".nc.tmp")
    with netCDF4.Dataset(tmp, "w", format="NETCDF4") as nc:
        nc.title = "Fluxfence benchmark: invented analytic level fields (not real weather)"
        for nm, size in (("time", nt), ("level", p.size), ("lat", lat.size), ("lon", lon.size)):
            nc.createDimension(nm, size)
        vt = nc.createVariable("time", "f8", ("time",))
        vt.units, vt.standard_name, vt.calendar = "hours since 2031-01-01 00:00:00", "time", "standard"
        vt[:] = np.arange(nt) * STEP_HOURS
        vl = nc.createVariable("level", "f8", ("level",))
        vl.units, vl.standard_name, vl.positive = "hPa", "air_pressure", "down"
        vl[:] = LEVELS_HPA
        for nm, vals, units, sn in (("lat", lat, "degrees_north", "latitude"), ("lon", lon, "degrees_east", "longitude")):
            v = nc.createVariable(nm, "f8", (nm,))
            v.units, v.standard_name = units, sn
            v[:] = vals
        ch = (1, p.size, lat.size, lon.size)
        vu = nc.createVariable("u", "f4", ("time", "level", "lat", "lon"), chunksizes=ch)
        vu.units, vu.standard_name = "m s-1", "eastward_wind"
        vv = nc.createVariable("v", "f4", ("time", "level", "lat", "lon"), chunksizes=ch)
        vv.units, vv.standard_name = "m s-1", "northward_wind"
        vq = nc.createVariable("q", "f4", ("time", "level", "lat", "lon"), chunksizes=ch)
        vq.units, vq.standard_name = "kg kg-1", "specific_humidity"
        vp = nc.createVariable("sp", "f4", ("time", "lat", "lon"), chunksizes=(1, lat.size, lon.size))
        vp.units, vp.standard_name = "Pa", "surface_air_pressure"
        qv_field = np.broadcast_to(q, (p.size, lat.size, lon.size)).astype(np.float32)
        for t in range(nt):
            g, h = float(g_of_t(t)), float(h_of_t(t))
            # q·u = q(p)·s(p)·U with U = (g Qd + h Qr)/factor, so (1/g)∫ q u dp = g Qd + h Qr
            U = (g * qu_d + h * qu_r) / fac
            V = (g * qv_d + h * qv_r) / fac
            vu[t] = (s * U[None]).astype(np.float32)
            vv[t] = (s * V[None]).astype(np.float32)
            vq[t] = qv_field
            vp[t] = np.full((lat.size, lon.size), PS, np.float32)
    os.replace(tmp, path)
    return path


if __name__ == "__main__":
    import time

    t = time.perf_counter()
    print(column_file(int(sys.argv[1]) if len(sys.argv) > 1 else 360))
    print(f"{time.perf_counter() - t:.1f} s")
