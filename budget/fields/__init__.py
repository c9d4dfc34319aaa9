"""Open gridded fields and turn them into one canonical, lazy, SI dataset (`Fields`).

`open_fields` accepts one NetCDF file, a glob, a list of files, a Zarr store or an open
`xarray.Dataset`, and runs a short pipeline of stages (budget.fields.pipeline): open, grid,
roles, levels, units, orient, times, humidity, checks.  Roles, their names and units come
from budget.catalogue; unit spellings and factors from budget.units.
"""

from __future__ import annotations

from ..catalogue import ALL_ROLES, COLUMN_ROLES, LEVEL_ROLES, OPTIONAL_ROLES, role
from ..units import TABLES as _TABLES
from .model import Fields
from .opening import TILE
from .pipeline import open_fields

#: Horizontal tile of multi-file dask chunks (kept under its former name for callers).
_TILE = TILE

#: CF standard names and short names per role (views of budget.catalogue).
STANDARD_NAMES = {k: role(k).standard_names for k in ALL_ROLES}
SHORT_NAMES = {k: role(k).short_names for k in ALL_ROLES}
#: Accepted units (normalised) and factors to SI of the required roles (views of budget.units).
UNIT_FACTORS = {k: _TABLES[role(k).dimension] for k in LEVEL_ROLES + COLUMN_ROLES}

__all__ = [
    "Fields",
    "open_fields",
    "LEVEL_ROLES",
    "COLUMN_ROLES",
    "OPTIONAL_ROLES",
    "ALL_ROLES",
    "STANDARD_NAMES",
    "SHORT_NAMES",
    "UNIT_FACTORS",
]
