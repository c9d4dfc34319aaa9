"""Analytic vapour-flux fields on the sphere with closed-form divergence, for tests and benchmarks.

Importable as ``budget.testing`` so that the test suite and benchmarks/ share one generator.
The fields are invented test data, not weather.

Q = ∇χ + k × ∇ψ (CHECKS.md, "analytic test fields").  χ is a sum of spherical harmonics, so
∇·Q = ∇²χ = −l(l+1) χ_l / a² (CHECKS.md; any text on spherical harmonics), and the rotational
part k × ∇ψ contributes nothing to any closed boundary integral.
"""

from __future__ import annotations

import numpy as np
import shapely
import xarray as xr

from budget.catalogue import role as _role
from budget.constants import EARTH_RADIUS as A


def _cf(key: str) -> str:
    """The CF standard name the role catalogue writes out for role ``key``."""
    return _role(key).standard_names[0]

# χ = C1 sinφ cosφ cosλ (l=2, m=1) + C2 cos²φ sin2λ (l=2, m=2) + C3 sinφ (l=1)
C1, C2, C3 = 3.0e9, 1.5e9, 1.0e9
# ψ = D1 cos²φ cos2λ + D2 sin²φ  (any smooth function: it must not matter)
D1, D2 = 4.0e9, 2.0e9


def chi_terms(lam, phi):
    s, c = np.sin(phi), np.cos(phi)
    return (C1 * s * c * np.cos(lam), C2 * c**2 * np.sin(2 * lam), C3 * s)


def flux(lon_deg, lat_deg, rotational=True):
    """(Qu, Qv) in kg m-1 s-1 at the given points."""
    lam, phi = np.radians(lon_deg), np.radians(lat_deg)
    s, c = np.sin(phi), np.cos(phi)
    # ∇χ = ((1/(a cosφ)) ∂χ/∂λ, (1/a) ∂χ/∂φ)
    dchi_dlam = -C1 * s * c * np.sin(lam) + 2 * C2 * c**2 * np.cos(2 * lam)
    dchi_dphi = C1 * (c**2 - s**2) * np.cos(lam) - 2 * C2 * c * s * np.sin(2 * lam) + C3 * c
    qu = dchi_dlam / (A * c)
    qv = dchi_dphi / A
    if rotational:
        # k × ∇ψ = (−(1/a) ∂ψ/∂φ, (1/(a cosφ)) ∂ψ/∂λ)
        dpsi_dphi = -2 * D1 * c * s * np.cos(2 * lam) + 2 * D2 * s * c
        dpsi_dlam = -2 * D1 * c**2 * np.sin(2 * lam)
        qu = qu - dpsi_dphi / A
        qv = qv + dpsi_dlam / (A * c)
    return qu, qv


def flux_parts(lon_deg, lat_deg):
    """(Qu, Qv) of the divergent part ∇χ and of the rotational part k × ∇ψ, separately.

    A time-varying test field is g(t)·divergent + h(t)·rotational: its net import through any
    closed boundary is g(t) times that of ∇χ, whatever h(t) does.
    """
    qu_d, qv_d = flux(lon_deg, lat_deg, rotational=False)
    qu_a, qv_a = flux(lon_deg, lat_deg, rotational=True)
    return qu_d, qv_d, qu_a - qu_d, qv_a - qv_d


def divergence(lon_deg, lat_deg):
    """∇²χ, kg m-2 s-1: l(l+1) = 6 for the l=2 terms, 2 for the l=1 term."""
    t1, t2, t3 = chi_terms(np.radians(lon_deg), np.radians(lat_deg))
    return -(6 * (t1 + t2) + 2 * t3) / A**2


def area_integral_of_divergence(geom, order=8):
    """∬ ∇·Q dA over a lon-lat polygon (shapely), by Gauss quadrature on its triangles.

    dA = a² cosφ dλ dφ. Triangles come from shapely's constrained Delaunay triangulation;
    each is mapped to the reference triangle and integrated with a tensor Gauss-Legendre rule
    (Duffy collapse), accurate to round-off for these smooth integrands.
    """
    tris = shapely.get_parts(shapely.constrained_delaunay_triangles(geom))
    x, w = np.polynomial.legendre.leggauss(order)
    x = 0.5 * (x + 1)
    w = 0.5 * w
    U, V = np.meshgrid(x, x, indexing="ij")
    WU, WV = np.meshgrid(w, w, indexing="ij")
    # Duffy: (s, t) = (u, v (1 − u)), Jacobian (1 − u)
    S, T = U, V * (1 - U)
    Wt = WU * WV * (1 - U)
    total = 0.0
    for tri in tris:
        (x0, y0), (x1, y1), (x2, y2) = np.asarray(tri.exterior.coords)[:3]
        jac = abs((x1 - x0) * (y2 - y0) - (x2 - x0) * (y1 - y0))
        lon = x0 + S * (x1 - x0) + T * (x2 - x0)
        lat = y0 + S * (y1 - y0) + T * (y2 - y0)
        f = divergence(lon, lat) * A**2 * np.cos(np.radians(lat))
        total += np.sum(f * Wt) * jac * np.radians(1.0) ** 2
    return total


def column_dataset(res, lon0=-180.0, lon1=180.0, lat0=-90.0, lat1=90.0, periodic=True, ntime=3, descending=False, rotational=True):
    """A canonical column Dataset (qu, qv, w) on a res-degree grid of cell centres."""
    if periodic:
        lon = np.arange(lon0 + res / 2, lon0 + 360, res)
    else:
        lon = np.arange(lon0, lon1 + res / 2, res)
    lat = np.arange(lat0 + res / 2, lat1, res) if (lat0, lat1) == (-90.0, 90.0) else np.arange(lat0, lat1 + res / 2, res)
    LON, LAT = np.meshgrid(lon, lat)
    qu, qv = flux(LON, LAT, rotational)
    times = np.array(["2031-03-01T00", "2031-03-01T06", "2031-03-01T12", "2031-03-01T18"][:ntime], dtype="datetime64[ns]")
    grow = 1.0 + 0.1 * np.arange(ntime)  # the flux grows linearly in time
    w = 20.0 + 10.0 * np.cos(np.radians(LAT)) ** 2
    ds = xr.Dataset(
        {
            "qu": (("time", "lat", "lon"), grow[:, None, None] * qu, {"units": "kg m-1 s-1", "standard_name": _cf("qu")}),
            "qv": (("time", "lat", "lon"), grow[:, None, None] * qv, {"units": "kg m-1 s-1", "standard_name": _cf("qv")}),
            "w": (("time", "lat", "lon"), (w[None] * (1 + 0.05 * np.arange(ntime))[:, None, None]), {"units": "kg m-2", "standard_name": _cf("w")}),
        },
        coords={
            "time": ("time", times),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    if descending:
        ds = ds.isel(lat=slice(None, None, -1))
    return ds


# --------------------------------------------------------------------------------------
# a small level dataset of invented, plausible values (for tests of reading and checking)

#: Pressure levels of the small level dataset, Pa, top first.
LEVELS_PA = np.array([20000.0, 30000.0, 50000.0, 70000.0, 85000.0, 92500.0, 100000.0])


def level_dataset(nt=12, lon=None, lat=None, p=LEVELS_PA, ps=100000.0, u=10.0, v=2.0, q_surface=0.012):
    """A CF level Dataset (u, v, q on time × plev × lat × lon; ps) of uniform invented values.

    Winds are uniform (``u``, ``v`` m s-1), humidity decays upward as q_surface·(p/ps)³
    (kg kg-1), the surface pressure is ``ps`` Pa everywhere; hourly steps from 2031-06-01.
    Uniform winds carry no net import through any closed boundary on a lon-lat grid
    only approximately, so use it for checks of reading, units and plausibility, not budgets.
    """
    lon = np.arange(0.0, 20.5, 1.0) if lon is None else np.asarray(lon, float)
    lat = np.arange(30.0, 50.5, 1.0) if lat is None else np.asarray(lat, float)
    times = np.datetime64("2031-06-01T00:00", "ns") + np.arange(nt) * np.timedelta64(1, "h")
    shape4 = (nt, p.size, lat.size, lon.size)
    q = np.broadcast_to((q_surface * (p / ps) ** 3)[None, :, None, None], shape4)
    d4 = ("time", "plev", "lat", "lon")
    return xr.Dataset(
        {
            "u": (d4, np.full(shape4, float(u)), {"units": "m s-1", "standard_name": _cf("u")}),
            "v": (d4, np.full(shape4, float(v)), {"units": "m s-1", "standard_name": _cf("v")}),
            "q": (d4, np.array(q), {"units": "kg kg-1", "standard_name": _cf("q")}),
            "ps": (("time", "lat", "lon"), np.full((nt, lat.size, lon.size), float(ps)),
                   {"units": "Pa", "standard_name": _cf("ps")}),
        },
        coords={
            "time": ("time", times),
            "plev": ("plev", p, {"units": "Pa", "standard_name": "air_pressure"}),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"title": "invented test fields (not real weather)"},
    )
