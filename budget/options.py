"""The options of a budget run, as small typed values.

Science (`BudgetOptions`, with its `ClosureOptions`) is kept apart from execution
(`RunOptions`): the first changes the numbers, the second only how and where they are
computed.  ``compute(fields, region, options=BudgetOptions(...), run=RunOptions(...))``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

from .attribution import AttributionOptions
from .errors import RequestError

METHODS = ("boundary", "area")
MASS_CORRECTION = ("auto", "on", "off")


def _correction_setting(value) -> str:
    """"auto" | "on" | "off"; the older spellings None / True / False are accepted."""
    if value is None:
        return "auto"
    if value is True:
        return "on"
    if value is False:
        return "off"
    if isinstance(value, str) and value.lower() in MASS_CORRECTION:
        return value.lower()
    raise RequestError(f"Unknown mass-correction setting {value!r}; choose 'auto', 'on' or 'off'.")


@dataclass(frozen=True)
class ClosureOptions:
    """How the budget is closed (budget.closure).

    mass_correction: "auto" (on for level inputs, which carry the dry-air flux; unavailable
    for pre-integrated columns), "on" (refused for column inputs) or "off".
    accumulation_period ("1h", "12h", "none"), accumulation_reset (e.g. "06:00") and
    evaporation_positive ("up"/"down") describe accumulated P and E in the files
    (budget.observed); None means: from the files' attributes.
    """

    mass_correction: str = "auto"
    accumulation_period: str | None = None
    accumulation_reset: str | None = None
    evaporation_positive: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "mass_correction", _correction_setting(self.mass_correction))


@dataclass(frozen=True)
class BudgetOptions:
    """The science of a budget: what is computed.

    method: the primary convergence estimate, "boundary" line integral or "area" integral of
    the gridded divergence (both are always reported).  start, end: the time window (ISO 8601,
    inclusive).  profiles: add the import per unit boundary length and, for level inputs, the
    normal-flux curtain.  attribution: layers of the column and the atmospheric-river IVT
    threshold (budget.attribution).
    """

    method: str = "boundary"
    start: object = None
    end: object = None
    profiles: bool = False
    closure: ClosureOptions = field(default_factory=ClosureOptions)
    attribution: AttributionOptions = field(default_factory=AttributionOptions)

    def __post_init__(self):
        if self.method not in METHODS:
            raise RequestError(f"Unknown method {self.method!r}; choose 'boundary' or 'area'.")


@dataclass(frozen=True)
class RunOptions:
    """How a budget is executed; none of these changes a number.

    scheduler: None (dask's local threads), "sync", a dask.distributed address or Client
    (budget.stream).  resume: a folder keeping finished time blocks (removed when complete).
    progress(done, total): called in the calling thread after each block.  stencil: a stencil
    compiled before for this region and grid (a cache).  block_steps: time steps per block
    (None: sized by memory, budget.blocks).  keep_resume: leave the resume folder in place
    after a complete run (the caller removes it once its outputs are written).
    """

    scheduler: object = None
    resume: object = None
    keep_resume: bool = False
    progress: Callable | None = None
    stencil: object = None
    block_steps: int | None = None
