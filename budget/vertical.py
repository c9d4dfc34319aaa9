"""Column integrals (1/g) ∫ x dp on pressure or hybrid sigma-pressure levels.

Pressure levels use the beta-factor layer scheme (Boer 1982, Mon. Wea. Rev. 110, 1801-1820;
Trenberth 1991, J. Climate 4, 707-722): interfaces midway between levels, the top interface at
the top level, the layer that holds the surface cut at the surface pressure, layers below
ground given zero thickness.  One refinement keeps every below-ground value out of the sum
(Trenberth, Hurrell and Solomon 1995 name extrapolated values as a mass-budget error source):
when the surface lies above a level's own pressure but below its upper interface, the slice of
air between that interface and the surface takes the value of the lowest level above ground,
not the value the file holds beneath the ground.

Hybrid levels (CF atmosphere_hybrid_sigma_pressure_coordinate) use the layer thickness
Δp_k = Δa_k p0 + Δb_k ps from the interface coefficients, so Σ Δp_k = ps − p_top exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import STANDARD_GRAVITY


@dataclass(frozen=True)
class PressureLevels:
    """Isobaric levels in Pa, ascending (top of the atmosphere first)."""

    p: np.ndarray
    p_top: float | None = None  # top interface; the top level itself when None

    scheme = "beta-factor layers (Boer 1982), partial bottom layer cut at surface pressure"

    def thickness(self, ps: np.ndarray) -> np.ndarray:
        """Layer thickness Δp (Pa) per level for surface pressure ps (any shape).

        Returns an array of shape (nlevel,) + ps.shape; levels below ground get 0.
        """
        p = np.asarray(self.p, dtype=float)
        ps = np.asarray(ps, dtype=float)
        top = p[0] if self.p_top is None else float(self.p_top)
        upper = np.concatenate([[top], 0.5 * (p[1:] + p[:-1])])  # upper interface of level k
        lower = np.concatenate([0.5 * (p[1:] + p[:-1]), [np.inf]])  # lower interface of level k
        shape = (p.size,) + (1,) * ps.ndim
        up = upper.reshape(shape)
        lo = lower.reshape(shape)
        pk = p.reshape(shape)
        above = pk <= ps  # the level itself lies above the ground
        # index of the lowest level above ground, per column
        n_above = above.sum(axis=0)
        k = np.arange(p.size).reshape(shape)
        lowest = k == (n_above - 1)
        dp = np.where(above, np.minimum(lo, ps) - up, 0.0)
        # the lowest above-ground level also takes the slice down to the surface
        dp = np.where(lowest, ps - up, dp)
        return np.clip(dp, 0.0, None)


@dataclass(frozen=True)
class HybridLevels:
    """CF hybrid sigma-pressure levels: interface pressure a·p0 + b·ps, interfaces top first."""

    a_interface_pa: np.ndarray  # a*p0 (or ap), Pa, nlevel+1 values, top first
    b_interface: np.ndarray  # dimensionless, nlevel+1 values, top first

    scheme = "hybrid sigma-pressure layers, Δp = Δa·p0 + Δb·ps from interface coefficients"

    def thickness(self, ps: np.ndarray) -> np.ndarray:
        a = np.asarray(self.a_interface_pa, dtype=float)
        b = np.asarray(self.b_interface, dtype=float)
        ps = np.asarray(ps, dtype=float)
        shape = (a.size - 1,) + (1,) * ps.ndim
        da = np.diff(a).reshape(shape)
        db = np.diff(b).reshape(shape)
        return np.clip(da + db * ps, 0.0, None)


def column_integral(x: np.ndarray, dp: np.ndarray, level_axis: int = 0) -> np.ndarray:
    """(1/g) Σ x_k Δp_k, with NaN values in zero-thickness layers ignored."""
    x = np.asarray(x)
    contrib = np.where(dp > 0, x * dp, 0.0)
    return contrib.sum(axis=level_axis) / STANDARD_GRAVITY
