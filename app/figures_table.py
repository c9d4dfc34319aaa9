"""Numbers on screen and the budget's tables: one number format, the period table of every
term, the edge table (pure functions of a budget Dataset; plain rows, no Dash)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from budget import terms

from .figures import (TOTAL_LABELS, UNIT_LABELS, VIEWS, budget_view, convert, pressure_rate,
                      rate_unit)

def number(value: float, digits: int = 4) -> str:
    """One format for every number on screen: ``digits`` significant digits, thousands
    grouped with commas, never an exponent ("44,195,550" → "44,200,000"; 0.000123 →
    "0.000123")."""
    v = float(value)
    if not math.isfinite(v):
        return "—"
    if v == 0:
        return "0"
    exponent = math.floor(math.log10(abs(v)))
    places = digits - 1 - exponent  # negative: round to tens, hundreds, …
    rounded = round(v, places)
    decimals = max(0, places)
    if decimals > 12:  # below a millionth of a millionth: zero for every purpose here
        return "0"
    text = f"{rounded:,.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def _window(budget, start: int, end: int | None):
    n = budget.sizes["time"]
    end = n - 1 if end is None else min(end, n - 1)
    return max(0, min(start, end)), end


def _integral(values, seconds, base: float) -> float:
    """The period total of a sampled rate by the rule of budget.periods (time steps as
    intervals, INTEGRATION_RULE), so that mean × length = total (0 for a single step)."""
    from budget.periods import step_intervals

    if values.size < 2:
        return 0.0
    a, b, _ = step_intervals(seconds)
    return float(np.sum(values * (b - a)) / base)


def _row(term: str, mean: str, total: str, mean_value=float("nan"), total_value=float("nan")):
    return {"term": term, "mean": mean, "total": total, "mean_value": float(mean_value),
            "total_value": float(total_value)}


#: Rate rows of the period table, (variable, label) from the term catalogue (budget/terms.py)
WATER_TERMS = {
    "vapour": [(t.name, t.label) for t in terms.table_terms() if t.family != "total_water"],
    "total": [(n, terms.term(n).label) for n in (
        "total_water_convergence", "total_water_tendency", "p_minus_e_total_water",
        "p_minus_e_total_water_uncorrected")],
}
PERIOD_TERMS = WATER_TERMS["vapour"]


_CORRECTION_WORDS = {
    "applied": "applied",
    "switched_off": "off: the files' winds are used as they are",
    "unavailable": "not available (column inputs carry no dry-air flux)",
}


def correction_state(budget) -> str:
    """Whether the mass correction changed this result: the engine's status attribute (data,
    budget.closure.CorrectionState), or else the numbers themselves."""
    status = budget.attrs.get("mass_correction_status")
    if status in _CORRECTION_WORDS:
        return _CORRECTION_WORDS[status]
    if "mass_correction_convergence" not in budget:
        return _CORRECTION_WORDS["unavailable"]
    # the corrected and uncorrected P − E differ only when it was applied
    applied = not np.allclose(budget["p_minus_e"].values,
                              budget["p_minus_e_uncorrected"].values, equal_nan=True)
    return _CORRECTION_WORDS["applied" if applied else "switched_off"]


def period_rows(budget, units: str = "mm/day", start: int = 0, end: int | None = None,
                kind: str = "vapour"):
    """Period means and totals of the chosen budget over time steps start..end (inclusive).

    Totals follow budget.periods' rule, time steps as intervals (mm, kg or m³ for water; hPa
    for dry air).  Returns dicts with term, mean, total (text for the table) and
    mean_value / total_value (floats in the displayed units).
    """
    units = rate_unit(units, kind)
    budget_view(kind)
    start, end = _window(budget, start, end)
    area = float(budget.attrs["region_area_m2"])
    times = pd.to_datetime(budget["time"].values[start:end + 1])
    seconds = (times - times[0]).total_seconds().to_numpy(dtype=float)
    if kind == "dry":
        return _dry_rows(budget, start, end, seconds, area)
    total_unit, base = TOTAL_LABELS[units]
    rows = []
    for var, label in WATER_TERMS[kind]:
        if var not in budget:
            continue
        rate = np.asarray(convert(budget[var].values[start:end + 1], units, area), float)
        mean, total = float(np.mean(rate)), _integral(rate, seconds, base)
        rows.append(_row(label, f"{number(mean)} {UNIT_LABELS[units]}",
                         f"{number(total)} {total_unit}", mean, total))
    if kind == "vapour":
        rows += _correction_rows(budget, start, end)
    content = VIEWS[kind].content
    if content in budget:
        w = np.asarray(budget[content].values[start:end + 1], float)
        label = "Precipitable water" if kind == "vapour" else "Total-water column"
        rows.append(_row(f"{label} (mean; start → end)", f"{number(np.mean(w))} kg m⁻²",
                         f"{number(w[0])} → {number(w[-1])} kg m⁻²", np.mean(w), w[-1] - w[0]))
    return rows


def _correction_rows(budget, start, end):
    rows = []
    if "dry_air_residual_pressure" in budget:
        r = np.asarray(terms.to_display("dry_air_residual_pressure",
                                        budget["dry_air_residual_pressure"].values[start:end + 1],
                                        "hPa/day"), float)
        rows.append(_row(terms.term("dry_air_residual_pressure").label,
                         f"{number(np.mean(r))} hPa/day",
                         "", np.mean(r)))
    if "mass_correction_speed" in budget:
        c = np.asarray(budget["mass_correction_speed"].values[start:end + 1], float) * 100
        rows.append(_row(terms.term("mass_correction_speed").label,
                         f"{number(np.mean(c))} cm/s", "", np.mean(c)))
    rows.append(_row("Mass correction", correction_state(budget), ""))
    return rows


def _dry_rows(budget, start, end, seconds, area):
    """Dry air: import in kg/s and as hPa/day; convergence; tendencies; residual; correction."""
    from budget.constants import STANDARD_GRAVITY

    if "dry_air_import" not in budget:
        return [_row("Dry-air budget", "not available (column inputs carry no dry-air "
                     "flux)", "")]
    sl = slice(start, end + 1)
    rows = []
    imp = np.asarray(budget["dry_air_import"].values[sl], float)
    rows.append(_row(terms.term("dry_air_import").label, f"{number(np.mean(imp))} kg/s",
                     f"{number(_integral(imp, seconds, 1.0))} kg", np.mean(imp),
                     _integral(imp, seconds, 1.0)))

    def hpa(label, values):
        v = np.asarray(pressure_rate(values), float)
        total = _integral(v, seconds, 86400.0)
        rows.append(_row(label, f"{number(np.mean(v))} hPa/day", f"{number(total)} hPa",
                         np.mean(v), total))

    hpa("Dry-air import as surface-pressure change", imp / area)
    hpa(terms.term("dry_air_convergence").label, budget["dry_air_convergence"].values[sl])
    if "pw_tendency" in budget:
        hpa("Surface-pressure tendency (dry air + vapour)",
            budget["dry_air_tendency"].values[sl] + budget["pw_tendency"].values[sl])
    hpa(terms.term("dry_air_tendency").label, budget["dry_air_tendency"].values[sl])
    hpa(f"{terms.term('dry_air_residual').label} (tendency − convergence)",
        budget["dry_air_residual"].values[sl])
    r = np.asarray(pressure_rate(budget["dry_air_residual"].values[sl]), float)
    rows.append(_row("Typical size of the residual (mean of |residual|)",
                     f"{number(np.mean(np.abs(r)))} hPa/day", "", np.mean(np.abs(r))))
    c = np.asarray(budget["mass_correction_speed"].values[sl], float) * 100
    rows.append(_row(terms.term("mass_correction_speed").label, f"{number(np.mean(c))} cm/s",
                     "", np.mean(c)))
    rows.append(_row("Mass correction", correction_state(budget), ""))
    mu = np.asarray(budget["dry_air_mass"].values[sl], float) * STANDARD_GRAVITY / 100
    rows.append(_row(f"{terms.term('dry_air_mass').label} (mean; start → end)", f"{number(np.mean(mu))} hPa",
                     f"{number(mu[0])} → {number(mu[-1])} hPa", np.mean(mu), mu[-1] - mu[0]))
    return rows


def edge_rows(budget, units: str = "kg/s", start: int = 0, end: int | None = None,
              kind: str = "vapour"):
    """Mean import through every edge over steps start..end (positive = coming in).

    Water: kg/s and m³/s are the transport itself; mm/day is the transport spread over the
    region's area (what this edge alone adds to the convergence).  Dry air: kg/s, or hPa/day
    (the surface-pressure tendency this edge alone would give the region).  Returns
    dicts with edge, mean (text), mean_value (displayed units), direction ("in" / "out"),
    one per edge in boundary order.
    """
    from budget.units import transport_to_rate

    units = rate_unit(units, kind)
    view = budget_view(kind)
    if view.edge not in budget:
        return []
    start, end = _window(budget, start, end)
    kg_s = np.asarray(budget[view.edge].values[start:end + 1], float).mean(axis=0)
    area = float(budget.attrs["region_area_m2"])
    if kind == "dry":
        unit = terms.unit_label(units)
        values = kg_s if units == "kg/s" else np.asarray(pressure_rate(kg_s / area), float)
    else:
        values = np.asarray(convert(transport_to_rate(kg_s, area), units, area), float)
        unit = UNIT_LABELS[units]
    names = [str(e) for e in budget["edge"].values]
    return [{"edge": names[i], "mean_value": float(values[i]),
             "mean": f"{number(values[i])} {unit}",
             "direction": "in" if values[i] > 0 else "out"} for i in range(len(names))]
