"""The output term catalogue: one record per variable of the budget Dataset.

Every writer and every screen reads this table: the CSV and NetCDF writers (budget.export),
the command-line summaries, the dashboard's series, period table and axis titles. Each CSV
column name and each CF standard name of an output is spelled here and nowhere else in the
code. Adding a budget term is one row here plus the code that computes it (DEVELOPERS.md,
"How to add a budget term").

Values inside the engine are SI (``units``); a column or a screen shows them in a display
unit, converted by :func:`to_display` through budget.units.

CF standard names are from the CF standard-name table (v83): an area mean over the region
keeps the name of the quantity it averages (CF conventions, cell_methods "area: mean").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .catalogue import role
from .errors import RequestError
from .units import RATE_UNITS, convert, kg_m2_to_mm, pa_s_to_hpa_day, transport_to_rate

#: Families of terms (what a screen groups or switches between).
FAMILIES = ("vapour", "dry_air", "correction", "total_water", "observed", "edge", "profile", "attribution")

#: Display units: the key used in code, and the label shown in tables and axis titles.
UNIT_LABELS = {
    "mm": "mm",
    "mm/day": "mm/day",
    "kg/s": "kg/s",
    "m3/s": "m³/s",
    "m/s": "m/s",
    "kg m-2": "kg m⁻²",
    "kg m-2 s-1": "kg m⁻² s⁻¹",
    "kg m-1 s-1": "kg m⁻¹ s⁻¹",
    "hPa/day": "hPa/day",
}

#: Display units that are the SI units themselves under another spelling (no conversion).
_SAME = {"kg/s": "kg s-1", "m/s": "m s-1"}


@dataclass(frozen=True)
class Column:
    """One CSV column: its name (ending in the display unit) and that display unit."""

    name: str
    unit: str
    #: shown as a period mean in the command-line summary and the --each-feature summary.csv
    summary: bool = False


@dataclass(frozen=True)
class Term:
    """One output variable of the budget Dataset."""

    name: str  # the Dataset variable
    units: str  # SI units, UDUNITS spelling, as in the variable's `units` attribute
    long_name: str
    family: str
    label: str  # a row of a table, a line of a summary
    short: str = ""  # a legend entry or axis title (defaults to label)
    method: str = ""  # how it is computed (the variable's `method_detail`)
    standard_name: str | None = None  # CF standard name, where one exists
    columns: tuple[Column, ...] = ()  # CSV columns, in order
    table: int = 0  # position in the dashboard's period table (rates, converted); 0: not there
    dims: tuple[str, ...] = ("time",)

    @property
    def legend(self) -> str:
        return self.short or self.label

    def attrs(self, method: str | None = None) -> dict:
        """CF attributes for the variable: units, long_name, standard_name, method_detail."""
        out = {"units": self.units, "long_name": self.long_name}
        if self.standard_name:
            out["standard_name"] = self.standard_name
        detail = self.method if method is None else method
        if detail:
            out["method_detail"] = detail
        return out


_RATE = "kg m-2 s-1"
_MASS = "kg m-2"
_TRANSPORT = "kg s-1"
_BOUNDARY = "outward flux through the densified boundary, Q bilinearly interpolated to piece midpoints"
_CENTRED = "centred differences in time, one-sided at the ends"
_LAYERS = "layer slices of the column scheme (budget.layers); files' winds, no mass correction"


def _c(name: str, unit: str, summary: bool = False) -> Column:
    return Column(name, unit, summary)


def _cf(role_key: str) -> str:
    """The CF standard name of an input role (budget/catalogue.py), where an output term is the
    same quantity (precipitable water, precipitation, evaporation): spelled once, there."""
    return role(role_key).standard_names[0]


TERMS: tuple[Term, ...] = (
    # the water-vapour budget (budget.ledger)
    Term("precipitable_water", _MASS, "area-mean precipitable water", "vapour", "Precipitable water", "W (area mean)",
         method="cover-weighted mean of W; 1 kg m-2 = 1 mm",
         standard_name=_cf("w"),
         columns=(_c("precipitable_water_mm", "mm", True),)),
    Term("vapour_convergence", _RATE, "area-mean vapour-flux convergence", "vapour", "Vapour convergence",
         method="boundary or area method, as the run's `method` attribute says",
         columns=(_c("vapour_convergence_mm_day", "mm/day", True),)),
    Term("pw_tendency", _RATE, "tendency of area-mean precipitable water", "vapour",
         "Change of precipitable water, dW/dt", "dW/dt", method=_CENTRED,
         standard_name="tendency_of_atmosphere_mass_content_of_water_vapor",
         columns=(_c("pw_tendency_mm_day", "mm/day", True),), table=3),
    Term("p_minus_e", _RATE, "precipitation minus evaporation (convergence minus tendency)", "vapour", "P − E",
         method="P - E = -div(Q) - dW/dt", standard_name="surface_downward_water_flux",
         columns=(_c("p_minus_e_mm_day", "mm/day", True), _c("p_minus_e_kg_s", "kg/s"), _c("p_minus_e_m3_s", "m3/s", True)),
         table=4),
    Term("vapour_import", _TRANSPORT, "net water-vapour import through the boundary", "vapour", "Net vapour import",
         method=_BOUNDARY, columns=(_c("vapour_import_kg_s", "kg/s", True),)),
    Term("inflow", _TRANSPORT, "water-vapour inflow through the boundary (pieces with inward flux)", "vapour",
         "Vapour inflow", columns=(_c("inflow_kg_s", "kg/s"),)),
    Term("outflow", _TRANSPORT, "water-vapour outflow through the boundary (pieces with outward flux)", "vapour",
         "Vapour outflow", columns=(_c("outflow_kg_s", "kg/s"),)),
    Term("boundary_convergence", _RATE, "area-mean vapour-flux convergence, boundary method", "vapour",
         "Convergence, boundary method", "convergence (boundary)", method=_BOUNDARY,
         columns=(_c("boundary_convergence_mm_day", "mm/day"),), table=1),
    Term("area_convergence", _RATE, "area-mean vapour-flux convergence, area method", "vapour",
         "Convergence, area method", "convergence (area)",
         method="cover-weighted area mean of the centred-difference divergence on the sphere",
         columns=(_c("area_convergence_mm_day", "mm/day", True),), table=2),
    # the barotropic mass correction (budget.closure, budget.mass)
    Term("p_minus_e_uncorrected", _RATE, "P - E from the files' winds (no mass correction)", "correction",
         "P − E without the mass correction", columns=(_c("p_minus_e_uncorrected_mm_day", "mm/day", True),), table=5),
    Term("mass_correction_convergence", _RATE, "change of vapour convergence and of P - E by the mass correction",
         "correction", "Effect of the mass correction", method="-c x (boundary integral of W dl) / area",
         columns=(_c("mass_correction_mm_day", "mm/day", True),), table=6),
    Term("mass_correction_speed", "m s-1", "barotropic mass-correction speed, outward normal to the boundary",
         "correction", "Mass-correction speed (outward)",
         method="c = (dry-air import - A dmu/dt) / (boundary integral of mu dl); Delta(Q.n) = W c (Trenberth 1991)",
         columns=(_c("mass_correction_speed_m_s", "m/s", True),)),
    Term("vapour_import_uncorrected", _TRANSPORT, "net water-vapour import from the files' winds (no mass correction)",
         "correction", "Net vapour import without the mass correction",
         columns=(_c("vapour_import_uncorrected_kg_s", "kg/s"),)),
    Term("vapour_convergence_uncorrected", _RATE,
         "area-mean vapour-flux convergence from the files' winds (no mass correction)", "correction",
         "Vapour convergence without the mass correction"),
    # the dry-air mass budget (budget.closure, budget.mass)
    Term("dry_air_mass", _MASS, "area-mean dry-air column mass", "dry_air", "Dry-air column mass",
         method="(1/g) sum (1-q) dp over the layers above ground, top level to surface",
         columns=(_c("dry_air_mass_kg_m2", "kg m-2"),)),
    Term("dry_air_tendency", _RATE, "tendency of area-mean dry-air column mass", "dry_air",
         "Change of dry-air mass", method=_CENTRED),
    Term("dry_air_import", _TRANSPORT, "net dry-air mass import through the boundary", "dry_air", "Net dry-air import"),
    Term("dry_air_edge_import", _TRANSPORT, "net dry-air mass import through each edge", "dry_air",
         "Dry-air import through the edge", method=_BOUNDARY + "; files' winds", dims=("time", "edge")),
    Term("dry_air_import_density", "kg m-1 s-1", "dry-air mass import per unit boundary length", "profile",
         "Dry-air import per unit boundary length", method="files' winds", dims=("time", "piece")),
    Term("dry_air_normal_flux_density", "kg m-1 s-1 Pa-1", "dry-air mass import per unit boundary length per unit pressure",
         "profile", "Dry-air import per unit length and pressure", method="(1/g)(1-q) V.n per layer; files' winds",
         dims=("time", "level", "piece")),
    Term("dry_air_convergence", _RATE, "area-mean dry-air mass convergence", "dry_air", "Dry-air convergence"),
    Term("dry_air_residual", _RATE, "dry-air budget residual (tendency minus convergence)", "dry_air",
         "Dry-air residual", method="zero for mass-consistent winds; before any correction",
         columns=(_c("dry_air_residual_kg_m2_s", "kg m-2 s-1"),)),
    Term("dry_air_residual_pressure", "Pa s-1", "dry-air budget residual as a surface-pressure tendency",
         "dry_air", "Dry-air residual", method="residual x g (hydrostatic)",
         columns=(_c("dry_air_residual_hpa_day", "hPa/day", True),)),
    # precipitation and evaporation from the files (budget.observed)
    Term("precipitation", _RATE, "area-mean precipitation from the files", "observed", "Precipitation in the files",
         "precipitation", standard_name=_cf("precip"),
         columns=(_c("precipitation_mm_day", "mm/day", True),), table=7),
    Term("evaporation", _RATE, "area-mean evaporation from the files, positive upward", "observed",
         "Evaporation in the files (upward)", "evaporation", standard_name=_cf("evap"),
         columns=(_c("evaporation_mm_day", "mm/day", True),), table=8),
    Term("p_minus_e_observed", _RATE, "precipitation minus evaporation from the files", "observed",
         "P − E from the files", columns=(_c("p_minus_e_observed_mm_day", "mm/day"),), table=9),
    Term("closure_residual", _RATE, "closure residual: P - E from the files minus P - E from the budget", "observed",
         "Closure residual (files − budget)", method="(precipitation - evaporation) - (vapour convergence - dW/dt)",
         columns=(_c("closure_residual_mm_day", "mm/day", True),), table=10),
    # the total-water budget: vapour + cloud liquid + cloud ice (budget.closure)
    Term("total_water_content", _MASS, "area-mean total water column (vapour + cloud liquid + cloud ice)",
         "total_water", "Total water", columns=(_c("total_water_mm", "mm"),)),
    Term("total_water_tendency", _RATE, "tendency of area-mean total water column", "total_water",
         "Change of total water", method=_CENTRED),
    Term("total_water_import", _TRANSPORT, "net total-water import through the boundary", "total_water",
         "Net total-water import"),
    Term("total_water_convergence", _RATE, "area-mean total-water flux convergence", "total_water",
         "Total-water convergence", columns=(_c("total_water_convergence_mm_day", "mm/day"),)),
    Term("p_minus_e_total_water", _RATE, "P - E from the total-water budget (convergence minus tendency)",
         "total_water", "P − E, total water", columns=(_c("p_minus_e_total_water_mm_day", "mm/day", True),), table=11),
    Term("p_minus_e_total_water_uncorrected", _RATE,
         "P - E from the total-water budget, files' winds (no mass correction)", "total_water",
         "P − E, total water, without the mass correction"),
    # where the water comes in (budget.attribution): boundary IVT, atmospheric rivers, layers
    Term("boundary_mean_ivt", "kg m-1 s-1", "mean integrated vapour transport along the boundary", "attribution",
         "Mean IVT along the boundary", "boundary IVT",
         method="|Q| interpolated to the boundary pieces, length-weighted; files' winds",
         columns=(_c("boundary_mean_ivt_kg_m_s", "kg m-1 s-1"),)),
    Term("ar_inflow", _TRANSPORT, "water-vapour inflow where IVT meets the atmospheric-river threshold", "attribution",
         "Atmospheric-river inflow", "AR inflow", columns=(_c("ar_inflow_kg_s", "kg/s", True),)),
    Term("ar_edge_inflow", _TRANSPORT, "atmospheric-river inflow through each edge", "attribution",
         "Atmospheric-river inflow through the edge", dims=("time", "edge")),
    Term("layer_import", _TRANSPORT, "net water-vapour import by layer", "attribution", "Import by layer",
         method=_LAYERS, columns=(_c("layer_{layer}_import_kg_s", "kg/s"),), dims=("time", "layer")),
    Term("layer_convergence", _RATE, "area-mean vapour-flux convergence by layer", "attribution",
         "Convergence by layer", method="boundary method; " + _LAYERS,
         columns=(_c("layer_{layer}_convergence_mm_day", "mm/day"),), dims=("time", "layer")),
    Term("layer_edge_import", _TRANSPORT, "water-vapour import through each edge by layer", "attribution",
         "Import by layer and edge", method=_LAYERS, dims=("time", "layer", "edge")),
    # along the boundary (budget.ledger; profiles=True for the last three)
    Term("edge_import", _TRANSPORT, "water-vapour import through each edge", "edge", "Import through the edge",
         dims=("time", "edge")),
    Term("boundary_import_density", "kg m-1 s-1", "water-vapour import per unit boundary length", "profile",
         "Import per unit boundary length", dims=("time", "piece")),
    Term("normal_flux_density", "kg m-1 s-1 Pa-1", "import per unit boundary length per unit pressure", "profile",
         "Import per unit length and pressure", dims=("time", "level", "piece")),
    Term("layer_thickness", "Pa", "layer thickness above ground at each boundary piece", "profile",
         "Layer thickness above ground", dims=("time", "level", "piece")),
)

BY_NAME: dict[str, Term] = {t.name: t for t in TERMS}


def term(name: str) -> Term:
    """The catalogue record of a Dataset variable."""
    try:
        return BY_NAME[name]
    except KeyError:
        raise KeyError(f"{name!r} is not in the term catalogue (budget/terms.py); add a row for it.") from None


def attrs(name: str, method: str | None = None) -> dict:
    """units, long_name, standard_name and method_detail of a variable, for the Dataset."""
    return term(name).attrs(method)


def csv_columns() -> list[tuple[Column, Term]]:
    """Every CSV column after `time`, in order, with the term it shows."""
    return [(c, t) for t in TERMS for c in t.columns]


def column(name: str) -> tuple[Column, Term]:
    """The column record and its term, from a CSV column name."""
    for c, t in csv_columns():
        if c.name == name:
            return c, t
    raise KeyError(f"{name!r} is not a CSV column of the term catalogue (budget/terms.py).")


def summary_columns() -> list[tuple[Column, Term]]:
    """The columns shown as period means in the command-line and --each-feature summaries."""
    return [(c, t) for c, t in csv_columns() if c.summary]


def table_terms() -> list[Term]:
    """The rate terms of the dashboard's period table, in catalogue order."""
    return sorted((t for t in TERMS if t.table), key=lambda t: t.table)


def family(name: str) -> list[Term]:
    """The terms of one family (see FAMILIES)."""
    if name not in FAMILIES:
        raise KeyError(f"unknown family {name!r}; one of {', '.join(FAMILIES)}")
    return [t for t in TERMS if t.family == name]


def unit_label(unit: str) -> str:
    """How a display unit is written on screen (mm/day, m³/s, kg m⁻² ...)."""
    return UNIT_LABELS.get(unit, unit)


def axis_title(name: str, unit: str | None = None) -> str:
    """An axis title for a term: its short label and the unit, e.g. "P − E (mm/day)"."""
    t = term(name)
    return f"{t.legend} ({unit_label(unit or t.units)})"


def to_display(t: Term | str, values, unit: str, area_m2: float | None = None) -> np.ndarray:
    """A term's SI values in a display unit, through budget.units.

    Area-mean rates (kg m-2 s-1) go to mm/day, kg/s or m3/s over the region's area; transports
    (kg s-1) to kg/s as they are, or to m3/s and mm/day over the area; column masses (kg m-2)
    to mm of liquid water; a display unit that is the SI unit keeps the values.
    """
    t = term(t) if isinstance(t, str) else t
    v = np.asarray(values, dtype=float)
    if unit == t.units or _SAME.get(unit) == t.units:
        return v
    if t.units == _MASS and unit == "mm":
        return kg_m2_to_mm(v)
    if t.units == "Pa s-1" and unit == "hPa/day":
        return pa_s_to_hpa_day(v)
    if unit in RATE_UNITS and t.units in (_RATE, _TRANSPORT):
        if area_m2 is None:
            raise RequestError(f"Showing {t.name} in {unit} needs the region's area.")
        rate = transport_to_rate(v, area_m2) if t.units == _TRANSPORT else v
        return convert(rate, unit, area_m2)
    raise RequestError(f"{t.name} is in {t.units} and cannot be shown in {unit}.")
