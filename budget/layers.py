"""Cutting the air column into layers: which heights carry the water.

A layer is a pressure range [top, bottom] (Pa).  Every level's slice of air above the ground
is known from the column scheme (budget.vertical): the slices are contiguous from the column
top down to the surface, each of thickness Δp_k (zero below ground).  A layer takes from each
slice the part that overlaps it, so

    x_L = (1/g) Σ_k x_k · overlap(slice_k, layer L)

and, when the layers tile the column from its top to the surface, Σ_L x_L equals the column
integral (1/g) Σ_k x_k Δp_k exactly.  Layers are given as pressure bounds in hPa
(``1000,850,700,500,300,100``) or as sigma bounds (``sigma:1,0.8,0.5,0``; p = σ·ps in each
column).  Air above the highest bound and below the lowest (between 1000 hPa and a surface
at 1020 hPa, say) gets a layer of its own when the column has any, so nothing is dropped.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import STANDARD_GRAVITY
from .errors import RequestError


@dataclass(frozen=True)
class LayerSet:
    """Layer bounds, bottom first: hPa for ``kind="pressure"``, σ for ``kind="sigma"``."""

    bounds: tuple[float, ...]
    kind: str = "pressure"

    def names(self) -> list[str]:
        """Names of the layers, bottom first, as they appear in the CSV, including the open
        layers below the lowest and above the highest bound (``sfc_1000hPa``, ``100hPa_top``)."""
        b = self.bounds
        if self.kind == "sigma":
            fmt = lambda x: f"{x:g}"  # noqa: E731
            inner = [f"sigma_{fmt(b[i])}_{fmt(b[i + 1])}" for i in range(len(b) - 1)]
            lower = [] if b[0] >= 1 else [f"sigma_sfc_{fmt(b[0])}"]
            upper = [] if b[-1] <= 0 else [f"sigma_{fmt(b[-1])}_top"]
            return lower + inner + upper
        fmt = lambda x: f"{x:g}"  # noqa: E731
        inner = [f"{fmt(b[i])}_{fmt(b[i + 1])}hPa" for i in range(len(b) - 1)]
        return [f"sfc_{fmt(b[0])}hPa"] + inner + [f"{fmt(b[-1])}hPa_top"]

    def edges_pa(self, ps: np.ndarray) -> np.ndarray:
        """Layer interfaces in Pa, bottom first, shape (nlayer + 1,) + ps.shape, including the
        open layers (surface below, 0 Pa above)."""
        ps = np.asarray(ps, dtype=float)
        if self.kind == "sigma":
            mids = [np.asarray(s) * ps for s in self.bounds]
            lower = [] if self.bounds[0] >= 1 else [ps]
            upper = [] if self.bounds[-1] <= 0 else [np.zeros_like(ps)]
            return np.stack(lower + mids + upper)
        mids = [np.full(ps.shape, b * 100.0) for b in self.bounds]
        return np.stack([np.maximum(ps, mids[0])] + mids + [np.zeros_like(ps)])


def parse_layers(text: str) -> LayerSet:
    """``"1000,850,700,500,300,100"`` (hPa) or ``"sigma:1,0.8,0.5,0"``, bottom or top first."""
    raw = str(text).strip()
    kind = "pressure"
    if raw.lower().startswith("sigma:"):
        kind, raw = "sigma", raw[6:]
    try:
        vals = [float(x) for x in raw.split(",") if x.strip()]
    except ValueError:
        raise RequestError(f"--layers {text!r} is not a list of numbers; write e.g. 1000,850,700,500,300,100 (hPa) or sigma:1,0.8,0.5,0.") from None
    if len(vals) < 2:
        raise RequestError(f"--layers {text!r} needs at least two bounds; write e.g. 1000,850,700,500,300,100 (hPa).")
    vals = sorted(set(vals), reverse=True)  # bottom (largest p or σ) first
    if vals[-1] < 0:
        raise RequestError(f"--layers {text!r} has a negative bound; pressures and sigma values are positive.")
    if kind == "sigma" and vals[0] > 1:
        raise RequestError(f"--layers {text!r}: sigma bounds lie between 0 and 1.")
    if kind == "pressure" and vals[0] > 1100:
        raise RequestError(f"--layers {text!r}: bounds are in hPa (the surface is near 1000 hPa), not Pa.")
    return LayerSet(tuple(vals), kind)


def column_top(vertical, ps) -> np.ndarray:
    """Pressure (Pa) at the top of the column of a vertical scheme (budget.vertical)."""
    ps = np.asarray(ps, dtype=float)
    if hasattr(vertical, "a_interface_pa"):  # hybrid: a·p0 + b·ps at the top interface
        return float(vertical.a_interface_pa[0]) + float(vertical.b_interface[0]) * ps
    top = vertical.p[0] if getattr(vertical, "p_top", None) is None else vertical.p_top
    return np.full(ps.shape, float(top))


def slice_tops(dp: np.ndarray, p_top) -> np.ndarray:
    """Pressure at the top of each level's slice of air: p_top + Σ of the thicknesses above
    (slices are contiguous from the column top down to the surface). ``dp`` has the level axis
    first."""
    dp = np.asarray(dp, dtype=float)
    return np.asarray(p_top, dtype=float) + np.cumsum(dp, axis=0) - dp


def layer_fractions(dp: np.ndarray, p_top, ps: np.ndarray, layers: LayerSet) -> np.ndarray:
    """Thickness (Pa) of each level's slice inside each layer: shape (nlayer,) + dp.shape.

    ``dp`` is (level, ...) as returned by a vertical scheme's ``thickness(ps)``; ``ps`` has the
    trailing shape; ``p_top`` is the column top (Pa, scalar or trailing shape).
    """
    dp = np.asarray(dp, dtype=float)
    top = slice_tops(dp, p_top)
    bot = top + dp
    edges = layers.edges_pa(ps)  # (nlayer + 1, ...) bottom first
    lo, hi = edges[:-1], edges[1:]  # layer bottom (larger p) and top
    over = np.minimum(bot[None], lo[:, None]) - np.maximum(top[None], hi[:, None])
    return np.clip(over, 0.0, None)


def layer_integrals(x: np.ndarray, frac: np.ndarray, level_axis: int) -> np.ndarray:
    """(1/g) Σ_k x_k · frac_Lk for every layer L: the layer axis comes first in the result.

    ``frac`` is ``layer_fractions`` with its level axis moved to match ``x``'s ``level_axis``
    (+1 for the leading layer axis)."""
    contrib = np.where(frac > 0, np.asarray(x)[None] * frac, 0.0)
    return contrib.sum(axis=level_axis + 1) / STANDARD_GRAVITY
