"""Closing the budget: dry-air mass, the barotropic correction, total water, observed P and E.

The ledger (budget.ledger) calls three hooks, so that everything about closure lives here:

* ``level_extras`` / ``column_extras``: per-cell column quantities beyond the vapour ones for a
  block of time steps (dry-air mass and flux, total-water content and flux, raw P and E);
* ``block_sums``: their stencil sums per time step (linear functionals, like every other term);
* ``close``: after all blocks, the tendencies, the correction speed, the corrected vapour and
  total-water budgets, the observed P and E and the residuals, as Dataset variables with units,
  plus the closure summary attributes.

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
dry_air_convergence                kg m-2 s-1  area-mean dry-air convergence (primary method)
dry_air_residual                   kg m-2 s-1  dry_air_tendency − dry_air_convergence (files' winds)
dry_air_residual_pressure          hPa day-1   the same as a surface-pressure tendency
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

import numpy as np
import xarray as xr

from . import mass, observed
from .constants import SECONDS_PER_DAY
from .errors import RequestError
from .vertical import column_integral

#: Optional roles read here when the fields carry them (names in Fields.ds).
OBSERVED_ROLES = ("precip", "evap")
LEVEL_CONDENSATE = ("ql", "qi")
COLUMN_TOTAL = ("tu", "tv")
COLUMN_CONDENSATE = ("wl", "wi")


# --------------------------------------------------------------------------------------
# per-cell quantities of one block


def level_extras(ds, gather, q, u, v, dp, qu, qv, w) -> dict:
    """Dry-air mass and flux, total water and raw P/E on the touched cells (time × cell).

    ``qu``, ``qv``, ``w`` are the vapour columns already integrated over the same layers, so the
    dry-air terms cost one layer sum each: (1/g)∫(1−q)x dp = (1/g)∫x dp − (1/g)∫q x dp.
    """
    out = {}
    out["mu"], out["fu"], out["fv"] = mass.dry_column(q, u, v, dp, level_axis=1, vapour=(w, qu, qv))
    cond = [r for r in LEVEL_CONDENSATE if r in ds]
    if cond:
        qt = q + sum(np.nan_to_num(gather(r)) for r in cond)
        out["tqu"] = column_integral(qt * u, dp, level_axis=1)
        out["tqv"] = column_integral(qt * v, dp, level_axis=1)
        out["tw"] = column_integral(qt, dp, level_axis=1)
        out["_condensate"] = cond
    for r in OBSERVED_ROLES:
        if r in ds:
            out[r] = gather(r)
    return out


def column_extras(ds, gather, w) -> dict:
    """Total water and raw P/E of column inputs (no winds, so no dry-air budget)."""
    out = {}
    if all(r in ds for r in COLUMN_TOTAL) and any(r in ds for r in COLUMN_CONDENSATE):
        cond = [r for r in COLUMN_CONDENSATE if r in ds]
        out["tqu"], out["tqv"] = gather("tu"), gather("tv")
        out["tw"] = w + sum(np.nan_to_num(gather(r)) for r in cond)
        out["_condensate"] = cond
    for r in OBSERVED_ROLES:
        if r in ds:
            out[r] = gather(r)
    return out


# --------------------------------------------------------------------------------------
# stencil sums of one block


def _open_lengths(st) -> np.ndarray:
    lw = getattr(st, "_closure_open_lengths", None)
    if lw is None:
        lw = mass.open_boundary_weights(st.boundary) * st.piece_length
        st._closure_open_lengths = lw
    return lw


def block_sums(st, extra: dict | None, w: np.ndarray) -> dict:
    """Per-time-step sums of the closure terms for one block: {name: array (time, ...)}."""
    lw = _open_lengths(st)
    res = {"w_edge": (st.edge_sum @ (lw[:, None] * (st.interp @ w.T))).T}  # ∮_edge W dl
    if not extra:
        return res

    def import_(fu, fv):
        return -(st.bu @ fu.T + st.bv @ fv.T).sum(axis=0)

    if "mu" in extra:
        fu, fv, mu = extra["fu"], extra["fv"], extra["mu"]
        res["dimp"] = import_(fu, fv)
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
# after all blocks


def _tendency(values, times):
    from .ledger import _tendency as tendency  # the one tendency rule of the ledger

    return tendency(values, times)


def _var(data, units, long_name, **attrs):
    return xr.Variable(("time",), np.asarray(data, float), {"units": units, "long_name": long_name, **attrs})


def _mean(x):
    x = np.asarray(x, float)
    x = x[np.isfinite(x)]
    return float(x.mean()) if x.size else float("nan")


def close(fields, st, times, res, method, tend, bconv, aconv, imp, edge, mass_correction=None,
          accumulation_period=None, accumulation_reset=None, evaporation_positive=None):
    """Corrected budget and closure terms.

    Each convergence estimate is corrected with the speed that closes the dry-air budget by the
    same method (boundary line integral or area divergence); the vapour import and per-edge
    import with the boundary one.  Returns (imp, edge, bconv, aconv, conv, pme, variables,
    attrs, warnings): the corrected terms (unchanged when the correction is off), the primary
    convergence, P − E, the new Dataset variables and attributes, and warnings for the user.
    """
    area = float(st.area)
    observed.parse_period(accumulation_period)  # a bad request fails even when nothing is accumulated
    if evaporation_positive is not None:
        observed.evaporation_sign({}, "", evaporation_positive)
    have_dry = "mu" in res
    if mass_correction is None:
        mass_correction = have_dry
    if mass_correction and not have_dry:
        raise RequestError(
            "The mass correction needs winds, humidity and surface pressure on levels, but these "
            "fields are pre-integrated columns; pass mass_correction=False or give level inputs."
        )
    variables: dict = {}
    warnings: list = []
    summary: dict = {"method": method}
    w_edge = res["w_edge"]
    w_len = w_edge.sum(axis=1)
    conv = bconv if method == "boundary" else aconv
    imp_u, conv_u, edge_u = imp, conv, edge
    pme_u = conv_u - tend
    c = c_b = c_a = np.zeros(times.size)
    state = "not available: column inputs carry no dry-air flux"
    if have_dry:
        mu = res["mu"]
        dtend = _tendency(mu, times)
        dconv_b = res["dimp"] / area
        dconv_a = -res["dadiv"]
        dconv = dconv_b if method == "boundary" else dconv_a
        resid = dtend - dconv
        mu_len = res["mu_len"]
        if _open_lengths(st).sum() <= 1e-6 * np.sqrt(area):  # no boundary open to the outside
            mu_len = np.zeros_like(mu_len)
        c_b = mass.correction_speed(dconv_b * area, dtend, area, mu_len)
        c_a = mass.correction_speed(dconv_a * area, dtend, area, mu_len)
        c = c_b if method == "boundary" else c_a
        if not np.all(np.isfinite(dtend)):
            warnings.append("Only one time step: the dry-air tendency is unknown and the mass correction takes it as zero.")
        if not np.any(mu_len > 0):
            warnings.append("The region has no open boundary (it covers the whole globe), so the mass correction is zero.")
        state = "applied" if mass_correction else "not applied (switched off); its effect is reported in mass_correction_convergence"
        note = "c = (dry-air import - A dmu/dt) / (boundary integral of mu dl); Delta(Q.n) = W c (Trenberth 1991)"
        variables.update({
            "dry_air_mass": _var(mu, "kg m-2", "area-mean dry-air column mass", method_detail="(1/g) sum (1-q) dp over the layers above ground, top level to surface"),
            "dry_air_tendency": _var(dtend, "kg m-2 s-1", "tendency of area-mean dry-air column mass", method_detail="centred differences in time, one-sided at the ends"),
            "dry_air_import": _var(res["dimp"], "kg s-1", "net dry-air mass import through the boundary"),
            "dry_air_convergence": _var(dconv, "kg m-2 s-1", "area-mean dry-air mass convergence", method_detail=f"{method} method, files' winds"),
            "dry_air_residual": _var(resid, "kg m-2 s-1", "dry-air budget residual (tendency minus convergence)", method_detail="zero for mass-consistent winds; before any correction"),
            "dry_air_residual_pressure": _var(mass.residual_as_pressure_tendency(resid), "hPa day-1", "dry-air budget residual as a surface-pressure tendency", method_detail="residual x g x 86400 / 100"),
            "mass_correction_speed": _var(c, "m s-1", "barotropic mass-correction speed, outward normal to the boundary", method_detail=note, correction=state),
        })
        summary.update({
            "mean_dry_air_residual_kg_m2_s": _mean(resid),
            "mean_dry_air_residual_hpa_day": _mean(mass.residual_as_pressure_tendency(resid)),
            "mean_abs_dry_air_residual_hpa_day": _mean(np.abs(mass.residual_as_pressure_tendency(resid))),
            "mean_mass_correction_speed_m_s": _mean(c),
            "max_abs_mass_correction_speed_m_s": float(np.nanmax(np.abs(c))) if c.size else float("nan"),
        })
    dconv_v = -c * w_len / area  # change of vapour convergence (and P − E) from the correction
    if mass_correction:
        imp = imp_u - c_b * w_len
        edge = edge_u - c_b[:, None] * w_edge
        bconv = bconv - c_b * w_len / area
        aconv = aconv - c_a * w_len / area
        conv = conv_u + dconv_v
    pme = conv - tend
    if have_dry:
        variables.update({
            "mass_correction_convergence": _var(dconv_v, "kg m-2 s-1", "change of vapour convergence and of P - E by the mass correction", method_detail="-c x (boundary integral of W dl) / area", correction=state),
            "vapour_import_uncorrected": _var(imp_u, "kg s-1", "net water-vapour import from the files' winds (no mass correction)"),
            "vapour_convergence_uncorrected": _var(conv_u, "kg m-2 s-1", "area-mean vapour-flux convergence from the files' winds (no mass correction)", method_detail=f"{method} method"),
            "p_minus_e_uncorrected": _var(pme_u, "kg m-2 s-1", "P - E from the files' winds (no mass correction)"),
        })
        summary.update({
            "mean_p_minus_e_mm_day": _mean(pme) * SECONDS_PER_DAY,
            "mean_p_minus_e_uncorrected_mm_day": _mean(pme_u) * SECONDS_PER_DAY,
            "mean_mass_correction_effect_mm_day": _mean(dconv_v) * SECONDS_PER_DAY,
        })

    # total water
    if "tw" in res:
        tw = res["tw"]
        ttend = _tendency(tw, times)
        tconv_u = res["timp"] / area if method == "boundary" else -res["tadiv"]
        tcorr = -c * res["tw_len"] / area
        tconv = tconv_u + tcorr if mass_correction else tconv_u
        timp = res["timp"] - (c_b * res["tw_len"] if mass_correction else 0.0)
        cond = getattr(fields, "extra_roles", {})
        used = ", ".join(f"{r}={cond.get(r, r)}" for r in (*LEVEL_CONDENSATE, *COLUMN_TOTAL, *COLUMN_CONDENSATE) if r in fields.ds)
        variables.update({
            "total_water_content": _var(tw, "kg m-2", "area-mean total water column (vapour + cloud liquid + cloud ice)", variables_used=used),
            "total_water_tendency": _var(ttend, "kg m-2 s-1", "tendency of area-mean total water column"),
            "total_water_import": _var(timp, "kg s-1", "net total-water import through the boundary", correction=state if have_dry else "none"),
            "total_water_convergence": _var(tconv, "kg m-2 s-1", "area-mean total-water flux convergence", method_detail=f"{method} method", correction=state if have_dry else "none"),
            "p_minus_e_total_water": _var(tconv - ttend, "kg m-2 s-1", "P - E from the total-water budget (convergence minus tendency)"),
        })
        if have_dry:
            variables["p_minus_e_total_water_uncorrected"] = _var(tconv_u - ttend, "kg m-2 s-1", "P - E from the total-water budget, files' winds (no mass correction)")
        summary["mean_p_minus_e_total_water_mm_day"] = _mean(tconv - ttend) * SECONDS_PER_DAY

    # observed precipitation and evaporation
    rates = {}
    extra_roles = getattr(fields, "extra_roles", {})
    where = f"'{fields.files[0]}'" if getattr(fields, "files", None) else "the input"
    for role, name, long in (("precip", "precipitation", "area-mean precipitation from the files"),
                             ("evap", "evaporation", "area-mean evaporation from the files, positive upward")):
        key = f"{role}_raw"
        if key not in res:
            continue
        da = fields.ds[role]
        src = extra_roles.get(role, da.attrs.get("source_name", role))
        r, info, warn = observed.rate_series(
            role, res[key], dict(da.attrs), src, times, period=accumulation_period,
            reset=accumulation_reset, evaporation_positive=evaporation_positive, where=where)
        warnings += warn
        if r is None:
            continue
        if not np.all(np.isfinite(res[key])):
            warnings.append(
                f"The {name} variable '{src}' has missing values inside the region at "
                f"{int(np.sum(~np.isfinite(res[key])))} of {times.size} times; its area mean is blank there."
            )
        rates[role] = r
        variables[name] = _var(r, "kg m-2 s-1", long, **{k: str(v) for k, v in info.items()})
        summary[f"mean_{name}_mm_day"] = _mean(r) * SECONDS_PER_DAY
    if "precip" in rates and "evap" in rates:
        pe = rates["precip"] - rates["evap"]
        variables["p_minus_e_observed"] = _var(pe, "kg m-2 s-1", "precipitation minus evaporation from the files")
        variables["closure_residual"] = _var(pe - pme, "kg m-2 s-1", "closure residual: P - E from the files minus P - E from the budget", method_detail="(precipitation - evaporation) - (vapour convergence - dW/dt)", correction=state)
        summary["mean_closure_residual_mm_day"] = _mean(pe - pme) * SECONDS_PER_DAY
        summary["mean_abs_closure_residual_mm_day"] = _mean(np.abs(pe - pme)) * SECONDS_PER_DAY

    summary["mass_correction"] = state
    summary["variables_used"] = {**dict(getattr(fields, "roles", {})), **dict(extra_roles)}
    attrs = {
        "mass_correction": state,
        "mass_correction_method": "regional barotropic correction (Trenberth 1991): one uniform outward boundary-normal wind per time step closing the dry-air budget; Delta(Q.n) = W c",
        "closure_summary": json.dumps(summary),
    }
    return imp, edge, bconv, aconv, conv, pme, variables, attrs, warnings
