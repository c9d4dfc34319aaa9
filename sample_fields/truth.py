"""The invented demonstration event in closed form, and its exact water-vapour budget.

Invented demonstration scenario for Fluxfence — not real weather.  Every field of the demo
files is sampled from the formulas in this module, so the budget of any polygon is known
without using the engine (this module never imports budget.stencil or budget.ledger; it only
takes g and the Earth radius from budget.constants).

The scenario
------------
An atmospheric-river-like moisture plume, oriented south-west to north-east, drifts east across
a regional domain (longitude -10..20 E, latitude 35..55 N) over five days from ``START``.  It
strengthens to a peak near day 2.6 and then weakens.  A low-level jet runs along the plume
axis and carries on past the plume's north-eastern tip, where the moisture ends: the jet brings
moist air into drier air there, and that is where the vapour converges.  The tip passes over
the invented basin around the peak, so the basin's P − E rises from about 4 mm/day to about
35 mm/day and falls back.  A north-south mountain ridge near 11.5 E lowers the surface pressure
to about 790 hPa; the basin's eastern edge climbs its western slope.

Mass consistency.  The column air-mass flux M = (1/g) ∫ V dp is non-divergent by construction
(a zonal background that depends on latitude only plus k × ∇ψ for the jet, see
``air_mass_flux``) and the surface pressure is steady, so the air's column budget closes
exactly.  The dry air then closes except for the vapour the budget removes: its continuum
residual dμ/dt + ∇·F (μ = (ps − p_top)/g − W, F = M − Q) equals P − E, i.e. g (P − E) ≈ 0.4 to
3.4 hPa/day on the basin, and a barotropic correction (Trenberth 1991) changes the basin's
P − E by only ~W/μ ≈ 0.3 %.  The vapour itself is not conserved along the flow (the plume's
shape is prescribed, not advected): the difference is the invented P − E.

Vertical structure (closed form).  With s = p / P0 (P0 = 1000 hPa)::

    q(p)    = q0(lon, lat, t) * s**ALPHA                          specific humidity
    u, v(p) = (U0, V0)(lon, lat, t) * (1 + KAPPA * (1 - s))        wind, stronger aloft
    (U0, V0) = M / S(ps),   S(ps) = (1/g) ∫ (1 + KAPPA (1 - s)) dp from P_TOP to ps

so the wind at a level is faster where the column is shorter (over the ridge).  The column runs
from the top level P_TOP (200 hPa, the top level of the files, which is where a layer sum on
those files starts) down to the surface pressure ps, so::

    W  = (1/g) ∫ q dp   = q0 * (P0/g) [s**(A+1)/(A+1)]                                 from s_top to s_s
    Qu = (1/g) ∫ q u dp = q0 U0 (P0/g) [(1+K) s**(A+1)/(A+1) - K s**(A+2)/(A+2)]     from s_top to s_s

and Qv likewise with V0.  All horizontal and time dependence uses exp, tanh and polynomials,
so every function here is analytic and accepts complex arguments: derivatives are taken by the
complex-step method (Squire and Trefethen 1998, SIAM Review 40, 110-112), exact to rounding.

What is exact and what a discrete method should reproduce
---------------------------------------------------------
``exact_budget`` gives the continuum budget of the polygon: boundary import by Gauss-Legendre
quadrature of a·(Qu dφ − Qv cos φ dλ) on densely subdivided edges, area means by a
Gauss-Legendre rule on the exact polygon (edges straight in longitude-latitude), dW/dt from the
complex-step time derivative.  These are converged to about 1e-12 relative.

A method working on the files cannot reach that: the levels file holds 11 pressure levels
(1000, 950, 900, 850, 800, 700, 600, 500, 400, 300, 200 hPa), the grid is 0.5°, the times are
6-hourly and the stored values are rounded to 16 mantissa bits (relative 7.6e-6, negligible).
``discretisation_estimates`` measures, for a polygon, the part of the difference each
discretisation alone causes.  For the bundled basin over the 21 file times:

* beta-factor layer sum on the 11 levels vs the continuum column: area-mean W +0.43..+0.45 %,
  import +0.38..+0.75 % (the humidity profile is convex in p, so the layer sum is high);
  pointwise over the grid up to 6.3 % in W and 4.5 % in IVT where the surface lies between
  the widely spaced 800 and 700 hPa levels on the ridge;
* exact column values on the 0.5° grid, bilinearly interpolated to the boundary: import
  −0.7..−2.4 %;
* centred 6-hourly difference of the exact area-mean W (one-sided at the ends) vs the
  analytic dW/dt: at most 4.9 % of the event's largest |dW/dt|, mostly at the two ends.

For the dry air the same two discretisations give the basin's net dry-air import an error of
at most about 1 hPa/day each (0.02 % of the gross air flux through the boundary; the layer sum
of the linear shear profile is up to 0.6 % high where the surface lies between the 800 and
700 hPa levels), and
together at most 0.6 hPa/day: an engine's dry-air residual on the levels file is g (P − E)
within about 1 hPa/day.

So an engine on the levels file should land within about 1 % of W and 3 % of convergence
(boundary method); on the column file within about 0.1 % of W and 2 % of convergence.  P−E
inherits the convergence error plus the tendency error.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from budget.constants import EARTH_RADIUS, STANDARD_GRAVITY

# ----------------------------------------------------------------------------------------
# Scenario parameters (all invented)
# ----------------------------------------------------------------------------------------

#: First time of the event (UTC); the files hold 21 six-hourly times from here.
START = np.datetime64("2025-01-15T00:00:00", "ns")
#: Time step of the files, s.
STEP_SECONDS = 6 * 3600.0
#: Number of time steps in the files (five days, both ends included).
N_TIMES = 21

#: Pressure levels of the levels file, Pa (surface first, as many reanalysis files are).
LEVELS_PA = np.array([1000, 950, 900, 850, 800, 700, 600, 500, 400, 300, 200], dtype=float) * 100.0
#: Reference pressure of the vertical profiles, Pa.
P0 = 100000.0
#: Top of the column: the top level of the files, Pa.
P_TOP = float(LEVELS_PA.min())
#: Exponent of the humidity profile q ∝ (p/P0)**ALPHA (moisture concentrated low down).
ALPHA = 3.0
#: Vertical shear of the wind: speed × (1 + KAPPA (1 − p/P0)).
KAPPA = 1.2

#: Grid of the files: 0.5° longitude-latitude.
LON = np.round(np.arange(-10.0, 20.0 + 1e-9, 0.5), 6)
LAT = np.round(np.arange(35.0, 55.0 + 1e-9, 0.5), 6)

#: The bundled basin (invented): vertices (lon, lat) in degrees, counter-clockwise, not closed.
BASIN_LON = np.array([5.0, 6.6, 8.1, 9.4, 10.6, 10.9, 10.3, 10.8, 9.6, 8.2, 6.9, 5.6, 4.6, 4.9, 4.2])
BASIN_LAT = np.array([42.6, 42.3, 42.9, 42.7, 43.6, 44.9, 45.8, 47.0, 47.9, 47.6, 48.2, 47.4, 46.3, 45.0, 43.8])
BASIN_NAME = "Invented basin (demo)"

_THETA = np.deg2rad(35.0)  # plume axis, degrees north of east
_COS45 = np.cos(np.deg2rad(45.0))
_G = STANDARD_GRAVITY
_A = EARTH_RADIUS

#: Where the plume axis crosses 45 N at ``START`` (degrees east) and its eastward drift, ° per day.
AXIS_LON0 = -4.9
AXIS_DRIFT = 4.5
#: Peak mass flux of the jet (kg m-1 s-1) and its half-width (Gaussian σ, degrees).
JET_MASS_FLUX = 12.0 * 12000.0
JET_SIGMA = 1.6
#: The jet's exit: past ``JET_EXIT`` degrees along the axis it widens ``1 + JET_SPREAD`` times
#: (over ``JET_EXIT_WIDTH`` degrees), keeping its mass flux and slowing down.
JET_EXIT, JET_EXIT_WIDTH, JET_SPREAD = 5.0, 2.5, 2.0
#: Moisture plume: extra q at P0 (kg kg-1), Gaussian half-width (degrees), and its tip (degrees
#: along the axis, fading over ``TIP_WIDTH`` degrees).
PLUME_Q, PLUME_SIGMA, TIP, TIP_WIDTH = 0.0080, 2.0, 3.0, 2.0


def seconds_since_start(times) -> np.ndarray:
    """Times as float seconds since ``START``; accepts datetime64 values or plain seconds."""
    t = np.asarray(times)
    if np.issubdtype(t.dtype, np.datetime64):
        return (t.astype("datetime64[ns]") - START) / np.timedelta64(1, "s")
    return t


# ----------------------------------------------------------------------------------------
# Horizontal structure at the reference level (analytic, complex-safe)
# ----------------------------------------------------------------------------------------


def _amplitude(t):
    day = t / 86400.0
    return 0.15 + 0.85 * np.exp(-(((day - 2.6) / 1.3) ** 2))


def _axis(lon, lat, t):
    """Across-axis and along-axis coordinates d, s (degrees) of the drifting plume axis."""
    day = t / 86400.0
    lon_c = AXIS_LON0 + AXIS_DRIFT * day  # the axis crosses 45 N here
    x = (lon - lon_c) * _COS45
    y = lat - 45.0
    d = -x * np.sin(_THETA) + y * np.cos(_THETA)  # across the axis, degrees (positive to the NW)
    s = x * np.cos(_THETA) + y * np.sin(_THETA)  # along the axis, degrees (positive to the NE)
    return d, s


def q_ref(lon, lat, t):
    """Specific humidity at P0, kg kg-1: background drier to the north plus the plume.

    The plume's moisture ends at its tip (``TIP`` degrees along the axis) while the jet carries
    on, so the jet brings moist air into drier air there: that is where the vapour converges.
    """
    d, s = _axis(lon, lat, t)
    tip = 0.5 * (1.0 - np.tanh((s - TIP) / TIP_WIDTH))
    plume = PLUME_Q * _amplitude(t) * np.exp(-(d**2) / (2 * PLUME_SIGMA**2)) * tip
    return 0.0045 - 0.00012 * (lat - 45.0) + plume


def air_mass_flux(lon, lat, t):
    """Column air-mass flux M = (1/g) ∫ V dp from the top level to ps, kg m-1 s-1.

    M = M_bg + k × ∇ψ is non-divergent on the sphere: the background M_bg is zonal and depends
    on latitude only, and the jet has a stream function ψ(λ, φ, t) with
    M = (−(1/a) ∂ψ/∂φ, (1/(a cos φ)) ∂ψ/∂λ) (CHECKS.md), derivatives in closed form.  In the
    plume's axis coordinates (d across, s along, degrees)

        ψ = −J amp(t) a (π/180) σ0 √(π/2) erf(d / (σ(s) √2)),

    a jet of peak flux J amp(t) and half-width σ0 that widens to σ(s) past its exit, keeping
    its mass flux (the difference of ψ across it) and slowing down.  With ps steady, the
    continuum dry-air budget then closes except for the vapour the budget itself removes.
    """
    d, s = _axis(lon, lat, t)
    z = (s - JET_EXIT) / JET_EXIT_WIDTH
    sigma = JET_SIGMA * (1.0 + JET_SPREAD * 0.5 * (1.0 + np.tanh(z)))
    dsigma = JET_SIGMA * JET_SPREAD * 0.5 / np.cosh(z) ** 2 / JET_EXIT_WIDTH  # dσ/ds
    f_d = JET_SIGMA / sigma * np.exp(-(d**2) / (2 * sigma**2))  # ∂F/∂d with F = ψ / (−J amp a π/180)
    f_s = -f_d * d / sigma * dsigma  # ∂F/∂s
    jet = JET_MASS_FLUX * _amplitude(t)
    sin_t, cos_t = np.sin(_THETA), np.cos(_THETA)
    # ∂d/∂lat = cos θ, ∂s/∂lat = sin θ; ∂d/∂lon = −sin θ cos45, ∂s/∂lon = cos θ cos45
    mu_jet = jet * (f_d * cos_t + f_s * sin_t)
    mv_jet = jet * _COS45 / np.cos(lat * (np.pi / 180.0)) * (f_d * sin_t - f_s * cos_t)
    background = _air_factor(P0) * (3.0 + 3.0 * np.exp(-(((lat - 50.0) / 6.0) ** 2)))
    return background + mu_jet, mv_jet


def jet_stream_function(lon, lat, t):
    """The jet's stream function ψ, kg s-1 (see ``air_mass_flux``); complex-safe.

    ``air_mass_flux`` uses its derivatives in closed form; ψ itself is here for checking them.
    """
    from scipy.special import erf  # accepts complex arguments

    d, s = _axis(lon, lat, t)
    sigma = JET_SIGMA * (1.0 + JET_SPREAD * 0.5 * (1.0 + np.tanh((s - JET_EXIT) / JET_EXIT_WIDTH)))
    scale = JET_MASS_FLUX * _amplitude(t) * _A * np.pi / 180.0
    return -scale * JET_SIGMA * np.sqrt(np.pi / 2.0) * erf(d / (sigma * np.sqrt(2.0)))


def wind_ref(lon, lat, t):
    """Wind (u, v) at P0, m s-1: M / S(ps), so the column's air-mass flux is M.

    S(ps) = (1/g) ∫ (1 + KAPPA (1 − p/P0)) dp from the top level to ps; where the column is
    shorter (over the ridge) the same mass flux needs a faster wind.
    """
    mu, mv = air_mass_flux(lon, lat, t)
    s = _air_factor(surface_pressure(lon, lat, t))
    return mu / s, mv / s


def surface_height(lon, lat):
    """Height of the invented ridge, m (north-south, slightly tilted, near 11.5 E)."""
    axis = 11.5 + 0.25 * (lat - 46.0)
    return 2000.0 * np.exp(-(((lon - axis) / 1.3) ** 2)) * np.exp(-(((lat - 46.0) / 4.5) ** 2))


def surface_pressure(lon, lat, t=0.0):
    """Surface pressure ps, Pa: steady; sea-level pressure falling to the north, scale height 8 km.

    Steady, so that with the non-divergent air-mass flux the dry air nearly closes; ``t`` is
    accepted (and broadcast) for the same signature as the other fields.
    """
    psl = 101500.0 - 900.0 * np.tanh((lat - 47.0) / 8.0) + 0.0 * t
    return psl * np.exp(-surface_height(lon, lat) / 8000.0)


# ----------------------------------------------------------------------------------------
# Profiles on pressure (what the levels file samples) and their column integrals
# ----------------------------------------------------------------------------------------


def specific_humidity(lon, lat, p, t):
    """q at pressure p (Pa), kg kg-1, for the air above the ground (no ground check here)."""
    return q_ref(lon, lat, t) * (p / P0) ** ALPHA


def wind(lon, lat, p, t):
    """(u, v) at pressure p (Pa), m s-1, for the air above the ground."""
    u, v = wind_ref(lon, lat, t)
    shear = 1.0 + KAPPA * (1.0 - p / P0)
    return u * shear, v * shear


def _air_factor(ps):
    """(1/g) ∫ (1 + KAPPA (1 − p/P0)) dp from P_TOP to ps, kg m-2 per unit wind_ref."""
    st, ss = P_TOP / P0, ps / P0
    return P0 / _G * ((1 + KAPPA) * (ss - st) - KAPPA * (ss**2 - st**2) / 2)


def _w_factor(ps):
    """(1/g) ∫ (p/P0)**ALPHA dp from P_TOP to ps, Pa / (m s-2) = kg m-2 per unit q."""
    st, ss = P_TOP / P0, ps / P0
    n = ALPHA + 1.0
    return P0 / _G * (ss**n - st**n) / n


def _q_factor(ps):
    """(1/g) ∫ (p/P0)**ALPHA (1 + KAPPA (1 − p/P0)) dp from P_TOP to ps."""
    st, ss = P_TOP / P0, ps / P0
    n1, n2 = ALPHA + 1.0, ALPHA + 2.0
    return P0 / _G * ((1 + KAPPA) * (ss**n1 - st**n1) / n1 - KAPPA * (ss**n2 - st**n2) / n2)


def precipitable_water(lon, lat, t):
    """Continuum W = (1/g) ∫ q dp from the top level to ps, kg m-2 (t in s since START)."""
    return q_ref(lon, lat, t) * _w_factor(surface_pressure(lon, lat, t))


def vapour_flux(lon, lat, t):
    """Continuum (Qu, Qv) = (1/g) ∫ q (u, v) dp from the top level to ps, kg m-1 s-1."""
    f = q_ref(lon, lat, t) * _q_factor(surface_pressure(lon, lat, t))
    u, v = wind_ref(lon, lat, t)
    return f * u, f * v


def qu(lon, lat, t):
    """Eastward column vapour flux Qu, kg m-1 s-1 (t in s since START)."""
    return vapour_flux(lon, lat, t)[0]


def qv(lon, lat, t):
    """Northward column vapour flux Qv, kg m-1 s-1 (t in s since START)."""
    return vapour_flux(lon, lat, t)[1]


def pw_tendency(lon, lat, t):
    """∂W/∂t, kg m-2 s-1: complex-step derivative of ``precipitable_water`` (exact to rounding)."""
    h = 1e-3  # s; the complex step has no subtraction error, so any small step works
    return np.imag(precipitable_water(lon, lat, np.asarray(t, dtype=float) + 1j * h)) / h


def divergence(lon, lat, t, qu_func=qu, qv_func=qv):
    """∇·Q = (1/(a cos φ)) [∂Qu/∂λ + ∂(Qv cos φ)/∂φ], kg m-2 s-1, by complex steps in λ and φ.

    ``qu_func``/``qv_func`` take (lon_deg, lat_deg, t) and must be complex-safe.
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    h = 1e-8  # degrees
    dqu = np.imag(qu_func(lon + 1j * h, lat, t)) / np.deg2rad(h)
    rad = np.pi / 180.0
    dqv = np.imag(qv_func(lon, lat + 1j * h, t) * np.cos((lat + 1j * h) * rad)) / np.deg2rad(h)
    return (dqu + dqv) / (_A * np.cos(np.deg2rad(lat)))


# ----------------------------------------------------------------------------------------
# Polygon geometry and quadrature (independent of budget.sphere / budget.stencil)
# ----------------------------------------------------------------------------------------


def _ring(lon, lat):
    lon = np.asarray(lon, dtype=float).ravel()
    lat = np.asarray(lat, dtype=float).ravel()
    if lon.size != lat.size or lon.size < 3:
        raise ValueError("a polygon needs matching lon and lat arrays with at least 3 vertices")
    if lon[0] == lon[-1] and lat[0] == lat[-1]:
        lon, lat = lon[:-1], lat[:-1]
    return lon, lat


def polygon_area(lon, lat, radius: float = _A) -> float:
    """Exact spherical area (m²) of a polygon whose edges are straight in lon-lat.

    Green's theorem: ∬ cos φ dλ dφ = −∮ sin φ dλ, and along an edge where φ is linear in λ
    the integral has the closed form −(cos φ₂ − cos φ₁)/m with m = dφ/dλ.  Positive for a
    counter-clockwise ring.
    """
    lon, lat = _ring(lon, lat)
    l1, p1 = np.deg2rad(lon), np.deg2rad(lat)
    l2, p2 = np.roll(l1, -1), np.roll(p1, -1)
    dl, dp = l2 - l1, p2 - p1
    with np.errstate(divide="ignore", invalid="ignore"):
        # ∫ sin φ dλ along the edge
        sloped = -(np.cos(p2) - np.cos(p1)) * dl / dp
    flat = np.sin(p1) * dl
    # for nearly flat edges use the midpoint expansion (avoids 0/0)
    small = np.abs(dp) < 1e-9
    integral = np.where(small, np.sin(0.5 * (p1 + p2)) * dl, sloped)
    integral = np.where(dp == 0, flat, integral)
    return float(-(radius**2) * integral.sum())


def boundary_nodes(lon, lat, max_piece_deg: float = 0.1, order: int = 8):
    """Gauss-Legendre nodes on the edges: (lon, lat, dlon_rad, dlat_rad) per node.

    ``dlon_rad``/``dlat_rad`` are the increments of λ and φ carried by each node (weight ×
    edge increment), so ∮ F dλ ≈ Σ F·dlon_rad.  Each edge is cut into pieces no longer than
    ``max_piece_deg`` and each piece gets ``order`` nodes.
    """
    return _boundary_rule(lon, lat, max_piece_deg, order)[:4]


def _boundary_rule(lon, lat, max_piece_deg=0.1, order=8):
    lon, lat = _ring(lon, lat)
    x, w = np.polynomial.legendre.leggauss(order)
    x, w = 0.5 * (x + 1.0), 0.5 * w
    out = [[], [], [], [], []]
    for i in range(lon.size):
        j = (i + 1) % lon.size
        dlon, dlat = lon[j] - lon[i], lat[j] - lat[i]
        n = max(1, int(np.ceil(np.hypot(dlon, dlat) / max_piece_deg)))
        s = ((np.arange(n)[:, None] + x[None, :]) / n).ravel()
        ws = np.tile(w, n) / n
        out[0].append(lon[i] + s * dlon)
        out[1].append(lat[i] + s * dlat)
        out[2].append(ws * np.deg2rad(dlon))
        out[3].append(ws * np.deg2rad(dlat))
        out[4].append(np.full(s.size, i))
    return tuple(np.concatenate(c) for c in out)


def area_nodes(lon, lat, max_cell_deg: float = 0.5, order: int = 10):
    """A Gauss-Legendre rule over the polygon (edges straight in lon-lat).

    Returns node longitudes, latitudes (degrees) and weights (m², the weights of a² cos φ
    dλ dφ), so ∬ f dA ≈ Σ f(node)·weight.  The polygon is cut into latitude bands between
    vertex latitudes; inside a band the crossing longitudes are linear in latitude, so the
    integrand is smooth in each band and the product rule converges fast.
    """
    lon, lat = _ring(lon, lat)
    x, w = np.polynomial.legendre.leggauss(order)
    x, w = 0.5 * (x + 1.0), 0.5 * w
    l1, p1 = lon, lat
    l2, p2 = np.roll(lon, -1), np.roll(lat, -1)
    levels = np.unique(lat)
    nl, np_, nw = [], [], []
    for b0, b1 in zip(levels[:-1], levels[1:]):
        nb = max(1, int(np.ceil((b1 - b0) / max_cell_deg)))
        phis = b0 + (b1 - b0) * ((np.arange(nb)[:, None] + x[None, :]) / nb).ravel()
        wphi = np.tile(w, nb) * (b1 - b0) / nb
        for phi, wp in zip(phis, wphi):
            crossing = (np.minimum(p1, p2) < phi) & (np.maximum(p1, p2) > phi)
            xs = l1[crossing] + (phi - p1[crossing]) / (p2 - p1)[crossing] * (l2 - l1)[crossing]
            xs = np.sort(xs)
            for a0, a1 in zip(xs[0::2], xs[1::2]):
                na = max(1, int(np.ceil((a1 - a0) / max_cell_deg)))
                lams = a0 + (a1 - a0) * ((np.arange(na)[:, None] + x[None, :]) / na).ravel()
                wl = np.tile(w, na) * (a1 - a0) / na
                nl.append(lams)
                np_.append(np.full_like(lams, phi))
                nw.append(wl * wp * np.deg2rad(1.0) ** 2 * _A**2 * np.cos(np.deg2rad(phi)))
    return np.concatenate(nl), np.concatenate(np_), np.concatenate(nw)


def boundary_outflow(lon, lat, t, qu_func=qu, qv_func=qv, **kw) -> np.ndarray:
    """Net outward flux ∮ Q·n dl, kg s-1, per time: a Σ (Qu dφ − Qv cos φ dλ) on a CCW ring."""
    return _outflow_density(lon, lat, t, qu_func, qv_func, **kw)[0].sum(axis=1)


def _outflow_density(lon, lat, t, qu_func=qu, qv_func=qv, **kw):
    """Outward flux carried by each boundary node (time, node), kg s-1, and the node's edge."""
    bl, bp, dl, dp, edge = _boundary_rule(lon, lat, **kw)
    t = np.atleast_1d(np.asarray(t, dtype=float))
    fu = qu_func(bl[None, :], bp[None, :], t[:, None])
    fv = qv_func(bl[None, :], bp[None, :], t[:, None])
    return _A * (fu * dp[None, :] - fv * np.cos(np.deg2rad(bp))[None, :] * dl[None, :]), edge


# ----------------------------------------------------------------------------------------
# The exact budget
# ----------------------------------------------------------------------------------------


def exact_budget(lon, lat, times=None) -> xr.Dataset:
    """The continuum water-vapour budget of a polygon over the invented event.

    Parameters
    ----------
    lon, lat : vertex arrays in degrees (edges straight in lon-lat, closed or not; a clockwise
        ring is reversed, so import is always positive into the polygon).
    times : datetime64 values (UTC) or float seconds since ``START``; the 21 file times when
        omitted.

    Returns an xarray.Dataset on ``time`` with ``precipitable_water`` (area mean, kg m-2),
    ``pw_tendency`` (area mean of the analytic ∂W/∂t, kg m-2 s-1), ``vapour_import`` (minus the
    outward flux through the boundary, kg s-1), ``inflow`` and ``outflow`` (kg s-1, both ≥ 0,
    import = inflow − outflow), ``edge_import`` (time, edge; kg s-1, edge i runs from vertex i
    to i+1 of the counter-clockwise ring), ``vapour_convergence`` (import / area,
    kg m-2 s-1), ``p_minus_e`` (convergence − tendency, kg m-2 s-1) and the attribute
    ``region_area_m2`` (exact spherical area).  Continuum values, converged to ~1e-12
    relative; see the module docstring for what a discrete method should reproduce.
    """
    if times is None:
        times = file_times()
    t_in = np.asarray(times)
    t = np.atleast_1d(seconds_since_start(t_in)).astype(float)
    lon, lat = _ring(lon, lat)
    if polygon_area(lon, lat) < 0:  # a clockwise ring: walk it the other way round
        lon, lat = lon[::-1], lat[::-1]
    area = polygon_area(lon, lat)
    al, ap, aw = area_nodes(lon, lat)
    w_mean = (precipitable_water(al[None, :], ap[None, :], t[:, None]) * aw).sum(axis=1) / aw.sum()
    dwdt = (pw_tendency(al[None, :], ap[None, :], t[:, None]) * aw).sum(axis=1) / aw.sum()
    out_nodes, edge = _outflow_density(lon, lat, t)
    imp = -out_nodes.sum(axis=1)
    # inflow and outflow: the boundary integrals of max(−Q·n, 0) and max(Q·n, 0); the kink
    # where Q·n changes sign limits these two to about 1e-7 relative on the 0.1° pieces
    inflow = np.clip(-out_nodes, 0.0, None).sum(axis=1)
    outflow = np.clip(out_nodes, 0.0, None).sum(axis=1)
    n_edge = lon.size
    edge_import = np.stack([-out_nodes[:, edge == i].sum(axis=1) for i in range(n_edge)], axis=1)
    conv = imp / area
    tcoord = np.atleast_1d(t_in) if np.issubdtype(t_in.dtype, np.datetime64) else START + (t * 1e9).astype("timedelta64[ns]")
    ds = xr.Dataset(
        {
            "precipitable_water": ("time", w_mean, {"units": "kg m-2", "long_name": "area-mean precipitable water (exact)"}),
            "pw_tendency": ("time", dwdt, {"units": "kg m-2 s-1", "long_name": "area-mean tendency of precipitable water (exact)"}),
            "vapour_import": ("time", imp, {"units": "kg s-1", "long_name": "net water-vapour import through the boundary (exact)"}),
            "inflow": ("time", inflow, {"units": "kg s-1", "long_name": "water vapour entering through the boundary (exact)"}),
            "outflow": ("time", outflow, {"units": "kg s-1", "long_name": "water vapour leaving through the boundary (exact)"}),
            "edge_import": (("time", "edge"), edge_import, {"units": "kg s-1", "long_name": "net water-vapour import through each edge, vertex i to i+1 (exact)"}),
            "vapour_convergence": ("time", conv, {"units": "kg m-2 s-1", "long_name": "area-mean vapour-flux convergence (exact)"}),
            "p_minus_e": ("time", conv - dwdt, {"units": "kg m-2 s-1", "long_name": "precipitation minus evaporation, convergence minus tendency (exact)"}),
        },
        coords={"time": ("time", tcoord.astype("datetime64[ns]")), "edge": ("edge", np.arange(n_edge))},
        attrs={
            "region_area_m2": area,
            "comment": "Exact (continuum) budget of the invented Fluxfence demonstration scenario - not real weather",
            "column_top_pa": P_TOP,
        },
    )
    return ds


def file_times() -> np.ndarray:
    """The 21 six-hourly times of the demo files (datetime64[ns], UTC)."""
    return START + (np.arange(N_TIMES) * STEP_SECONDS * 1e9).astype("timedelta64[ns]")


# ----------------------------------------------------------------------------------------
# What a discrete method should expect
# ----------------------------------------------------------------------------------------


def level_values(lon, lat, t):
    """q, u, v on ``LEVELS_PA`` as the levels file holds them, plus ps.

    Shapes (nlevel,) + broadcast(lon, lat, t).  Below the ground (p > ps) the values are the
    surface values held constant downward, as reanalysis files extrapolate them; they are not
    air and must not count.
    """
    lon, lat, t = np.broadcast_arrays(np.asarray(lon, float), np.asarray(lat, float), np.asarray(t, float))
    ps = surface_pressure(lon, lat, t)
    p = LEVELS_PA.reshape((-1,) + (1,) * lon.ndim)
    p_eff = np.minimum(p, ps[None])  # below ground: the value at the surface
    q = specific_humidity(lon[None], lat[None], p_eff, t[None])
    u, v = wind(lon[None], lat[None], p_eff, t[None])
    return q, u, v, ps


def discretisation_estimates(lon=BASIN_LON, lat=BASIN_LAT, times=None) -> dict:
    """How far discrete methods on the demo files should land from ``exact_budget``.

    Two separate effects, each measured with everything else exact:

    * ``vertical``: the beta-factor layer sum (budget.vertical.PressureLevels, Boer 1982) of
      the 11-level values instead of the continuum integral, evaluated at the exact boundary
      and area quadrature nodes.  Gives relative differences of area-mean W and of the import.
    * ``horizontal``: the exact column values sampled on the 0.5° grid and bilinearly
      interpolated to the boundary nodes (what a boundary method on the column file does
      apart from its own edge treatment).  Relative difference of the import.

    * ``tendency``: the centred difference in time (one-sided at the ends) of the exact
      area-mean W on the 6-hourly times, against the analytic dW/dt; the largest absolute
      error relative to the largest |dW/dt| of the event.

    Returns a dict of maximum absolute relative differences over the file times, and the
    maximum over the whole grid and all times of the pointwise relative error of W and |Q|.
    """
    from scipy.interpolate import RegularGridInterpolator

    from budget.vertical import PressureLevels, column_integral

    if times is None:
        times = file_times()
    t = np.atleast_1d(seconds_since_start(np.asarray(times))).astype(float)
    ref = exact_budget(lon, lat, t)
    order = np.argsort(LEVELS_PA)  # top first, as PressureLevels expects
    scheme = PressureLevels(LEVELS_PA[order])

    def layer_sum(lo, la, tt):
        q, u, v, ps = level_values(lo, la, tt)
        q, u, v = q[order], u[order], v[order]
        dp = scheme.thickness(ps)
        return column_integral(q, dp), column_integral(q * u, dp), column_integral(q * v, dp)

    # vertical only
    bl, bp, dl, dp_ = boundary_nodes(lon, lat)
    al, ap, aw = area_nodes(lon, lat)
    area = polygon_area(lon, lat)
    rel_w, rel_imp, rel_flux = [], [], []
    for k, tk in enumerate(t):
        w_a, _, _ = layer_sum(al, ap, np.full_like(al, tk))
        rel_w.append((w_a * aw).sum() / aw.sum() / float(ref.precipitable_water[k]) - 1.0)
        _, fu, fv = layer_sum(bl, bp, np.full_like(bl, tk))
        imp = -_A * (fu * dp_ - fv * np.cos(np.deg2rad(bp)) * dl).sum()
        rel_imp.append(imp / float(ref.vapour_import[k]) - 1.0)
    # pointwise over the grid
    lo2, la2 = np.meshgrid(LON, LAT)
    worst_w = worst_q = 0.0
    for tk in t:
        w_d, fu, fv = layer_sum(lo2, la2, np.full_like(lo2, tk))
        w_e = precipitable_water(lo2, la2, tk)
        eu, ev = vapour_flux(lo2, la2, tk)
        worst_w = max(worst_w, float(np.max(np.abs(w_d / w_e - 1))))
        worst_q = max(worst_q, float(np.max(np.abs(np.hypot(fu, fv) / np.hypot(eu, ev) - 1))))
    # horizontal only
    rel_h = []
    for k, tk in enumerate(t):
        eu, ev = vapour_flux(lo2, la2, tk)
        iu = RegularGridInterpolator((LAT, LON), eu)((bp, bl))
        iv = RegularGridInterpolator((LAT, LON), ev)((bp, bl))
        imp = -_A * (iu * dp_ - iv * np.cos(np.deg2rad(bp)) * dl).sum()
        rel_h.append(imp / float(ref.vapour_import[k]) - 1.0)
    # sampled tendency
    w_series = ref.precipitable_water.values
    fd = np.gradient(w_series, t)
    dwdt = ref.pw_tendency.values
    rel_tend = float(np.max(np.abs(fd - dwdt)) / np.max(np.abs(dwdt)))
    return {
        "tendency": rel_tend,
        "vertical_area_mean_w": float(np.max(np.abs(rel_w))),
        "vertical_import": float(np.max(np.abs(rel_imp))),
        "vertical_pointwise_w_max": worst_w,
        "vertical_pointwise_ivt_max": worst_q,
        "horizontal_import": float(np.max(np.abs(rel_h))),
        "vertical_area_mean_w_signed": [float(x) for x in rel_w],
        "vertical_import_signed": [float(x) for x in rel_imp],
        "horizontal_import_signed": [float(x) for x in rel_h],
    }
