"""The dry-air mass budget of a region and the barotropic mass correction of its vapour budget.

Why.  Analysed and model winds do not conserve dry-air mass exactly; a vapour budget built from
them inherits the error, because a small spurious convergence of the whole column's air carries
moisture with it (Trenberth 1991, J. Climate 4, 707-722, "Climate diagnostics from global
analyses: conservation of mass in ECMWF analyses"; applied to the moisture budget by Trenberth
and Guillemot 1995, from memory).  Dry air has no sources or sinks, so its column budget must
close:  ∂μ/∂t + ∇·F = 0, with

    μ  = (1/g) ∫ (1 − q) dp              dry-air column mass, kg m-2 (= (ps − p_top)/g − W)
    F  = (1/g) ∫ (1 − q) V dp            dry-air column mass flux, kg m-1 s-1

integrated over the same layers as the vapour (budget.vertical).  Over a region of area A the
*dry-air residual*

    R = dμ̄/dt − (dry-air convergence)    kg m-2 s-1, also as a pressure tendency R · g (Pa s-1)

is zero for mass-consistent fields.

The correction (regional form, CHECKS.md).  One vertically uniform wind c along the outward
boundary normal, the same all round the boundary, is added at each time step so that the
regional dry-air budget closes:

    c = (dry-air import − A · dμ̄/dt) / ∮ μ dl          m s-1, positive outward

(dry-air import = A × dry-air convergence = −∮ F·n dl).  The vapour flux then changes by
ΔQ·n = W c on the boundary, so the vapour import changes by −c ∮ W dl and the area-mean
convergence by −c ∮ W dl / A (``mass_correction_convergence``).  The same applies to total
water with the total-water column content.

Assumptions and limits.
* The error in the winds is taken to be vertically uniform (barotropic) and uniform along the
  boundary (for a region of several parts, one speed serves all of them).  A regional correction has one number per time step: it removes the net mass
  imbalance of the region, not a spatially varying error.  Errors that cancel in the regional
  dry-air budget (an inflow error on one side balanced by an outflow error on the other) are
  invisible to it and still bias the vapour budget, because W differs between the two sides.
* The dry-air tendency is a centred difference in time (one-sided at the ends); its sampling
  error goes into c.  With a single time step the tendency is unknown and is taken as zero.
* Dry-air mass counts only the layers the vapour integral counts (from the top level to the
  surface); the air above the top level is assumed not to converge.
* The correction needs winds and surface pressure: it is computed for level inputs only.
  Column inputs (pre-integrated fluxes) carry no dry-air flux, so they are left uncorrected.
* Two boundary pieces that coincide and run opposite ways (the meridian edges of a box round
  all longitudes) do not separate the region from its surroundings; they are left out of
  ∮ μ dl and ∮ W dl.  A region with no remaining boundary (the whole globe) gets c = 0.
"""

from __future__ import annotations

import numpy as np

from .constants import STANDARD_GRAVITY
from .vertical import column_integral


def dry_column(q: np.ndarray, u: np.ndarray, v: np.ndarray, dp: np.ndarray, level_axis: int = 1, vapour=None):
    """Dry-air column mass μ (kg m-2) and mass flux (Fu, Fv) (kg m-1 s-1) from level values.

    μ = (1/g) Σ (1 − q_k) Δp_k and F = (1/g) Σ (1 − q_k) V_k Δp_k over the layers above the
    ground (zero-thickness layers, and the values the file holds in them, do not count).
    ``vapour = (W, Qu, Qv)`` integrated over the same layers saves the products with q.
    """
    if vapour is not None:
        w, qu, qv = vapour
        air = column_integral(np.ones(()), dp, level_axis=level_axis)
        return air - w, column_integral(u, dp, level_axis=level_axis) - qu, column_integral(v, dp, level_axis=level_axis) - qv
    dry = 1.0 - np.asarray(q, float)
    mu = column_integral(dry, dp, level_axis=level_axis)
    fu = column_integral(dry * u, dp, level_axis=level_axis)
    fv = column_integral(dry * v, dp, level_axis=level_axis)
    return mu, fu, fv


def dry_column_from_surface_pressure(ps, w, p_top: float = 0.0):
    """Dry-air column mass (ps − p_top)/g − W, kg m-2 (CHECKS.md: "ps/g − W" for p_top = 0)."""
    return (np.asarray(ps, float) - p_top) / STANDARD_GRAVITY - np.asarray(w, float)


def residual_as_pressure_tendency(residual_kg_m2_s):
    """A column-mass rate (kg m-2 s-1) as the equivalent surface-pressure tendency in Pa s-1
    (hydrostatic: 1 kg m-2 of air weighs g Pa); budget.units shows it in hPa/day."""
    return np.asarray(residual_kg_m2_s, float) * STANDARD_GRAVITY


def correction_speed(dry_import_kg_s, dry_tendency_kg_m2_s, area_m2: float, boundary_mass_kg_m):
    """Uniform outward boundary-normal wind (m s-1) that closes the regional dry-air budget.

    c = (dry-air import − A dμ̄/dt) / ∮ μ dl.  Where ∮ μ dl is zero (no boundary) c is 0;
    where the tendency is not finite (a single time step) it is taken as zero.
    """
    imp = np.asarray(dry_import_kg_s, float)
    tend = np.asarray(dry_tendency_kg_m2_s, float)
    tend = np.where(np.isfinite(tend), tend, 0.0)
    ml = np.asarray(boundary_mass_kg_m, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.where(ml > 0, (imp - area_m2 * tend) / np.where(ml > 0, ml, 1.0), 0.0)
    return c


def open_boundary_weights(boundary) -> np.ndarray:
    """1 for each boundary piece that separates the region from outside, 0 for pieces that
    coincide with another piece walked the opposite way (they cancel in every flux)."""
    lon0, lat0 = np.asarray(boundary.lon0, float), np.asarray(boundary.lat0, float)
    lon1, lat1 = np.asarray(boundary.lon1, float), np.asarray(boundary.lat1, float)
    n = lon0.size
    weight = np.ones(n)
    if n == 0:
        return weight

    def key(lon, lat):
        return (round(float(np.mod(lon, 360.0)), 7) % 360.0, round(float(lat), 7))

    seen: dict = {}
    for k in range(n):
        seen.setdefault((key(lon0[k], lat0[k]), key(lon1[k], lat1[k])), []).append(k)
    for (a, b), ks in seen.items():
        back = seen.get((b, a))
        if back and a != b:
            for k in ks:
                weight[k] = 0.0
    return weight
