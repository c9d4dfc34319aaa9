"""Closing the budget: dry-air mass, the barotropic correction, total water, observed P and E.

The ledger (budget.ledger) calls three hooks, so that everything about closure lives here:

* ``level_extras`` / ``column_extras``: per-cell column quantities beyond the vapour ones for a
  block of time steps (dry-air mass and flux, total-water content and flux, raw P and E);
* ``block_sums``: their stencil sums per time step (linear functionals, like every other term);
* ``close``: after all blocks, the tendencies, the correction speed, the corrected vapour and
  total-water budgets, the observed P and E and the residuals, as Dataset variables with units,
  plus the closure summary attributes.  It takes the vapour terms (`VapourTerms`), the block
  sums (`budget.blocks.BlockSums`) and the options (`budget.options.ClosureOptions`) and returns
  a `Closed`: the corrected vapour terms, the new variables, attributes, warnings and the
  correction state as data (`CorrectionState`).

Methods and their limits are described in budget.mass (dry air, correction) and
budget.observed (P and E).  When the correction is applied, ``vapour_import``, ``edge_import``,
``boundary_convergence``, ``area_convergence``, ``vapour_convergence`` and ``p_minus_e`` are
corrected (each convergence estimate with the speed that closes the dry-air budget by its own
method); ``inflow``, ``outflow`` and the boundary profiles stay from the files' winds.  New
variables (SI; the CSV gives mm/day and hPa/day):

=================================  ==========  =================================================
dry_air_mass                       kg m-2      area-mean dry-air column mass (1/g)∫(1−q)dp
dry_air_tendency                   kg m-2 s-1  its tendency (centred differences)
dry_air_import                     kg s-1      dry-air mass import through the boundary
dry_air_edge_import                kg s-1      the same through each edge (time, edge)
dry_air_convergence                kg m-2 s-1  area-mean dry-air convergence (primary method)
dry_air_residual                   kg m-2 s-1  dry_air_tendency − dry_air_convergence (files' winds)
dry_air_residual_pressure          Pa s-1      the same as a surface-pressure tendency
mass_correction_speed              m s-1       uniform outward boundary-normal correction wind c
mass_correction_convergence        kg m-2 s-1  change of vapour convergence (and P−E): −c∮W dl / A
vapour_import_uncorrected          kg s-1      import from the files' winds
vapour_convergence_uncorrected     kg m-2 s-1  primary convergence from the files' winds
p_minus_e_uncorrected              kg m-2 s-1  P − E from the files' winds
total_water_*                      ...         the same for vapour + cloud liquid + cloud ice
precipitation, evaporation         kg m-2 s-1  area means of the files' P and E (E positive up)
p_minus_e_observed                 kg m-2 s-1  precipitation − evaporation
closure_residual                   kg m-2 s-1  p_minus_e_observed − p_minus_e
=================================  ==========  =================================================
"""

from __future__ import annotations

import json
from dataclasses import dataclass, replace

import numpy as np
import xarray as xr

from . import mass, observed, terms
from .errors import RequestError
from .options import ClosureOptions
from .timeaxis import tendency
from .vertical import column_integral

#: Optional roles read here when the fields carry them (names in Fields.ds).
OBSERVED_ROLES = ("precip", "evap")
LEVEL_CONDENSATE = ("ql", "qi")
COLUMN_TOTAL = ("tu", "tv")
COLUMN_CONDENSATE = ("wl", "wi")


# --------------------------------------------------------------------------------------
# per-cell quantities of one block


def level_extras(ds, gather, q, u, v, dp, qu, qv, w, check=None) -> dict:
    """Dry-air mass and flux, total water and raw P/E on the touched cells (time × cell).

    ``qu``, ``qv``, ``w`` are the vapour columns already integrated over the same layers, so the
    dry-air terms cost one layer sum each: (1/g)∫(1−q)x dp = (1/g)∫x dp − (1/g)∫q x dp.
    ``check`` (a budget.plausible.Checker) refuses unmarked fill values in what is read here.
    """
    out = {}
    out["mu"], out["fu"], out["fv"] = mass.dry_column(q, u, v, dp, level_axis=1, vapour=(w, qu, qv))
    cond = [r for r in LEVEL_CONDENSATE if r in ds]
    if cond:
        parts = [_checked(gather, r, check, dp > 0) for r in cond]
        qt = q + sum(np.nan_to_num(x) for x in parts)
        out["tqu"] = column_integral(qt * u, dp, level_axis=1)
        out["tqv"] = column_integral(qt * v, dp, level_axis=1)
        out["tw"] = column_integral(qt, dp, level_axis=1)
    for r in OBSERVED_ROLES:
        if r in ds:
            out[r] = _checked(gather, r, check)
    return out


def column_extras(ds, gather, w, check=None) -> dict:
    """Total water and raw P/E of column inputs (no winds, so no dry-air budget)."""
    out = {}
    if all(r in ds for r in COLUMN_TOTAL) and any(r in ds for r in COLUMN_CONDENSATE):
        cond = [r for r in COLUMN_CONDENSATE if r in ds]
        out["tqu"], out["tqv"] = (_checked(gather, r, check) for r in COLUMN_TOTAL)
        out["tw"] = w + sum(np.nan_to_num(_checked(gather, r, check)) for r in cond)
    for r in OBSERVED_ROLES:
        if r in ds:
            out[r] = _checked(gather, r, check)
    return out


def _checked(gather, name, check, mask=None):
    """Read ``name``; no unmarked fill values, and within its role's range (budget.plausible)."""
    arr = gather(name)
    if check is not None:
        check.fill(name, arr, mask)
        check.in_role_range(name, arr, mask)
    return arr


# --------------------------------------------------------------------------------------
# stencil sums of one block


def open_lengths(st) -> np.ndarray:
    """Piece lengths (m) with coincident opposite pieces zeroed: ∮ x dl = open_lengths @ x."""
    lw = getattr(st, "_closure_open_lengths", None)
    if lw is None:
        lw = mass.open_boundary_weights(st.boundary) * st.piece_length
        st._closure_open_lengths = lw
    return lw


def block_sums(st, extra: dict | None, w: np.ndarray, profiles: bool = False) -> dict:
    """Per-time-step sums of the closure terms for one block: BlockSums fields by name.

    Dry air through the boundary: the net import, the import per edge (their sum is the net
    import) and, with ``profiles``, the import per unit length of each piece (files' winds).
    """
    lw = open_lengths(st)
    res = {"w_edge": (st.edge_sum @ (lw[:, None] * (st.interp @ w.T))).T}  # ∮_edge W dl
    if not extra:
        return res

    def import_(fu, fv):
        return -(st.bu @ fu.T + st.bv @ fv.T).sum(axis=0)

    if "mu" in extra:
        fu, fv, mu = extra["fu"], extra["fv"], extra["mu"]
        dflux = st.bu @ fu.T + st.bv @ fv.T  # outward dry-air flux per piece, (piece, time)
        res["dimp"] = -dflux.sum(axis=0)
        res["dedge"] = -(st.edge_sum @ dflux).T
        if profiles:
            res["ddensity"] = -dflux.T / st.piece_length
        res["dadiv"] = fu @ st.div_u + fv @ st.div_v
        res["mu"] = mu @ st.cover / st.area
        res["mu_len"] = lw @ (st.interp @ mu.T)
    if "tw" in extra:
        res["timp"] = import_(extra["tqu"], extra["tqv"])
        res["tadiv"] = extra["tqu"] @ st.div_u + extra["tqv"] @ st.div_v
        res["tw"] = extra["tw"] @ st.cover / st.area
        res["tw_len"] = lw @ (st.interp @ extra["tw"].T)
    for r in OBSERVED_ROLES:
        if r in extra:
            res[f"{r}_raw"] = extra[r] @ st.cover / st.area
    return res


# --------------------------------------------------------------------------------------
# after all blocks: the typed seam with the ledger


@dataclass
class VapourTerms:
    """The vapour budget's series (time first): the ledger's result, corrected here."""

    imp: np.ndarray  # net import, kg s-1
    edge: np.ndarray  # import per edge, kg s-1 (time, edge)
    bconv: np.ndarray  # boundary-method convergence, kg m-2 s-1
    aconv: np.ndarray  # area-method convergence, kg m-2 s-1
    conv: np.ndarray  # primary convergence (the run's method)
    tend: np.ndarray  # dW/dt, kg m-2 s-1
    pme: np.ndarray  # P - E = conv - tend


#: The correction state's legacy sentences (the `mass_correction` attribute), by status.
_LEGACY = {
    "applied": "applied",
    "switched_off": "not applied (switched off); its effect is reported in mass_correction_convergence",
    "unavailable": "not available: column inputs carry no dry-air flux",
}


@dataclass(frozen=True)
class CorrectionState:
    """Whether the barotropic mass correction was applied, as data.

    status: "applied", "switched_off" or "unavailable" (column inputs); setting: the option
    as given ("auto", "on", "off").
    """

    status: str
    setting: str

    @property
    def applied(self) -> bool:
        return self.status == "applied"

    @property
    def sentence(self) -> str:
        return _LEGACY[self.status]

    def attrs(self) -> dict:
        """Dataset attributes: ``mass_correction_applied`` "on"/"off", the status and the
        setting as words, and ``mass_correction`` (the older sentence, kept for readers)."""
        return {
            "mass_correction_applied": "on" if self.applied else "off",
            "mass_correction_status": self.status,
            "mass_correction_setting": self.setting,
            "mass_correction": self.sentence,
        }


@dataclass
class Closed:
    """What `close` hands back to the ledger."""

    vapour: VapourTerms  # corrected when the correction is applied
    variables: dict  # new Dataset variables (xarray.Variable)
    attrs: dict  # new Dataset attributes
    warnings: list
    correction: CorrectionState


def _var(name, data, method=None, **extra):
    """A time series with its attributes from the term catalogue (budget.terms) and ``extra``."""
    return xr.Variable(("time",), np.asarray(data, float), {**terms.attrs(name, method), **extra})


def _mean(x):
    x = np.asarray(x, float)
    x = x[np.isfinite(x)]
    return float(x.mean()) if x.size else float("nan")


def _state(opts: ClosureOptions, have_dry: bool) -> CorrectionState:
    if opts.mass_correction == "on" and not have_dry:
        raise RequestError(
            "The mass correction needs winds, humidity and surface pressure on levels, but these "
            "fields are pre-integrated columns; pass mass_correction=False or give level inputs."
        )
    if not have_dry:
        return CorrectionState("unavailable", opts.mass_correction)
    return CorrectionState("switched_off" if opts.mass_correction == "off" else "applied", opts.mass_correction)


def close(fields, st, times, sums, vapour: VapourTerms, method: str, opts: ClosureOptions | None = None) -> Closed:
    """Corrected budget and closure terms.

    Each convergence estimate is corrected with the speed that closes the dry-air budget by the
    same method (boundary line integral or area divergence); the vapour import and per-edge
    import with the boundary one.
    """
    opts = opts or ClosureOptions()
    observed.parse_period(opts.accumulation_period)  # a bad request fails even when nothing is accumulated
    if opts.evaporation_positive is not None:
        observed.evaporation_sign({}, "", opts.evaporation_positive)
    have_dry = sums.mu is not None
    state = _state(opts, have_dry)
    out = Closed(vapour, {}, {}, [], state)
    summary: dict = {"method": method, "units": {}}
    speeds = _dry_air(out, st, times, sums, method, summary) if have_dry else None
    if speeds is not None:
        _correct(out, st, sums, speeds, method, summary)
    if sums.tw is not None:
        _total_water(out, fields, st, times, sums, speeds, method, summary)
    _observed(out, fields, times, sums, opts, summary)
    summary["mass_correction"] = state.sentence
    summary["mass_correction_applied"] = "on" if state.applied else "off"
    summary["variables_used"] = {**dict(getattr(fields, "roles", {})), **dict(getattr(fields, "extra_roles", {}))}
    summary["flagged_values"] = {k: int(n) for k, n in sorted(sums.flagged.items())}
    out.attrs.update(state.attrs())
    out.attrs["mass_correction_method"] = (
        "regional barotropic correction (Trenberth 1991): one uniform outward boundary-normal wind "
        "per time step closing the dry-air budget; Delta(Q.n) = W c"
    )
    out.attrs["closure_summary"] = json.dumps(summary)
    return out


def _note(summary: dict, stat: str, name: str, value: float) -> None:
    """One statistic of a term in the closure summary: the value in SI, its units (from the
    term catalogue) under ``summary["units"]``; the key is ``<stat>_<term>``."""
    key = f"{stat}_{name}"
    summary[key] = float(value)
    summary["units"][key] = terms.term(name).units


def _dry_air(out: Closed, st, times, sums, method, summary):
    """The dry-air budget and the correction speeds (c, c_boundary, c_area), m s-1."""
    area = float(st.area)
    mu = sums.mu
    dtend = tendency(mu, times)
    dconv_b = sums.dimp / area
    dconv_a = -sums.dadiv
    dconv = dconv_b if method == "boundary" else dconv_a
    resid = dtend - dconv
    mu_len = sums.mu_len
    if open_lengths(st).sum() <= 1e-6 * np.sqrt(area):  # no boundary open to the outside
        mu_len = np.zeros_like(mu_len)
    c_b = mass.correction_speed(dconv_b * area, dtend, area, mu_len)
    c_a = mass.correction_speed(dconv_a * area, dtend, area, mu_len)
    c = c_b if method == "boundary" else c_a
    if not np.all(np.isfinite(dtend)):
        out.warnings.append("Only one time step: the dry-air tendency is unknown and the mass correction takes it as zero.")
    if not np.any(mu_len > 0):
        out.warnings.append("The region has no open boundary (it covers the whole globe), so the mass correction is zero.")
    state = out.correction.sentence
    pressure = mass.residual_as_pressure_tendency(resid)
    out.variables.update({
        "dry_air_mass": _var("dry_air_mass", mu),
        "dry_air_tendency": _var("dry_air_tendency", dtend),
        "dry_air_import": _var("dry_air_import", sums.dimp),
        "dry_air_edge_import": xr.Variable(("time", "edge"), np.asarray(sums.dedge, float),
                                           terms.attrs("dry_air_edge_import")),
        "dry_air_convergence": _var("dry_air_convergence", dconv, method=f"{method} method, files' winds"),
        "dry_air_residual": _var("dry_air_residual", resid),
        "dry_air_residual_pressure": _var("dry_air_residual_pressure", pressure),
        "mass_correction_speed": _var("mass_correction_speed", c, correction=state),
    })
    _note(summary, "mean", "dry_air_residual", _mean(resid))
    _note(summary, "mean", "dry_air_residual_pressure", _mean(pressure))
    _note(summary, "mean_abs", "dry_air_residual_pressure", _mean(np.abs(pressure)))
    _note(summary, "mean", "mass_correction_speed", _mean(c))
    _note(summary, "max_abs", "mass_correction_speed", float(np.nanmax(np.abs(c))) if c.size else float("nan"))
    return c, c_b, c_a


def _correct(out: Closed, st, sums, speeds, method, summary) -> None:
    """The vapour terms with the correction (when applied) and the uncorrected ones beside."""
    area = float(st.area)
    c, c_b, c_a = speeds
    v = out.vapour
    w_len = sums.w_edge.sum(axis=1)
    dconv_v = -c * w_len / area  # change of vapour convergence (and P − E) from the correction
    pme_u = v.pme
    if out.correction.applied:
        conv = v.conv + dconv_v
        out.vapour = replace(
            v, imp=v.imp - c_b * w_len, edge=v.edge - c_b[:, None] * sums.w_edge,
            bconv=v.bconv - c_b * w_len / area, aconv=v.aconv - c_a * w_len / area,
            conv=conv, pme=conv - v.tend,
        )
    state = out.correction.sentence
    out.variables.update({
        "mass_correction_convergence": _var("mass_correction_convergence", dconv_v, correction=state),
        "vapour_import_uncorrected": _var("vapour_import_uncorrected", v.imp),
        "vapour_convergence_uncorrected": _var("vapour_convergence_uncorrected", v.conv, method=f"{method} method"),
        "p_minus_e_uncorrected": _var("p_minus_e_uncorrected", pme_u),
    })
    _note(summary, "mean", "p_minus_e", _mean(out.vapour.pme))
    _note(summary, "mean", "p_minus_e_uncorrected", _mean(pme_u))
    _note(summary, "mean", "mass_correction_convergence", _mean(dconv_v))


def _total_water(out: Closed, fields, st, times, sums, speeds, method, summary) -> None:
    area = float(st.area)
    applied = out.correction.applied
    c, c_b, _ = speeds if speeds is not None else (0.0, 0.0, 0.0)
    ttend = tendency(sums.tw, times)
    tconv_u = sums.timp / area if method == "boundary" else -sums.tadiv
    tconv = tconv_u - c * sums.tw_len / area if applied else tconv_u
    timp = sums.timp - (c_b * sums.tw_len if applied else 0.0)
    cond = getattr(fields, "extra_roles", {})
    used = ", ".join(f"{r}={cond.get(r, r)}" for r in (*LEVEL_CONDENSATE, *COLUMN_TOTAL, *COLUMN_CONDENSATE) if r in fields.ds)
    state = out.correction.sentence if speeds is not None else "none"
    out.variables.update({
        "total_water_content": _var("total_water_content", sums.tw, variables_used=used),
        "total_water_tendency": _var("total_water_tendency", ttend),
        "total_water_import": _var("total_water_import", timp, correction=state),
        "total_water_convergence": _var("total_water_convergence", tconv, method=f"{method} method", correction=state),
        "p_minus_e_total_water": _var("p_minus_e_total_water", tconv - ttend),
    })
    if speeds is not None:
        out.variables["p_minus_e_total_water_uncorrected"] = _var("p_minus_e_total_water_uncorrected", tconv_u - ttend)
    _note(summary, "mean", "p_minus_e_total_water", _mean(tconv - ttend))


def _observed(out: Closed, fields, times, sums, opts: ClosureOptions, summary) -> None:
    """Precipitation and evaporation from the files, and the closure residual."""
    rates = {}
    extra_roles = getattr(fields, "extra_roles", {})
    where = f"'{fields.files[0]}'" if getattr(fields, "files", None) else "the input"
    for role, name in (("precip", "precipitation"), ("evap", "evaporation")):
        raw = getattr(sums, f"{role}_raw")
        if raw is None:
            continue
        da = fields.ds[role]
        src = extra_roles.get(role, da.attrs.get("source_name", role))
        r, info, warn = observed.rate_series(
            role, raw, dict(da.attrs), src, times, period=opts.accumulation_period,
            reset=opts.accumulation_reset, evaporation_positive=opts.evaporation_positive, where=where)
        out.warnings.extend(warn)
        if r is None:
            continue
        if not np.all(np.isfinite(raw)):
            out.warnings.append(
                f"The {name} variable '{src}' has missing values inside the region at "
                f"{int(np.sum(~np.isfinite(raw)))} of {times.size} times; its area mean is blank there."
            )
        rates[role] = r
        out.variables[name] = _var(name, r, **{k: str(v) for k, v in info.items()})
        _note(summary, "mean", name, _mean(r))
    if "precip" in rates and "evap" in rates:
        pe = rates["precip"] - rates["evap"]
        pme = out.vapour.pme
        out.variables["p_minus_e_observed"] = _var("p_minus_e_observed", pe)
        out.variables["closure_residual"] = _var("closure_residual", pe - pme, correction=out.correction.sentence)
        _note(summary, "mean", "closure_residual", _mean(pe - pme))
        _note(summary, "mean_abs", "closure_residual", _mean(np.abs(pe - pme)))
