"""Observed or model precipitation and evaporation: units, accumulations, sign conventions.

A file may carry precipitation P and evaporation E beside the winds and humidity.  Their area
means close the vapour budget from the other side: the *closure residual*

    (P − E)_fluxes − (P − E)_budget,   (P − E)_budget = vapour convergence − dW/dt

is how well the two agree.  Everything here works on series (time first); the ledger hands in
area means (cover-weighted sums are linear, so de-accumulating the area mean is the same as
area-averaging the de-accumulated field when all cells reset at the same times).

Rates and amounts
-----------------
* A *rate* (units kg m-2 s-1, mm/day, mm/h, m s-1 of liquid water, ...; CF precipitation_flux,
  lwe_precipitation_rate, water_evapotranspiration_flux) is converted to kg m-2 s-1 and taken
  as valid at its time stamp.
* An *amount* (units kg m-2, mm, m of liquid water; CF precipitation_amount,
  lwe_thickness_of_precipitation_amount, water_evapotranspiration_amount) is a running
  accumulation that restarts every *accumulation period* at fixed reset times (every period
  from 00 UTC unless told otherwise).  The value at time t is the amount since the last reset
  before t, so the value at a reset time still holds the whole period just ended (the
  convention of hourly and forecast-accumulated reanalysis fields).  A period equal to the
  time step means each value is the amount over the step ending at its time; ``"none"``
  means the accumulation never restarts.  Between two times t₁ < t₂ the increment is
  a(t₂) − a(t₁), or a(t₂) when t₁ is a reset time; the interval's mean rate is the increment
  over t₂ − t₁.  The first value gives a(t₀)/(t₀ − last reset), the mean rate since the reset.
  One period and reset time serve every accumulated variable of the run (reanalyses
  accumulate precipitation and evaporation alike).
  The period comes from the caller (``--accumulation-period``) or, failing that, from CF
  ``cell_methods = "time: sum"`` (the value sums its time cell: one time step); with neither
  the amount is left out with a warning, never guessed.
* Interval means are put on the budget's instants by averaging the intervals either side of
  each time (centred, like the tendency; one-sided at the ends).  For a rate varying linearly
  in time this is exact.

Evaporation sign
----------------
Fluxfence reports evaporation positive when water goes from the surface into the air.  CF
standard names (water_evapotranspiration_flux, water_evaporation_flux and their amounts)
mean exactly that (CF standard-name table).  ECMWF fields (``e``, ``mer``, GRIB parameter
182) count downward fluxes positive, so evaporation is negative there (ECMWF parameter
database, from memory); a ``positive = "down"`` attribute says the same.  The caller can
override either way (``evaporation_positive="up" | "down"``).  The convention used is stated
in the output attributes.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from . import catalogue
from .errors import FieldsError, RequestError
from .units import WATER_AMOUNT, WATER_RATE
from .units import normalise as _norm

#: Amount units (kg m-2) and rate units (kg m-2 s-1) of liquid water: budget.units.
AMOUNT_UNITS = WATER_AMOUNT
RATE_UNITS = WATER_RATE

#: CF standard names of evaporation (rates and amounts), from the role catalogue: each means
#: positive upward (CF standard-name table).
EVAP_STANDARD_NAMES = catalogue.role("evap").standard_names

#: Source names that follow the ECMWF downward-positive convention (from memory).
_ECMWF_EVAP = {"e", "mer", "avg_ie"}

_NEVER = ("none", "never", "no", "0", "infinite", "inf")


# --------------------------------------------------------------------------------------
# units


def classify(role: str, attrs: dict, source: str, where: str = "the input", override_units=None):
    """("rate" | "amount", factor to SI) of a precipitation or evaporation variable."""
    raw = override_units if override_units is not None else attrs.get("units")
    what = "precipitation" if role == "precip" else "evaporation"
    if raw is None or str(raw).strip() == "":
        raise FieldsError(
            f"The {what} variable '{source}' in {where} has no units attribute; state it with "
            f"--units {role}=mm/day (units={{'{role}': 'mm/day'}} in Python)."
        )
    key = _norm(raw)
    if key in RATE_UNITS:
        return "rate", RATE_UNITS[key]
    if key in AMOUNT_UNITS:
        return "amount", AMOUNT_UNITS[key]
    raise FieldsError(
        f"The {what} variable '{source}' in {where} has units '{raw}', which Fluxfence reads "
        "neither as a rate (kg m-2 s-1, mm/day, mm/h, m s-1) nor as an amount (kg m-2, mm, m); "
        f"if the attribute is wrong, override it with --units {role}=mm/day."
    )


# --------------------------------------------------------------------------------------
# accumulation periods


def parse_period(text):
    """An accumulation period: None (not given), "never", or a positive numpy timedelta64[ns].

    Accepts e.g. "1h", "12h", "3 hours", "1D", ISO 8601 "PT12H", or a timedelta; "none" or
    "never" for an accumulation that never restarts.
    """
    if text is None or (isinstance(text, str) and text.strip() == ""):
        return None
    if isinstance(text, str) and text.strip().lower() in _NEVER:
        return "never"
    try:
        td = pd.Timedelta(text)
    except (ValueError, TypeError):
        td = None
    if td is None or pd.isna(td) or td <= pd.Timedelta(0):
        raise RequestError(
            f"The accumulation period {text!r} is not a positive duration; write e.g. 1h, 12h, "
            "PT12H, or none for an accumulation that never restarts."
        )
    return np.timedelta64(td.value, "ns")


def parse_reset(text, times):
    """The reference reset time (datetime64[ns]): a time of day ("06:00") on the first day,
    a full ISO 8601 time, or 00 UTC of the first day when None."""
    t0 = pd.Timestamp(times[0]).normalize()
    if text is None or str(text).strip() == "":
        return np.datetime64(t0.value, "ns")
    s = str(text).strip()
    try:
        if re.fullmatch(r"\d{1,2}(:\d{2})?", s):
            h, _, m = s.partition(":")
            t = t0 + pd.Timedelta(hours=int(h), minutes=int(m or 0))
        else:
            t = pd.Timestamp(s)
            if t.tzinfo is not None:
                t = t.tz_convert("UTC").tz_localize(None)
    except (ValueError, TypeError):
        raise RequestError(
            f"The accumulation reset time {text!r} is neither a time of day such as 06:00 nor an "
            "ISO 8601 time; write e.g. 06:00 or 2021-07-01T06:00."
        ) from None
    return np.datetime64(t.value, "ns")


def period_from_metadata(attrs: dict, times):
    """The accumulation period implied by CF ``cell_methods = "time: sum"`` (one time step,
    when the steps are regular), else None."""
    cm = str(attrs.get("cell_methods", ""))
    if not re.search(r"\btime\s*:\s*sum\b", cm):
        return None
    t = np.asarray(times).astype("datetime64[ns]")
    if t.size < 2:
        return None
    steps = np.diff(t)
    if not np.all(steps == steps[0]):
        return None
    return steps[0]


def deaccumulate(values, times, period, reset=None):
    """Interval-mean rates from running accumulations (time first), per interval ending at each time.

    ``values`` in kg m-2; ``period`` a timedelta64 or "never"; ``reset`` one reset time
    (datetime64, default 00 UTC of the first day).  Returns kg m-2 s-1 with the same shape;
    element k is the mean rate over (t[k-1], t[k]] (for k = 0, over (last reset, t[0]], or NaN
    when the accumulation never restarts).  RequestError when a reset falls strictly between two
    times (the period is not a multiple of the time step).
    """
    a = np.asarray(values, float)
    t = np.asarray(times).astype("datetime64[ns]")
    if a.shape[0] != t.size:
        raise ValueError("values and times differ in length")
    ns = t.astype(np.int64)
    out = np.full(a.shape, np.nan)
    if period == "never":
        if t.size > 1:
            dt = np.diff(ns).astype(float) / 1e9
            out[1:] = np.diff(a, axis=0) / dt.reshape((-1,) + (1,) * (a.ndim - 1))
        return out
    P = int(np.asarray(period).astype("timedelta64[ns]").astype(np.int64))
    if reset is None:
        r0 = int(pd.Timestamp(t[0]).normalize().value)
    else:
        r0 = int(np.asarray(reset).astype("datetime64[ns]").astype(np.int64))
    # last reset strictly before each time: r0 + P * ceil((t − r0)/P − 1)
    k = -((-(ns - r0)) // P) - 1  # ceil((ns - r0)/P) - 1
    last = r0 + k * P
    since = (ns - last).astype(float) / 1e9
    out[0] = a[0] / since[0]
    for i in range(1, t.size):
        dt = (ns[i] - ns[i - 1]) / 1e9
        if last[i] == last[i - 1]:
            inc = a[i] - a[i - 1]
        elif last[i] == ns[i - 1]:
            inc = a[i]
        else:
            when = np.datetime_as_string(np.datetime64(int(last[i]), "ns"), unit="m")
            raise RequestError(
                f"An accumulation reset ({when} UTC) falls between the times "
                f"{np.datetime_as_string(t[i - 1], unit='m')} and {np.datetime_as_string(t[i], unit='m')}, "
                "so the amounts cannot be de-accumulated; give an accumulation period that is a "
                "multiple of the time step (and its reset time of day with --accumulation-reset)."
            )
        out[i] = inc / dt
    return out


def centre_on_times(interval_rates):
    """Rates at each time from interval means ending at each time: the mean of the intervals
    either side (exact for a rate linear in time on a regular step), one-sided at the ends."""
    r = np.asarray(interval_rates, float)
    out = np.empty_like(r)
    n = r.shape[0]
    if n == 0:
        return out
    if n == 1:
        return r.copy()
    out[:-1] = 0.5 * (r[:-1] + r[1:])
    out[-1] = r[-1]
    # the first interval may be unknown (never-reset accumulation): use the one after it
    first_bad = ~np.isfinite(r[0])
    out[0] = np.where(first_bad, r[1], out[0])
    return out


# --------------------------------------------------------------------------------------
# evaporation sign


def evaporation_sign(attrs: dict, source: str, override=None):
    """(+1 | −1, text): the factor that makes evaporation positive upward, and why."""
    if override is not None:
        o = str(override).strip().lower()
        if o not in ("up", "down"):
            raise RequestError(
                f"The evaporation sign {override!r} is neither 'up' nor 'down'; say 'up' when the "
                "file counts evaporation positive, 'down' when it counts it negative (ECMWF)."
            )
        return (1.0 if o == "up" else -1.0), f"positive {o}ward as stated by the user"
    pos = str(attrs.get("positive", "")).strip().lower()
    if pos in ("up", "down"):
        return (1.0 if pos == "up" else -1.0), f"positive {pos}ward per the 'positive' attribute"
    std = attrs.get("standard_name")
    if std in EVAP_STANDARD_NAMES:
        return 1.0, f"positive upward (evaporation) per CF standard_name {std}"
    param = str(attrs.get("GRIB_paramId", attrs.get("GRIB_paramid", ""))).strip()
    if param == "182" or source in _ECMWF_EVAP or str(attrs.get("GRIB_shortName", "")) in _ECMWF_EVAP:
        return -1.0, "ECMWF convention: downward positive, evaporation negative (sign reversed)"
    return 1.0, "assumed positive upward (evaporation); no standard_name or 'positive' attribute says otherwise"


# --------------------------------------------------------------------------------------
# a whole series


def rate_series(role, area_mean_raw, attrs, source, times, period=None, reset=None,
                units_override=None, evaporation_positive=None, where="the input"):
    """Area-mean rate (kg m-2 s-1) at each time from the area mean of the raw field.

    Returns (rates or None, info dict of attributes, list of warnings).  None means the term
    is left out (an amount with no accumulation period), with the warning saying why.
    """
    warnings: list[str] = []
    kind, factor = classify(role, attrs, source, where, units_override)
    info = {"source_name": source, "source_units": str(units_override or attrs.get("units")), "input_kind": kind}
    raw = np.asarray(area_mean_raw, float) * factor
    if kind == "rate":
        rates = raw
        info["time_handling"] = "rates taken as valid at their time stamps"
    else:
        per = parse_period(period) if not isinstance(period, np.timedelta64) and period != "never" else period
        how = "given by the user"
        if per is None:
            per = period_from_metadata(attrs, times)
            how = "one time step, from cell_methods 'time: sum'"
        if per is None:
            what = "precipitation" if role == "precip" else "evaporation"
            warnings.append(
                f"The {what} variable '{source}' is an accumulated amount (units "
                f"'{attrs.get('units')}') but its accumulation period is not stated, so it was left "
                "out; give it with --accumulation-period (e.g. 1h when each value is the amount "
                "since the previous step, 12h for sums restarting every 12 hours)."
            )
            return None, info, warnings
        r0 = parse_reset(reset, times)
        rates = centre_on_times(deaccumulate(raw, times, per, r0))
        ptxt = "never restarts" if per == "never" else f"{pd.Timedelta(per)} ({how})"
        info["accumulation_period"] = ptxt
        info["accumulation_reset"] = np.datetime_as_string(r0, unit="m") + "Z"
        info["time_handling"] = (
            "de-accumulated to interval means, then the two intervals either side of each time averaged"
        )
    if role == "evap":
        sign, text = evaporation_sign(attrs, source, evaporation_positive)
        rates = sign * rates
        info["sign_convention_in_file"] = text
        info["sign_convention"] = "positive when water evaporates from the surface into the air"
        finite = rates[np.isfinite(rates)]
        if finite.size and np.mean(finite) < 0 and evaporation_positive is None:
            warnings.append(
                f"Evaporation '{source}' averages negative over the region after reading it as "
                f"{text.split(';')[0]}; if the file counts evaporation the other way round, pass "
                "--evaporation-positive up or down."
            )
    return rates, info, warnings
