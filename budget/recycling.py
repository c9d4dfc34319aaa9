"""Bulk precipitation recycling: how much of a region's rain came from its own evaporation.

The bulk estimate of Brubaker, Entekhabi and Eagleson (1993, J. Climate 6, 1077-1089):

    ρ = E·A / (E·A + 2·F_in)

with E the area-mean evaporation (kg m-2 s-1), A the region's area (m²) and F_in the moisture
inflow across the boundary (kg s-1).  It assumes a well-mixed column (evaporated and advected
water precipitate in proportion to their shares) and a steady state over the period (no storage
change), and evaporated water is taken to be added evenly along the path across the region,
hence the factor 2.  The ratio grows with the size of the region (Trenberth 1999, J. Climate 12,
1368-1381), so values are comparable only between regions of similar size.

Evaporation comes from the files (``evaporation``) or, failing that, from observed
precipitation and the budget: E = P − (P − E).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .errors import RequestError

ASSUMPTIONS = (
    "bulk recycling ratio rho = E A / (E A + 2 F_in) (Brubaker, Entekhabi and Eagleson 1993, J. Climate 6); "
    "assumes a well-mixed column and a steady state over the period (no storage change); "
    "grows with the region's size (Trenberth 1999, J. Climate 12)"
)


def bulk_ratio(evaporation, area_m2: float, inflow_kg_s):
    """ρ = E·A / (E·A + 2·F_in) for mean evaporation E (kg m-2 s-1) and inflow F_in (kg s-1).

    NaN where E·A + 2·F_in is not positive (no water enters or rises: the ratio is undefined).
    """
    ea = np.asarray(evaporation, dtype=float) * float(area_m2)
    fin = np.asarray(inflow_kg_s, dtype=float)
    den = ea + 2.0 * fin
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, ea / np.where(den > 0, den, 1.0), np.nan)


def evaporation_series(ds: xr.Dataset) -> tuple[np.ndarray, str]:
    """Area-mean evaporation per step (kg m-2 s-1, positive upward) and where it came from."""
    if "evaporation" in ds:
        return ds["evaporation"].values.astype(float), "evaporation from the files"
    if "precipitation" in ds and "p_minus_e" in ds:
        e = ds["precipitation"].values.astype(float) - ds["p_minus_e"].values.astype(float)
        return e, "evaporation as observed precipitation minus the budget's P - E"
    raise RequestError(
        "The recycling ratio needs evaporation: give the files' evaporation (--var evap=NAME) "
        "or precipitation (--var precip=NAME) so that E = P - (P - E)."
    )


def period_ratio(ds: xr.Dataset, weights=None) -> dict:
    """The bulk recycling ratio of the whole budget (or of the steps with non-zero ``weights``,
    interval lengths in s): period means of E and of the inflow, then the formula."""
    e, source = evaporation_series(ds)
    fin = ds["inflow"].values.astype(float)
    w = np.ones_like(e) if weights is None else np.asarray(weights, dtype=float)
    ok = np.isfinite(e) & np.isfinite(fin) & (w > 0)
    if not ok.any():
        return {"recycling_ratio": np.nan, "evaporation_source": source, "assumptions": ASSUMPTIONS}
    e_mean = float(np.sum(e[ok] * w[ok]) / np.sum(w[ok]))
    f_mean = float(np.sum(fin[ok] * w[ok]) / np.sum(w[ok]))
    area = float(ds.attrs["region_area_m2"])
    return {
        "recycling_ratio": float(bulk_ratio(e_mean, area, f_mean)),
        "mean_evaporation_kg_m2_s": e_mean,
        "mean_inflow_kg_s": f_mean,
        "area_m2": area,
        "evaporation_source": source,
        "assumptions": ASSUMPTIONS,
    }
