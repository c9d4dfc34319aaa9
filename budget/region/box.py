"""Regions that are not files: a longitude-latitude box and drawn vertices."""

from __future__ import annotations

import math

import numpy as np

from ..errors import RegionError
from .model import Part, Region, Ring
from .normalise import LON_LIMIT, build_region, prepare_ring
from .text import num


def region_from_bbox(west, south, east, north, name: str | None = None) -> Region:
    """A box between two meridians and two parallels (edges "S", "E", "N", "W").

    ``west > east`` means the box crosses the antimeridian (170, −10, −170, 10 is the box
    from 170° E eastwards to 170° W).  ``east − west == 360`` (e.g. −180, 70, 180, 90) is a
    box round all longitudes: a polar cap or a band, whose meridian edges coincide.
    """
    vals = {"west": west, "south": south, "east": east, "north": north}
    for key, v in vals.items():
        try:
            vals[key] = float(v)
        except (TypeError, ValueError):
            raise RegionError(
                f"The bbox {key} value {v!r} is not a number; give the box as west,south,east,north "
                "in degrees, e.g. 170,-10,-170,10."
            ) from None
        if not math.isfinite(vals[key]):
            raise RegionError(
                f"The bbox {key} value {v!r} is not finite; give the box as west,south,east,north "
                "in degrees, e.g. 170,-10,-170,10."
            )
    w, s, e, n = vals["west"], vals["south"], vals["east"], vals["north"]
    for key, v in (("south", s), ("north", n)):
        if not -90.0 <= v <= 90.0:
            raise RegionError(
                f"The bbox {key} latitude {num(v)} is outside −90 … 90; give latitudes in "
                "degrees north."
            )
    for key, v in (("west", w), ("east", e)):
        if not -LON_LIMIT <= v <= LON_LIMIT:
            raise RegionError(
                f"The bbox {key} longitude {num(v)} is outside −360 … 360; give longitudes in "
                "degrees east."
            )
    if not s < n:
        raise RegionError(
            f"The bbox south latitude {num(s)} is not below the north latitude {num(n)}; "
            "give the box as west,south,east,north."
        )
    if w == e:
        raise RegionError(
            f"The bbox west and east longitudes are both {num(w)}, so the box has no width; "
            "for a box round all longitudes use west -180 and east 180."
        )
    span = e - w
    if span < 0:
        span = (span % 360.0) or 360.0
    if span > 360.0:
        raise RegionError(
            f"The bbox from {num(w)} to {num(e)} spans {span:g}° of longitude, more than once "
            "round the globe; give at most 360°, e.g. -180 to 180."
        )
    w0 = w - 360.0 * math.floor((w + 180.0) / 360.0)
    if w0 == -180.0 and w == 180.0:
        w0 = 180.0
    if w0 >= 180.0 and span < 360.0 and w0 > 180.0:
        w0 -= 360.0
    e0 = w0 + span
    ring = Ring(np.array([w0, e0, e0, w0]), np.array([s, s, n, n]), ["S", "E", "N", "W"])
    if name is None:
        name = f"box {num(w)},{num(s)},{num(e)},{num(n)}"
    region = Region([Part(ring, [])], name=name, great_circle=False, kind="bbox")
    if span == 360.0:
        region.warnings.append(
            "The box runs round all longitudes: its west and east edges coincide and cancel on a "
            "grid that is periodic in longitude; on a regional grid they do not."
        )
    return region


def region_from_vertices(lon, lat, name: str | None = None, great_circle: bool = False) -> Region:
    """A single polygon from vertex longitudes and latitudes (e.g. drawn in the dashboard)."""
    try:
        lon_a = np.asarray(lon, dtype=float).ravel()
        lat_a = np.asarray(lat, dtype=float).ravel()
    except (TypeError, ValueError):
        raise RegionError(
            "The drawn vertices are not numbers; give longitudes and latitudes in degrees."
        ) from None
    if lon_a.size != lat_a.size:
        raise RegionError(
            f"The region has {lon_a.size} longitudes but {lat_a.size} latitudes; give one "
            "latitude per longitude."
        )
    raw = prepare_ring(np.c_[lon_a, lat_a], "", "", great_circle)
    return build_region([[raw]], name or "drawn region", great_circle, False, "")



def parse_bbox(bbox) -> list:
    if isinstance(bbox, str):
        parts = [p for p in bbox.replace(";", ",").replace(" ", ",").split(",") if p != ""]
    else:
        try:
            parts = list(bbox)
        except TypeError:
            parts = [bbox]
    if len(parts) != 4:
        raise RegionError(
            f"The bbox {bbox!r} must be four numbers west,south,east,north in degrees, e.g. "
            "170,-10,-170,10."
        )
    return parts
