"""Levels stage of budget.fields: the vertical coordinate of level inputs.

Pressure levels become a `budget.vertical.PressureLevels` (Pa, top first); a CF hybrid
sigma-pressure coordinate (standard_name atmosphere_hybrid_sigma_pressure_coordinate,
formula_terms ``a: A b: B ps: PS p0: P0`` or ``ap: AP b: B ps: PS``, CF conventions ch. 7 and
appendix D) becomes a `budget.vertical.HybridLevels` from its interface coefficients: the
bounds variables (with their own formula_terms), else the coefficients' own bounds, else
midway between levels.  Each returns the order that sorts the levels top first.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from ..errors import FieldsError
from ..units import PRESSURE, normalise
from ..vertical import HybridLevels, PressureLevels
from .hints import units_hint

HYBRID = "atmosphere_hybrid_sigma_pressure_coordinate"
#: Any surface pressure orders hybrid levels; the standard atmosphere's is used (Pa).
_REF_PS = 101325.0


@dataclass
class Levels:
    """The vertical stage's result: order (top first), coordinate values, the scheme."""

    order: np.ndarray
    values: np.ndarray
    vertical: PressureLevels | HybridLevels
    notes: list = field(default_factory=list)


def is_hybrid(coord: xr.DataArray) -> bool:
    return coord.attrs.get("standard_name") == HYBRID or "formula_terms" in coord.attrs


def hybrid_surface_pressure(raw: xr.Dataset, vdim: str | None) -> str | None:
    """The surface-pressure variable a hybrid coordinate names in its formula_terms."""
    if vdim is None or vdim not in raw.variables or not is_hybrid(raw[vdim]):
        return None
    psn = parse_terms(raw[vdim].attrs.get("formula_terms", "")).get("ps")
    return psn if psn and psn in raw.variables and psn not in raw.dims else None


def read_levels(raw: xr.Dataset, vdim: str, first_var: str, units: dict, where: str) -> Levels:
    """The levels stage: a pressure or hybrid coordinate, or one sentence saying what is wrong."""
    if vdim not in raw.variables:
        raise FieldsError(
            f"The vertical dimension '{vdim}' of '{first_var}' in {where} has no "
            "coordinate values; add a pressure (Pa or hPa) or CF hybrid sigma-pressure "
            "coordinate variable."
        )
    coord = raw[vdim]
    if is_hybrid(coord):
        return hybrid_levels(raw, vdim, units, where)
    if is_pressure_coord(coord) or "level" in units or vdim in units:
        return pressure_levels(raw, vdim, units, where)
    u = coord.attrs.get("units")
    raise FieldsError(
        f"The vertical coordinate '{vdim}' in {where} (units "
        f"'{u if u is not None else 'none'}') is neither pressure nor CF hybrid "
        "sigma-pressure; give pressure levels a units attribute (or "
        f"{units_hint('level')}), or a hybrid coordinate its formula_terms."
    )


def pressure_factor(name: str, raw, where: str, key: str) -> float:
    """The factor to Pa of a pressure unit, or one sentence naming the variable."""
    if raw is None or str(raw).strip() == "":
        raise FieldsError(
            f"The pressure '{name}' in {where} has no units attribute; state its unit with "
            f"{units_hint(key)}."
        )
    k = normalise(raw)
    if k not in PRESSURE:
        raise FieldsError(
            f"The pressure '{name}' in {where} has units '{raw}', which is not a pressure "
            f"unit Fluxfence knows (Pa, hPa, mbar, millibar, mb); override it with "
            f"{units_hint(key)}."
        )
    return PRESSURE[k]


def parse_terms(text: str) -> dict[str, str]:
    parts = re.findall(r"(\w+)\s*:\s*(\S+)", str(text))
    return {k: v for k, v in parts}


def is_pressure_coord(var: xr.DataArray) -> bool:
    if var.attrs.get("standard_name") == "air_pressure":
        return True
    return normalise(var.attrs.get("units", "")) in PRESSURE


def pressure_levels(ds, vdim, units, where) -> Levels:
    coord = ds[vdim]
    override = units.get("level", units.get(vdim))
    raw = override if override is not None else coord.attrs.get("units")
    fac = pressure_factor(vdim, raw, where, "level")
    p = np.asarray(coord.values, dtype=float) * fac
    if np.unique(p).size != p.size:
        raise FieldsError(
            f"The pressure levels '{vdim}' in {where} repeat a value "
            f"({_dupes(p / 100.0)} hPa); each level must appear once."
        )
    if np.nanmax(p) < 5000.0:
        raise FieldsError(
            f"The pressure levels '{vdim}' in {where} are labelled '{raw}' but all lie above "
            f"50 hPa (largest {np.nanmax(p):g} Pa), which looks like hPa labelled Pa; "
            f"correct it with {units_hint('level')}."
        )
    order = np.argsort(p, kind="stable")
    return Levels(order, p[order], PressureLevels(p[order]))


def _dupes(x: np.ndarray) -> str:
    vals, counts = np.unique(x, return_counts=True)
    return ", ".join(f"{v:g}" for v in vals[counts > 1])


def _coef(ds, name, where, what):
    if name not in ds.variables:
        raise FieldsError(
            f"The hybrid coordinate's formula_terms in {where} name '{name}' as {what}, but the "
            "file has no such variable; fix the formula_terms attribute or add the variable."
        )
    return ds[name]


@dataclass(frozen=True)
class _Hybrid:
    """What the hybrid helpers share: the dataset, its coordinate and its formula_terms."""

    ds: xr.Dataset
    vdim: str
    terms: dict
    units: dict
    where: str

    def a_pa(self, term_map: dict, bounds: bool) -> np.ndarray:
        """The 'a' coefficients (of levels or of bounds) in Pa: ap, or a × p0."""
        ds, units, where = self.ds, self.units, self.where
        if "ap" in term_map:
            var = _coef(ds, term_map["ap"], where, "ap")
            ov = units.get("ap", units.get(term_map["ap"]))
            raw_units = var.attrs.get("units")
            if bounds and raw_units is None and self.terms.get("ap") in ds.variables:
                # CF 7.1: a boundary variable takes its units from its parent variable
                raw_units = ds[self.terms["ap"]].attrs.get("units")
            fac = pressure_factor(term_map["ap"], ov or raw_units, where, "ap")
            return np.asarray(var.values, dtype=float) * fac
        var = _coef(ds, term_map["a"], where, "a")
        if "p0" not in term_map:
            raise FieldsError(
                f"The hybrid coordinate '{self.vdim}' in {where} gives 'a' without 'p0' in its "
                "formula_terms; add 'p0: P0' naming the reference pressure variable."
            )
        p0v = _coef(ds, term_map["p0"], where, "p0")
        ov = units.get("p0", units.get(term_map["p0"]))
        fac = pressure_factor(term_map["p0"], ov or p0v.attrs.get("units"), where, "p0")
        p0 = float(np.asarray(p0v.values, dtype=float).ravel()[0]) * fac
        return np.asarray(var.values, dtype=float) * p0


def hybrid_levels(ds, vdim, units, where) -> Levels:
    coord = ds[vdim]
    terms = parse_terms(coord.attrs.get("formula_terms", ""))
    if "b" not in terms or not ("a" in terms or "ap" in terms):
        raise FieldsError(
            f"The hybrid sigma-pressure coordinate '{vdim}' in {where} lacks usable "
            "formula_terms (need 'a: A b: B ps: PS p0: P0' or 'ap: AP b: B ps: PS'); add the "
            "attribute as in CF conventions appendix D."
        )
    h = _Hybrid(ds, vdim, terms, units, where)
    a_mid = h.a_pa(terms, False)
    b_mid = np.asarray(_coef(ds, terms["b"], where, "b").values, dtype=float)
    if a_mid.shape != (coord.size,) or b_mid.shape != (coord.size,):
        raise FieldsError(
            f"The hybrid coefficients of '{vdim}' in {where} do not have one value per level; "
            "check the formula_terms variables."
        )
    p_mid = a_mid + b_mid * _REF_PS
    if np.unique(p_mid).size != p_mid.size:
        raise FieldsError(
            f"The hybrid levels '{vdim}' in {where} repeat a level (equal a and b); each level "
            "must appear once."
        )
    order = np.argsort(p_mid, kind="stable")
    a_int, b_int, notes = _hybrid_interfaces(h, order, a_mid[order], b_mid[order])
    vert = HybridLevels(np.asarray(a_int, float), np.asarray(b_int, float))
    return Levels(order, np.asarray(coord.values)[order], vert, notes)


def _hybrid_interfaces(h: _Hybrid, order, a_mid, b_mid):
    """Interface coefficients: from the bounds variable, the coefficients' bounds, or midway."""
    ds, terms, vdim, where = h.ds, h.terms, h.vdim, h.where
    bname = ds[vdim].attrs.get("bounds")
    if bname and bname in ds.variables:
        bterms = parse_terms(ds[bname].attrs.get("formula_terms", ""))
        if "b" in bterms and ("a" in bterms or "ap" in bterms):
            if "p0" not in bterms and "p0" in terms:
                bterms["p0"] = terms["p0"]
            a_b = h.a_pa(bterms, True)
            b_b = np.asarray(_coef(ds, bterms["b"], where, "b bounds").values, dtype=float)
            return (*_interfaces_from_bounds(a_b, b_b, order, vdim, where), [])
    # no bounds: coefficients' own bounds attributes (as CMIP files carry), else midway
    an = terms.get("ap", terms.get("a"))
    ab = ds[an].attrs.get("bounds") if an in ds.variables else None
    bb = ds[terms["b"]].attrs.get("bounds")
    if ab and bb and ab in ds.variables and bb in ds.variables:
        key = "ap" if "ap" in terms else "a"
        bt = {key: ab, "b": bb}
        if "p0" in terms:
            bt["p0"] = terms["p0"]
        a_b = h.a_pa(bt, True)
        b_b = np.asarray(ds[bb].values, dtype=float)
        return (*_interfaces_from_bounds(a_b, b_b, order, vdim, where), [])
    a_int = np.clip(_midway(a_mid), 0.0, None)
    b_int = np.clip(_midway(b_mid), 0.0, 1.0)
    note = (f"hybrid coordinate '{vdim}' has no bounds; layer interfaces were placed midway "
            "between levels, the outermost extrapolated (a >= 0, 0 <= b <= 1)")
    return a_int, b_int, [note]


def _midway(c: np.ndarray) -> np.ndarray:
    if c.size == 1:
        return np.array([c[0], c[0]], dtype=float)
    inner = 0.5 * (c[1:] + c[:-1])
    first = c[0] - 0.5 * (c[1] - c[0])
    last = c[-1] + 0.5 * (c[-1] - c[-2])
    return np.concatenate([[first], inner, [last]])


def _interfaces_from_bounds(a_b, b_b, order, vdim, where):
    n = order.size
    if a_b.shape != (n, 2) or b_b.shape != (n, 2):
        raise FieldsError(
            f"The bounds of the hybrid coordinate '{vdim}' in {where} are not shaped "
            "(level, 2); fix the bounds variables."
        )
    a_b, b_b = a_b[order], b_b[order]
    p_b = a_b + b_b * _REF_PS
    swap = p_b[:, 0] > p_b[:, 1]  # upper (smaller pressure) bound first
    a_b = np.where(swap[:, None], a_b[:, ::-1], a_b)
    b_b = np.where(swap[:, None], b_b[:, ::-1], b_b)
    if n > 1 and not (
        np.allclose(a_b[1:, 0], a_b[:-1, 1], rtol=1e-6, atol=1e-6 * max(1.0, np.abs(a_b).max()))
        and np.allclose(b_b[1:, 0], b_b[:-1, 1], rtol=1e-6, atol=1e-9)
    ):
        raise FieldsError(
            f"The bounds of the hybrid coordinate '{vdim}' in {where} leave gaps or overlaps "
            "between layers; each layer's lower bound must be the next layer's upper bound."
        )
    a_int = np.concatenate([[a_b[0, 0]], a_b[:, 1]])
    b_int = np.concatenate([[b_b[0, 0]], b_b[:, 1]])
    return a_int, b_int
