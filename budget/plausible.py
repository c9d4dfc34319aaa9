"""Plausibility checks on every value a budget uses, block by block.

The touched cells of every time step are read anyway (budget.blocks), so checking all of them
costs almost nothing and catches what a look at the first step cannot: humidity in g/kg
labelled kg/kg from the second file on, surface pressure in hPa labelled Pa, an unmarked fill
value in one cell at one time.

Limits (SI, after unit conversion) are the ``plausible`` ranges of the input roles in the role
catalogue (budget.catalogue).  They are common practice with no single source:

* specific humidity between −1e-4 and 0.04 kg/kg (the moistest tropical air holds about
  0.025); values between −1e-4 and 0 are accepted and counted (real reanalyses have small
  negative humidities from their numerics), anything lower is refused;
* surface pressure between 300 and 1100 hPa;
* horizontal wind speed below 150 m/s;
* column inputs and cloud condensate within their roles' ranges (e.g. precipitable water
  0-100 kg m-2, vapour flux components within ±5000 kg m-1 s-1);
* any value with |x| > 1e15 is an unmarked fill value (NetCDF's default fill for floats is
  9.969e36, older files use 9.999e20 or 1e20).

A refusal is one FieldsError sentence naming the variable, the file, the time and the cell
(lon/lat), with the fix.  Only values that count are checked: level values below the ground
(zero layer thickness) are never used and never checked.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .catalogue import role
from .errors import FieldsError

#: |x| above this is an unmarked fill value (common practice, no source).
FILL_ABOVE = 1e15
#: Specific humidity, kg kg-1: refused below the first, counted between it and 0, refused
#: above the second (the catalogue's range: common practice, no source).
HUMIDITY_RANGE = role("q").plausible
#: Surface pressure, Pa (300-1100 hPa; the catalogue's range: common practice, no source).
SURFACE_PRESSURE_RANGE = role("ps").plausible
#: Horizontal wind speed, m s-1: the catalogue's bound on each component, applied to the speed
#: (common practice, no source).
MAX_WIND_SPEED = role("u").plausible[1]

#: What the humidity or pressure most likely is when it is out of range, and the fix.
_FIX = {
    ("q", "high"): "it looks like g/kg labelled kg/kg; give its unit, e.g. --units q=g/kg",
    ("q", "low"): "humidity cannot be that negative; check the variable and its sign",
    ("ps", "low"): "it looks like hPa labelled Pa; give its unit, e.g. --units ps=hPa",
    ("ps", "high"): "it looks like a pressure in a smaller unit labelled Pa (e.g. dPa); give its unit with --units ps=UNIT",
    ("wind", "high"): "check the wind's unit and give it with --units (e.g. --units u=km/h)",
}


def _generic_fix(key: str) -> str:
    r = role(key)
    return f"check the variable and give its unit if it is not {r.si_unit}, e.g. --units {key}={r.example_unit}"


@dataclass
class Where:
    """Where a block's values come from: to name the time, cell and file in a refusal."""

    fields: object  # budget.fields.Fields
    stencil: object  # budget.stencil.Stencil
    t0: int  # index of the block's first step in fields.ds

    def when(self, step: int) -> str:
        t = self.fields.ds["time"].values[self.t0 + int(step)]
        return np.datetime_as_string(t, unit="m") + " UTC"

    def cell(self, index: int) -> str:
        st = self.stencil
        return st.grid.point_text(st.touched[int(index)])

    def source(self, name: str) -> str:
        roles = {**dict(getattr(self.fields, "roles", {})), **dict(getattr(self.fields, "extra_roles", {}))}
        return str(roles.get(name, name))

    def file(self, step: int) -> str:
        """The input file that holds the step (looked up only when a refusal needs it)."""
        files = [str(f) for f in getattr(self.fields, "files", [])]
        if len(files) <= 1:
            return repr(files[0]) if files else "the input"
        t = self.fields.ds["time"].values[self.t0 + int(step)]
        for f in files:
            if _holds_time(f, t):
                return repr(f)
        return f"one of {len(files)} files ({files[0]!r} ...)"


def _holds_time(path: str, t) -> bool:
    import xarray as xr

    from .grib import is_grib

    if is_grib(path):
        return False  # xarray would write cfgrib's index beside the input (never an output)
    try:
        with xr.open_dataset(path) as ds:
            return "time" in ds.coords and bool(np.any(ds["time"].values == t))
    except Exception:  # noqa: BLE001 - any file that cannot tell is not the one
        return False


@dataclass
class Checker:
    """Checks the arrays of one block; counts accepted small negative humidities."""

    where: Where
    counts: dict = field(default_factory=dict)  # variable -> values flagged and accepted

    def finite(self, name: str, arr: np.ndarray, mask=None) -> None:
        """Missing (NaN) values where they count: refused, naming the cell and time."""
        bad = ~np.isfinite(arr) if mask is None else (~np.isfinite(arr) & mask)
        if bad.any():
            step, cell = _first(bad)
            w = self.where
            raise FieldsError(
                f"Variable {w.source(name)!r} is missing at {w.cell(cell)} on {w.when(step)}, a cell this "
                "region needs; fill the gap in the files or draw the region away from it."
            )

    def fill(self, name: str, arr: np.ndarray, mask=None) -> None:
        """|x| > 1e15: an unmarked fill value."""
        with np.errstate(invalid="ignore"):
            bad = np.abs(arr) > FILL_ABOVE
        if mask is not None:
            bad &= mask
        if bad.any():
            step, cell = _first(bad)
            w = self.where
            value = arr[np.unravel_index(np.flatnonzero(bad.ravel())[0], bad.shape)]
            raise FieldsError(
                f"Variable {w.source(name)!r} in {w.file(step)} holds {value:.4g} at {w.cell(cell)} on "
                f"{w.when(step)}, an unmarked fill value; mark it with a _FillValue or missing_value "
                "attribute in the file, or draw the region away from it."
            )

    def within(self, name: str, arr: np.ndarray, low: float, high: float, key: str, unit: str, mask=None) -> None:
        """Values outside low..high are refused with the most likely cause and its fix."""
        with np.errstate(invalid="ignore"):
            for side, bad in (("high", arr > high), ("low", arr < low)):
                if mask is not None:
                    bad = bad & mask
                if bad.any():
                    step, cell = _first(bad)
                    value = arr[np.unravel_index(np.flatnonzero(bad.ravel())[0], bad.shape)]
                    w = self.where
                    limit = f"above {high:g}" if side == "high" else f"below {low:g}"
                    fix = _FIX.get((key, side)) or _generic_fix(key)
                    raise FieldsError(
                        f"Variable {w.source(name)!r} in {w.file(step)} is {value:.4g} {unit} at {w.cell(cell)} on "
                        f"{w.when(step)}, {limit} {unit}, which is not plausible; {fix}."
                    )

    def humidity(self, name: str, q: np.ndarray, mask=None) -> None:
        lo, hi = HUMIDITY_RANGE
        self.within(name, q, lo, hi, "q", "kg/kg", mask)
        self.count_negative(name, q, mask)

    def count_negative(self, name: str, q: np.ndarray, mask=None) -> None:
        """Count the small negative values accepted (real reanalyses have them)."""
        with np.errstate(invalid="ignore"):
            neg = q < 0
        if mask is not None:
            neg &= mask
        n = int(neg.sum())
        if n:
            self.counts[name] = self.counts.get(name, 0) + n

    def in_role_range(self, name: str, arr: np.ndarray, mask=None) -> None:
        """Within the role's plausible range of the catalogue (roles without one: unchecked)."""
        try:
            r = role(name)
        except KeyError:
            return
        if r.plausible is not None:
            self.within(name, arr, r.plausible[0], r.plausible[1], name, r.si_unit, mask)

    def wind(self, u: np.ndarray, v: np.ndarray, mask=None) -> None:
        with np.errstate(invalid="ignore"):
            speed = np.hypot(u, v)
        self.within("u", speed, -np.inf, MAX_WIND_SPEED, "wind", "m/s (wind speed)", mask)


def _first(bad: np.ndarray) -> tuple[int, int]:
    """(step, cell) of the first flagged value of a (time, [level,] cell) array."""
    idx = np.unravel_index(np.flatnonzero(bad.ravel())[0], bad.shape)
    return int(idx[0]), int(idx[-1])


def _all_within(arr, low, high, mask=None) -> bool:
    """True when every value that counts lies in low..high (NaN and fill values do not)."""
    with np.errstate(invalid="ignore"):
        ok = (arr >= low) & (arr <= high)
    return bool(ok.all() if mask is None else (ok | ~mask).all())


def check_surface_pressure(chk: Checker, ps) -> None:
    """Surface pressure, every touched cell (it decides which layers count)."""
    lo, hi = SURFACE_PRESSURE_RANGE
    if _all_within(ps, lo, hi):  # one pass when all is well; the diagnosis only when not
        return
    chk.finite("ps", ps)
    chk.fill("ps", ps)
    chk.within("ps", ps, lo, hi, "ps", "Pa")


def check_levels(chk: Checker, u, v, q, air) -> None:
    """Winds and humidity where they count (layers above the ground)."""
    lo, hi = HUMIDITY_RANGE
    with np.errstate(invalid="ignore", over="ignore"):
        speed2 = u * u + v * v  # NaN and fill values fail the comparison too
    if not (_all_within(speed2, 0.0, MAX_WIND_SPEED**2, air) and _all_within(q, lo, hi, air)):
        for name, arr in (("u", u), ("v", v), ("q", q)):  # the diagnosis names the culprit
            chk.finite(name, arr, air)
            chk.fill(name, arr, air)
        chk.within("q", q, lo, hi, "q", "kg/kg", air)
        chk.wind(u, v, air)
    chk.count_negative("q", q, air)


def check_columns(chk: Checker, arrays: dict) -> None:
    """Every value of a column block: present, not a fill value, within the role's range."""
    for name, arr in arrays.items():
        limits = role(name).plausible
        if limits is not None and _all_within(arr, *limits):  # one pass when all is well
            continue
        chk.finite(name, arr)
        chk.fill(name, arr)
        chk.in_role_range(name, arr)


def flagged_warning(counts: dict, source: dict) -> list[str]:
    """The warning lines for values accepted but counted (small negative humidities)."""
    return [
        f"{n} values of {source.get(name, name)!r} over the region were slightly negative (between "
        f"{HUMIDITY_RANGE[0]:g} and 0 kg/kg, common in reanalyses) and were used as they are."
        for name, n in sorted(counts.items()) if n
    ]
