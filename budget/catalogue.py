"""The input roles: one declarative record per role a gridded input variable can play.

Field detection (budget.fields), the command line's ``--var`` help, the error messages and
the provenance all read this table; a new role is a new row.  Unit spellings and their
factors live in budget.units, keyed by the row's ``dimension``.

Plausible ranges (SI) are for the every-block value checks: they are common practice, with no
single source (humidity up to about 0.04 kg/kg, surface pressure 300-1100 hPa, wind speed
below about 150 m/s, temperature 150-350 K).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Role", "ROLES", "role", "roles_for", "LEVEL_ROLES", "COLUMN_ROLES",
           "OPTIONAL_ROLES", "HUMIDITY_FORMS", "ALL_ROLES", "var_help"]


@dataclass(frozen=True)
class Role:
    """One input role.

    key:            the role's name in ``var_map`` / ``--var`` and in ``Fields.ds``
    long_name:      what it is, in words (error messages, attributes)
    si_unit:        the unit inside the engine (UDUNITS spelling)
    dimension:      the unit family budget.units converts within (speed, mass_fraction, ...)
    where:          "level" (on model or pressure levels), "surface" or "column" (2-D)
    inputs:         the input kinds that use it: "levels", "column" or both
    required:       True for the roles every input of that kind needs
    standard_names: CF standard names (CF standard-name table v83), the first is written out
    short_names:    common short names (ERA5, GFS, CMIP, MERRA-2, WRF), tried exactly
    plausible:      (low, high) in SI: common practice, no single source; None when unbounded
    example_unit:   a unit to show in ``--units role=UNIT`` hints
    """

    key: str
    long_name: str
    si_unit: str
    dimension: str
    where: str
    inputs: tuple
    required: bool
    standard_names: tuple
    short_names: tuple
    plausible: tuple | None = None
    example_unit: str = "UNIT"

    @property
    def on_levels(self) -> bool:
        return self.where == "level"


_L, _C, _B = ("levels",), ("column",), ("levels", "column")

ROLES: tuple[Role, ...] = (
    Role("u", "eastward wind", "m s-1", "speed", "level", _L, True,
         ("eastward_wind", "grid_eastward_wind"), ("u", "ua", "uwnd", "U", "u_component_of_wind"),
         (-150.0, 150.0), "m/s"),
    Role("v", "northward wind", "m s-1", "speed", "level", _L, True,
         ("northward_wind", "grid_northward_wind"), ("v", "va", "vwnd", "V", "v_component_of_wind"),
         (-150.0, 150.0), "m/s"),
    Role("q", "specific humidity", "kg kg-1", "mass_fraction", "level", _L, True,
         ("specific_humidity",), ("q", "hus", "shum", "Q", "QV", "specific_humidity"),
         (-1e-4, 0.04), "g/kg"),
    Role("ps", "surface air pressure", "Pa", "pressure", "surface", _L, True,
         ("surface_air_pressure",), ("sp", "ps", "PS", "psfc", "PSFC", "pres", "surface_pressure"),
         (30000.0, 110000.0), "hPa"),
    Role("qu", "eastward vertically integrated water vapour flux", "kg m-1 s-1", "flux", "column",
         _C, True, ("eastward_atmosphere_water_vapor_transport_across_unit_distance",),
         ("qu", "viwve", "p71.162", "UFLXQV", "uflxqv", "ivt_u", "ivtu", "IVTU", "uivt",
          "vertical_integral_of_eastward_water_vapour_flux"), (-5000.0, 5000.0), "kg/m/s"),
    Role("qv", "northward vertically integrated water vapour flux", "kg m-1 s-1", "flux", "column",
         _C, True, ("northward_atmosphere_water_vapor_transport_across_unit_distance",),
         ("qv", "viwvn", "p72.162", "VFLXQV", "vflxqv", "ivt_v", "ivtv", "IVTV", "vivt",
          "vertical_integral_of_northward_water_vapour_flux"), (-5000.0, 5000.0), "kg/m/s"),
    Role("w", "precipitable water (atmosphere mass content of water vapour)", "kg m-2",
         "column_mass", "column", _C, True,
         ("atmosphere_mass_content_of_water_vapor", "atmosphere_water_vapor_content",
          "lwe_thickness_of_atmosphere_mass_content_of_water_vapor"),
         ("w", "tcwv", "TCWV", "prw", "pwat", "PWAT", "pr_wtr", "TQV", "tqv", "pw", "PW",
          "precipitable_water", "total_column_water_vapour"), (0.0, 100.0), "kg/m2"),
    # optional roles: precipitation and evaporation keep their units (budget.observed tells
    # rates from accumulated amounts), the others are converted like the required ones
    Role("precip", "precipitation (rate or accumulated amount)", "kg m-2 s-1", "water_rate_or_amount",
         "surface", _B, False,
         ("precipitation_flux", "lwe_precipitation_rate", "precipitation_amount",
          "lwe_thickness_of_precipitation_amount"),
         ("pr", "tp", "precip", "precipitation", "PRECTOT", "PRECTOTCORR", "prate", "mtpr",
          "avg_tprate"), None, "mm/day"),
    Role("evap", "evaporation (rate or accumulated amount)", "kg m-2 s-1", "water_rate_or_amount",
         "surface", _B, False,
         ("water_evapotranspiration_flux", "water_evaporation_flux", "lwe_water_evaporation_rate",
          "water_evapotranspiration_amount", "water_evaporation_amount"),
         ("evspsbl", "e", "evap", "evaporation", "EVAP", "QFX", "mer"), None, "mm/day"),
    Role("ql", "mass fraction of cloud liquid water", "kg kg-1", "mass_fraction", "level", _L, False,
         ("mass_fraction_of_cloud_liquid_water_in_air",),
         ("clwc", "clw", "QL", "QC", "ql", "cloud_liquid_water_content"), (-1e-4, 0.02), "g/kg"),
    Role("qi", "mass fraction of cloud ice", "kg kg-1", "mass_fraction", "level", _L, False,
         ("mass_fraction_of_cloud_ice_in_air",),
         ("ciwc", "cli", "QI", "qi", "cloud_ice_water_content"), (-1e-4, 0.02), "g/kg"),
    Role("tu", "eastward vertically integrated water flux, all phases", "kg m-1 s-1", "flux",
         "column", _C, False, ("eastward_atmosphere_water_transport_across_unit_distance",),
         ("tu", "total_water_flux_east"), (-5000.0, 5000.0), "kg/m/s"),
    Role("tv", "northward vertically integrated water flux, all phases", "kg m-1 s-1", "flux",
         "column", _C, False, ("northward_atmosphere_water_transport_across_unit_distance",),
         ("tv", "total_water_flux_north"), (-5000.0, 5000.0), "kg/m/s"),
    Role("wl", "atmosphere mass content of cloud liquid water", "kg m-2", "column_mass", "column",
         _C, False, ("atmosphere_mass_content_of_cloud_liquid_water",),
         ("tclw", "lwp", "TQL", "wl"), (0.0, 50.0), "kg/m2"),
    Role("wi", "atmosphere mass content of cloud ice", "kg m-2", "column_mass", "column",
         _C, False, ("atmosphere_mass_content_of_cloud_ice",),
         ("tciw", "iwp", "TQI", "wi"), (0.0, 50.0), "kg/m2"),
    # humidity forms: any one of these (with the temperature where needed) stands in for q
    Role("mr", "humidity mixing ratio (water vapour per dry air)", "kg kg-1", "mass_fraction",
         "level", _L, False, ("humidity_mixing_ratio",),
         ("mr", "mixr", "QVAPOR", "mixing_ratio", "humidity_mixing_ratio"), (-1e-4, 0.045), "g/kg"),
    Role("rh", "relative humidity", "1", "fraction", "level", _L, False,
         ("relative_humidity",), ("r", "rh", "hur", "RH", "rhum", "relative_humidity"),
         (0.0, 1.2), "%"),
    Role("td", "dew point temperature", "K", "temperature", "level", _L, False,
         ("dew_point_temperature",), ("td", "dpt", "tdew", "dewpoint", "dew_point_temperature"),
         (150.0, 320.0), "K"),
    Role("vp", "water vapour partial pressure", "Pa", "pressure", "level", _L, False,
         ("water_vapor_partial_pressure_in_air",),
         ("vp", "vap", "pvap", "vapour_pressure", "vapor_pressure"), (0.0, 8000.0), "hPa"),
    Role("t", "air temperature", "K", "temperature", "level", _L, False,
         ("air_temperature",), ("t", "ta", "air", "temp", "TMP", "tk", "TK", "air_temperature"),
         (150.0, 350.0), "K"),
)

_BY_KEY = {r.key: r for r in ROLES}

LEVEL_ROLES = tuple(r.key for r in ROLES if r.required and "levels" in r.inputs)
COLUMN_ROLES = tuple(r.key for r in ROLES if r.required and "column" in r.inputs)
#: Forms that can stand in for q on levels, in the order they are looked for.
HUMIDITY_FORMS = ("mr", "rh", "td", "vp")
OPTIONAL_ROLES = tuple(r.key for r in ROLES if not r.required and r.key not in HUMIDITY_FORMS + ("t",))
ALL_ROLES = tuple(r.key for r in ROLES)


def role(key: str) -> Role:
    """The catalogue row of ``key`` (KeyError for an unknown role)."""
    return _BY_KEY[key]


def roles_for(kind: str, required: bool | None = None) -> tuple[str, ...]:
    """Role keys used by inputs of ``kind`` ("levels" or "column"), optionally only the
    required (True) or only the optional (False) ones; the humidity forms are not included."""
    skip = set(HUMIDITY_FORMS) | {"t"}
    return tuple(
        r.key for r in ROLES
        if kind in r.inputs and r.key not in skip and (required is None or r.required == required)
    )


def var_help() -> str:
    """The roles in one line, for the ``--var`` help of the command line."""
    req_l = ", ".join(LEVEL_ROLES)
    req_c = ", ".join(COLUMN_ROLES)
    opt = ", ".join(OPTIONAL_ROLES)
    hum = ", ".join(HUMIDITY_FORMS + ("t",))
    return (f"take variable NAME for ROLE (levels: {req_l}; columns: {req_c}; optional {opt}; "
            f"humidity forms instead of q: {hum})")
