"""Specific humidity from the other usual humidity variables.

Every function works on numpy arrays, dask arrays or xarray objects alike (plain arithmetic
and ``where``), in SI: temperatures in K, pressures in Pa, humidities in kg kg-1, relative
humidity as a fraction.

Formulas and sources
- Saturation vapour pressure over liquid water (Bolton 1980, Mon. Wea. Rev. 108, 1046-1053,
  eq. 10): es = 611.2 Pa · exp(17.67 t / (t + 243.5)), t in degC; Bolton states an accuracy of
  about 0.1 % between -30 and 35 degC (from memory).
- Over ice, the Magnus form of Alduchov and Eskridge (1996, J. Appl. Meteor. 35, 601-609):
  ei = 611.21 Pa · exp(22.587 t / (t + 273.86)) (constants from memory).
- Specific humidity from vapour pressure: q = ε e / (p − (1 − ε) e), ε = Rd/Rv = Mw/Md
  (budget.constants.EPSILON); from the mixing ratio r: q = r / (1 + r).

- The mixed-phase saturation of the ECMWF IFS, with which ERA5 defines its relative humidity
  ``r`` (IFS Documentation CY47R3, Part IV: Physical Processes, ECMWF 2021, chapter 12 on the
  thermodynamics of moist air; the same blend appears in earlier cycles): es = α esw + (1 − α) esi
  with α = ((T − Ti) / (T0 − Ti))² between Ti = 250.16 K (−23 degC) and T0 = 273.16 K, α = 1 above
  T0 and 0 below Ti; esw and esi are the IFS's Tetens forms a1 · exp(a3 (T − T0) / (T − a4)),
  a1 = 611.21 Pa, water a3 = 17.502, a4 = 32.19 K, ice a3 = 22.587, a4 = −0.7 K (the ice form is
  Alduchov and Eskridge's). The blend uses these IFS forms throughout, so that it inverts ERA5's
  ``r`` as ECMWF computes it; above 0 degC they differ from Bolton's by under 0.2 %.

Relative humidity is taken with respect to liquid water at every temperature, below 0 degC too,
which is the WMO convention for reported humidity (WMO-No. 8, Guide to Instruments and Methods
of Observation; from memory).  When the variable's own
attributes say it is with respect to ice (`phase_of`), ice is used below 0 degC instead.  ERA5's
``r`` is defined by ECMWF with a blend between water (above 0 degC) and ice (below -23 degC)
(IFS documentation; from memory); such a file is still read with respect to water unless it
says otherwise; below 0 degC that overstates q by up to the ratio es/ei (about 1.25 at
-23 degC), in cold layers aloft that carry little vapour.  Choose the reference explicitly
with ``open_fields(..., rh_reference="mixed")`` (CLI ``--rh-reference mixed``) for such files;
the choice is stated in q's ``derivation``.
"""

from __future__ import annotations

import numpy as np

from .constants import EPSILON, ZERO_CELSIUS

__all__ = [
    "saturation_vapour_pressure_water",
    "saturation_vapour_pressure_ice",
    "saturation_vapour_pressure_mixed",
    "saturation_vapour_pressure",
    "RH_REFERENCES",
    "q_from_vapour_pressure",
    "q_from_mixing_ratio",
    "q_from_relative_humidity",
    "q_from_dewpoint",
    "phase_of",
]


def saturation_vapour_pressure_water(t_k):
    """es over liquid water (Pa) at temperature ``t_k`` (K); Bolton (1980) eq. 10."""
    tc = t_k - ZERO_CELSIUS
    return 611.2 * np.exp(17.67 * tc / (tc + 243.5))


def saturation_vapour_pressure_ice(t_k):
    """ei over ice (Pa) at ``t_k`` (K); Alduchov and Eskridge (1996) Magnus form."""
    tc = t_k - ZERO_CELSIUS
    return 611.21 * np.exp(22.587 * tc / (tc + 273.86))


#: The IFS mixed phase: all water at and above T0, all ice at and below TI (K).
IFS_T0 = 273.16
IFS_TI = 250.16
#: The references relative humidity may be given against (see saturation_vapour_pressure).
RH_REFERENCES = ("water", "ice", "mixed")


def _ifs_tetens(t_k, a3, a4):
    return 611.21 * np.exp(a3 * (t_k - IFS_T0) / (t_k - a4))


def saturation_vapour_pressure_mixed(t_k):
    """es (Pa) of the IFS mixed phase at ``t_k`` (K): α esw + (1 − α) esi, α = ((T − Ti)/(T0 − Ti))²
    clipped to [0, 1]; IFS Documentation CY47R3 Part IV, chapter 12 (module docstring)."""
    alpha = ((t_k - IFS_TI) / (IFS_T0 - IFS_TI)).clip(0.0, 1.0) ** 2
    return alpha * _ifs_tetens(t_k, 17.502, 32.19) + (1.0 - alpha) * _ifs_tetens(t_k, 22.587, -0.7)


def saturation_vapour_pressure(t_k, phase: str = "water"):
    """es (Pa) with respect to ``phase``: "water" everywhere, "ice" below 0 degC, or "mixed"
    (the IFS blend of water and ice between −23 and 0 degC)."""
    if phase == "water":
        return saturation_vapour_pressure_water(t_k)
    if phase == "mixed":
        return saturation_vapour_pressure_mixed(t_k)
    if phase == "ice":
        water = saturation_vapour_pressure_water(t_k)
        ice = saturation_vapour_pressure_ice(t_k)
        cold = t_k < ZERO_CELSIUS
        if hasattr(water, "where"):  # xarray
            return water.where(~cold, ice)
        return np.where(cold, ice, water)
    raise ValueError(f"phase must be one of {', '.join(RH_REFERENCES)}, not {phase!r}")


def q_from_vapour_pressure(e_pa, p_pa):
    """Specific humidity (kg kg-1) from vapour pressure and pressure (Pa): ε e / (p − (1 − ε) e)."""
    return EPSILON * e_pa / (p_pa - (1.0 - EPSILON) * e_pa)


def q_from_mixing_ratio(r):
    """Specific humidity from the mixing ratio (both kg kg-1): r / (1 + r)."""
    return r / (1.0 + r)


def q_from_relative_humidity(rh, t_k, p_pa, phase: str = "water"):
    """Specific humidity from relative humidity (fraction), temperature (K), pressure (Pa)."""
    return q_from_vapour_pressure(rh * saturation_vapour_pressure(t_k, phase), p_pa)


def q_from_dewpoint(td_k, p_pa):
    """Specific humidity from the dew point (K) and pressure (Pa): e = es_water(Td)."""
    return q_from_vapour_pressure(saturation_vapour_pressure_water(td_k), p_pa)


def phase_of(attrs: dict) -> str:
    """"ice" when a relative-humidity variable's attributes say it is with respect to ice."""
    text = " ".join(str(attrs.get(k, "")) for k in ("long_name", "comment", "description", "note"))
    text = text.lower()
    return "ice" if ("respect to ice" in text or "over ice" in text) else "water"
