"""What a report figure is drawn from: one typed value, plus labels and unit conversions."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr

from budget.terms import term, to_display
from budget.units import convert

# The unit each series is drawn in: rates as area means in mm/day, precipitable water in mm.
# Labels and conversions come from the term catalogue (budget/terms.py).
SERIES_UNITS = {
    "precipitable_water": "mm",
    "boundary_convergence": "mm/day",
    "area_convergence": "mm/day",
    "pw_tendency": "mm/day",
    "p_minus_e": "mm/day",
    "precipitation": "mm/day",
    "evaporation": "mm/day",
    "closure_residual": "mm/day",
    "mass_correction_convergence": "mm/day",
}


def series_label(name: str) -> str:
    """The legend entry of a budget series (term catalogue)."""
    return term(name).legend


@dataclass
class FigureData:
    """Everything a report figure shows; built by app.figure_cmd, drawn by app.report.

    ``budget`` is a ledger Dataset (budget.ledger.compute, or one read back from NetCDF);
    ``region`` the budget.region.Region it describes; ``mean_map`` the period-mean column
    fields (budget.maps.column_snapshot variables averaged over the steps in ``map_steps``);
    ``discharge`` a river discharge series in m3 s-1 for the climatology, if given.
    """

    budget: xr.Dataset
    region: object
    source: str = ""
    invented: bool = False
    mean_map: xr.Dataset | None = None
    map_steps: int = 0
    discharge: pd.Series | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def area_m2(self) -> float:
        return float(self.budget.attrs["region_area_m2"])

    @property
    def times(self) -> pd.DatetimeIndex:
        return pd.DatetimeIndex(self.budget["time"].values)

    @property
    def region_name(self) -> str:
        return str(self.budget.attrs.get("region_name", "region"))

    def period_text(self) -> str:
        t = self.times
        return f"{t[0]:%Y-%m-%d %H:%M} to {t[-1]:%Y-%m-%d %H:%M} UTC ({t.size} steps)"

    def caption(self) -> str:
        parts = [f"Period {self.period_text()}", f"data: {self.source or 'unnamed fields'}",
                 f"method: {self.budget.attrs.get('method', 'boundary')}",
                 f"mass correction: {self.budget.attrs.get('mass_correction', 'n/a')}",
                 f"Fluxfence {self.budget.attrs.get('software_version', '')}".strip()]
        return " · ".join(parts)

    def series(self, name: str) -> np.ndarray | None:
        """A budget series in its SERIES_UNITS unit, or None when the budget lacks it."""
        if name not in self.budget:
            return None
        return to_display(name, self.budget[name].values, SERIES_UNITS[name], self.area_m2)

    def to_m3_s(self, mm_day):
        """An area-mean rate in mm/day as a volume rate over the region, m3 s-1."""
        return convert(np.asarray(mm_day, float) / 86400.0, "m3/s", self.area_m2)

    def from_m3_s(self, m3_s):
        return np.asarray(m3_s, float) / convert(1.0 / 86400.0, "m3/s", self.area_m2)


def monthly_cycle(data: FigureData, name: str = "p_minus_e") -> tuple[pd.DataFrame, str]:
    """Mean annual cycle of a rate term in mm/day, and what its spread band means.

    With complete months in two years or more, the cycle is budget.periods.climatology's:
    the interannual mean of the monthly means, spread ±1 standard deviation between years.
    A shorter record falls back to the daily means grouped by calendar month, spread the 10th
    to 90th percentiles of those daily means.  Columns: month, mean, low, high, years.
    """
    from budget.periods import climatology

    clim = climatology(data.budget)
    months = clim[(clim["period"] == "month") & (clim["years"] >= 1)]
    column = f"{name}_mean_mm_day"
    if column in months and (months["years"] >= 2).any():
        mean = months[column].to_numpy(float)
        std = months[f"{name}_std_mm_day"].fillna(0.0).to_numpy(float)
        out = pd.DataFrame({"month": months["month"].astype(int).to_numpy(), "mean": mean, "low": mean - std,
                            "high": mean + std, "years": months["years"].astype(int).to_numpy()})
        return out, "±1 standard deviation between years"
    values = data.series(name)
    daily = pd.Series(values, index=data.times).resample("1D").mean().dropna()
    return _cycle(daily), "10–90 % of daily means"


def discharge_cycle(discharge: pd.Series) -> pd.DataFrame:
    """The same annual cycle for a discharge series (m3 s-1)."""
    return _cycle(discharge.resample("1D").mean().dropna())


def _cycle(daily: pd.Series) -> pd.DataFrame:
    groups = daily.groupby(daily.index.month)
    out = pd.DataFrame({
        "mean": groups.mean(),
        "low": groups.quantile(0.1),
        "high": groups.quantile(0.9),
        "days": groups.size(),
        "years": daily.groupby([daily.index.month, daily.index.year]).size().groupby(level=0).size(),
    })
    out.index.name = "month"
    return out.reset_index()
