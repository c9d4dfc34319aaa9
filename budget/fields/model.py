"""The result of budget.fields.open_fields: canonical, lazy gridded input (`Fields`)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr

from ..vertical import HybridLevels, PressureLevels


@dataclass
class Fields:
    """Canonical gridded input.

    ``ds`` holds the roles of ``kind`` on dims (time, level, lat, lon) or (time, lat, lon),
    SI units, lat ascending, lon ascending, levels top first.  When a level input also carries
    the column variables (qu, qv, w), they are kept in ``column_ds`` (same grid and times) with
    their sources in ``column_roles``; otherwise ``column_ds`` is None.
    """

    ds: xr.Dataset
    kind: str
    vertical: PressureLevels | HybridLevels | None
    roles: dict
    files: list
    periodic: bool
    lat: np.ndarray
    lon: np.ndarray
    times: np.ndarray
    warnings: list = field(default_factory=list)
    column_ds: xr.Dataset | None = None
    column_roles: dict = field(default_factory=dict)
    extra_roles: dict = field(default_factory=dict)  # optional roles found (OPTIONAL_ROLES)
    #: how a derived role was obtained, e.g. {"q": "from relative humidity 'r' and ..."}
    derived: dict = field(default_factory=dict)
    #: a projected grid (budget.gridmap.ProjectedGrid; lat/lon are then 2-D), else None
    native_grid: object = None

    def describe(self) -> str:
        """A few lines for command-line summaries."""
        lines = []
        src = ", ".join(f"{r}={s}" for r, s in self.roles.items())
        lines.append(f"{self.kind} input: {src}")
        if isinstance(self.vertical, PressureLevels):
            p = np.asarray(self.vertical.p) / 100.0
            lines.append(
                f"vertical: {p.size} pressure levels, {_fmt(p[0])} to {_fmt(p[-1])} hPa"
            )
        elif isinstance(self.vertical, HybridLevels):
            n = len(self.vertical.b_interface) - 1
            a = np.asarray(self.vertical.a_interface_pa, float)
            b = np.asarray(self.vertical.b_interface, float)
            lines.append(
                f"vertical: {n} hybrid sigma-pressure levels, top interface "
                f"{_fmt(a[0] / 100.0)} hPa + {_fmt(b[0])} ps, bottom "
                f"{_fmt(a[-1] / 100.0)} hPa + {_fmt(b[-1])} ps"
            )
        if self.native_grid is not None:
            lines.append(f"grid: {self.native_grid.shape[0]} x {self.native_grid.shape[1]} cells of "
                         f"{self.native_grid.mapping.describe()}, {self.native_grid.extent_text()[2:]}")
            return self._describe_rest(lines)
        nlat, nlon = self.lat.size, self.lon.size
        dlat = spacing(self.lat)
        dlon = spacing(self.lon)
        lines.append(
            f"grid: {nlat} lat x {nlon} lon ({_fmt(dlat)} x {_fmt(dlon)} deg), "
            f"lat {_fmt(self.lat[0])} to {_fmt(self.lat[-1])}, "
            f"lon {_fmt(self.lon[0])} to {_fmt(self.lon[-1])}"
            + (" (global, periodic)" if self.periodic else "")
        )
        return self._describe_rest(lines)

    def _describe_rest(self, lines: list) -> str:
        t = self.times
        if t.size and not np.isnat(t[0]):
            step = ""
            if t.size > 1:
                step = f", step {_fmt_step(pd.Timedelta(np.median(np.diff(t))))}"
            lines.append(
                f"time: {t.size} steps, {iso(t[0])} to {iso(t[-1])}{step}"
            )
        else:
            lines.append("time: 1 step, no time in the file")
        for r, how in self.derived.items():
            lines.append(f"{r} derived {how}")
        if self.extra_roles:
            lines.append("also: " + ", ".join(f"{r}={s}" for r, s in self.extra_roles.items()))
        if self.column_ds is not None:
            lines.append(
                "also column fields: "
                + ", ".join(f"{r}={s}" for r, s in self.column_roles.items())
            )
        nf = len(self.files)
        if nf:
            lines.append(f"files: {nf} ({self.files[0]}{' ...' if nf > 1 else ''})")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines)


def _fmt(x) -> str:
    return f"{float(x):g}"


def iso(t) -> str:
    return pd.Timestamp(t).isoformat()


def _fmt_step(dt: pd.Timedelta) -> str:
    secs = dt.total_seconds()
    for size, unit in ((86400, "day"), (3600, "h"), (60, "min")):
        if secs >= size and secs % size == 0:
            n = int(secs // size)
            return f"{n} {unit}{'s' if unit == 'day' and n > 1 else ''}"
    return f"{secs:g} s"


def spacing(x: np.ndarray) -> float:
    return float(np.median(np.diff(x))) if x.size > 1 else float("nan")
