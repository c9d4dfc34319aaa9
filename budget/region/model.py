"""The region data model: Ring, Part, Region, and the RFC 7946 writer.

A :class:`Region` is one or more :class:`Part` (an exterior :class:`Ring` and its holes).
Every ring is stored

- not closed (the repeated last vertex of GeoJSON is dropped) and without repeated
  consecutive vertices;
- in a *continuous* longitude frame: consecutive vertices differ by less than 180° in
  longitude, the first vertex lies in −180 … 180, and a ring across the antimeridian simply
  runs past ±180 (170 … 190).  A box spanning all longitudes (a polar cap or a band) is the
  one exception: its south and north edges are full circles of latitude (−180 → 180);
- exterior counter-clockwise and holes clockwise, judged by their spherical signed area;
- with one name per edge (vertex i → i+1): "S", "E", "N", "W" for a box, otherwise
  "edge 1", … ("part 2 edge 3", "part 1 hole 1 edge 2" when there are several parts or holes).
  When a ring is reversed to fix its orientation its edges keep their names.

Edges are straight in longitude-latitude (RFC 7946) unless ``great_circle`` is set, and
consecutive vertices are always joined the short way round in longitude.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely
import shapely.affinity
from shapely.geometry import MultiPolygon, Polygon
from shapely.geometry.polygon import orient

from .. import sphere
from ..constants import EARTH_RADIUS


@dataclass(eq=False)
class Ring:
    """One closed ring, stored without the closing vertex (see the module docstring)."""

    lon: np.ndarray
    lat: np.ndarray
    edge_names: list[str]

    def __post_init__(self):
        self.lon = np.asarray(self.lon, dtype=float)
        self.lat = np.asarray(self.lat, dtype=float)
        if len(self.edge_names) != self.lon.size:
            raise ValueError("a ring needs exactly one edge name per vertex")

    @property
    def n(self) -> int:
        return int(self.lon.size)

    def signed_area(self, radius: float = EARTH_RADIUS, great_circle: bool = False) -> float:
        """Spherical signed area (m², counter-clockwise positive)."""
        if great_circle:
            lon, lat, _ = sphere.densify(self.lon, self.lat, 0.05, great_circle=True)
            return sphere.ring_area(lon, lat, radius)
        return sphere.ring_area(self.lon, self.lat, radius)

    def closed(self) -> tuple[np.ndarray, np.ndarray]:
        """Longitudes and latitudes with the first vertex repeated at the end."""
        return np.append(self.lon, self.lon[:1]), np.append(self.lat, self.lat[:1])

    def coords(self) -> list[tuple[float, float]]:
        return list(zip(self.lon.tolist(), self.lat.tolist()))

    def shifted(self, dlon: float) -> "Ring":
        return Ring(self.lon + dlon, self.lat.copy(), list(self.edge_names))


@dataclass(eq=False)
class Part:
    """One polygon: a counter-clockwise exterior ring and clockwise holes."""

    exterior: Ring
    holes: list[Ring] = field(default_factory=list)

    @property
    def rings(self) -> list[Ring]:
        return [self.exterior, *self.holes]

    def shapely(self) -> Polygon:
        return Polygon(self.exterior.coords(), [h.coords() for h in self.holes])


@dataclass(eq=False)
class Region:
    """A validated region (see the module docstring for the conventions of its rings)."""

    parts: list[Part]
    name: str | None = None
    great_circle: bool = False
    kind: str = "polygon"  # "polygon" or "bbox"
    warnings: list[str] = field(default_factory=list)

    # -- geometry ---------------------------------------------------------------------------

    @property
    def rings(self) -> list[Ring]:
        """Every ring: each part's exterior followed by its holes."""
        return [r for p in self.parts for r in p.rings]

    @property
    def vertex_count(self) -> int:
        return sum(r.n for r in self.rings)

    @property
    def edge_names(self) -> list[str]:
        return [name for r in self.rings for name in r.edge_names]

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(lon_min, lat_min, lon_max, lat_max) in the continuous longitude frame."""
        lon = np.concatenate([p.exterior.lon for p in self.parts])
        lat = np.concatenate([p.exterior.lat for p in self.parts])
        return float(lon.min()), float(lat.min()), float(lon.max()), float(lat.max())

    def shapely(self):
        """The region as a shapely Polygon / MultiPolygon in the continuous frame (degrees)."""
        polys = [p.shapely() for p in self.parts]
        return polys[0] if len(polys) == 1 else MultiPolygon(polys)

    def area_m2(self, radius: float = EARTH_RADIUS) -> float:
        """Exact spherical area in m² (holes subtracted).

        Lon-lat-straight edges use the closed form of budget.sphere.ring_area; great-circle
        edges are densified (0.05° steps) first.
        """
        return float(sum(r.signed_area(radius, self.great_circle) for r in self.rings))

    # -- export -----------------------------------------------------------------------------

    def to_geojson(self) -> dict:
        """The region as a GeoJSON Feature (RFC 7946).

        Exterior rings counter-clockwise, holes clockwise, rings closed, longitudes within
        −180 … 180; a part that crosses the antimeridian is cut there and written as a
        MultiPolygon, which :func:`region_from_geojson` joins again.
        """
        polys: list[list[list[list[float]]]] = []
        for part in self.parts:
            polys.extend(_part_to_rfc7946(part, self.great_circle, self.kind))
        if len(polys) == 1:
            geometry = {"type": "Polygon", "coordinates": polys[0]}
        else:
            geometry = {"type": "MultiPolygon", "coordinates": polys}
        props: dict[str, Any] = {
            "name": self.name,
            "region_kind": self.kind,
            "great_circle": bool(self.great_circle),
            "area_m2": self.area_m2(),
        }
        feature: dict[str, Any] = {"type": "Feature", "properties": props, "geometry": geometry}
        if self.kind == "bbox":
            r = self.parts[0].exterior
            west, east = float(r.lon[0]), float(r.lon[1])
            span = east - west
            if span >= 360.0:
                west, east = -180.0, 180.0
            else:
                west, east = _wrap180(west), _wrap180(east)
                if east == -180.0:
                    east = 180.0
            feature["bbox"] = [west, float(r.lat[0]), east, float(r.lat[2])]
        return feature

    def __repr__(self) -> str:
        lon0, lat0, lon1, lat1 = self.bounds
        return (
            f"Region(name={self.name!r}, kind={self.kind!r}, parts={len(self.parts)}, "
            f"vertices={self.vertex_count}, bounds=({lon0:g}, {lat0:g}, {lon1:g}, {lat1:g}), "
            f"great_circle={self.great_circle})"
        )


def _wrap180(x: float) -> float:
    y = (x + 180.0) % 360.0 - 180.0
    return 180.0 if (y == -180.0 and x > 0) else y


def _ring_coords_closed(lon, lat) -> list[list[float]]:
    pts = [[float(a), float(b)] for a, b in zip(lon, lat)]
    pts.append(list(pts[0]))
    return pts


def _part_to_rfc7946(part: Part, great_circle: bool, kind: str) -> list:
    """Coordinates of one part as one or more RFC 7946 polygons (cut at the antimeridian)."""
    lon_min = min(r.lon.min() for r in part.rings)
    lon_max = max(r.lon.max() for r in part.rings)
    if kind == "bbox" and lon_max - lon_min == 360.0:
        # a box round all longitudes is the same box in any frame: write it as −180 … 180
        ext = part.exterior
        return [[_ring_coords_closed(ext.lon - lon_min - 180.0, ext.lat)]]
    if lon_min >= -180.0 and lon_max <= 180.0:
        return [[_ring_coords_closed(r.lon, r.lat) for r in part.rings]]
    rings = part.rings
    if great_circle:
        rings = [_insert_gc_seam_points(r) for r in rings]
    poly = Polygon([(a, b) for a, b in zip(rings[0].lon, rings[0].lat)],
                   [[(a, b) for a, b in zip(h.lon, h.lat)] for h in rings[1:]])
    out = []
    k_lo = int(math.floor((lon_min + 180.0) / 360.0))
    k_hi = int(math.floor((lon_max + 180.0) / 360.0))
    for k in range(k_lo, k_hi + 1):
        x0 = k * 360.0 - 180.0
        piece = shapely.clip_by_rect(poly, x0, -90.0, x0 + 360.0, 90.0)
        for g in _polygons_of(piece):
            if g.area <= 0.0:
                continue
            g = shapely.affinity.translate(g, xoff=-k * 360.0)
            g = orient(g, 1.0)
            coords = [_split_long_steps(g.exterior.coords)]
            coords += [_split_long_steps(h.coords) for h in g.interiors]
            out.append(coords)
    return out


def _split_long_steps(coords) -> list[list[float]]:
    """Closed ring coordinates with edges of 180° or more of longitude halved (or further),
    so that a reader joining vertices the short way round gets the same edges."""
    xy = np.asarray(coords, dtype=float)
    out = [[float(xy[0, 0]), float(xy[0, 1])]]
    for (x0, y0), (x1, y1) in zip(xy[:-1], xy[1:]):
        m = int(abs(x1 - x0) // 120.0) + 1 if abs(x1 - x0) >= 180.0 else 1
        for t in np.arange(1, m + 1) / m:
            out.append([float(x0 + t * (x1 - x0)), float(y0 + t * (y1 - y0))])
        out[-1] = [float(x1), float(y1)]
    return out


def _polygons_of(geom) -> list[Polygon]:
    if geom.is_empty:
        return []
    if geom.geom_type == "Polygon":
        return [geom]
    if hasattr(geom, "geoms"):
        return [g for sub in geom.geoms for g in _polygons_of(sub)]
    return []


def _insert_gc_seam_points(ring: Ring) -> Ring:
    """Add the exact great-circle crossing of every seam (±180 + k·360) as a vertex."""
    lon_c, lat_c = ring.closed()
    new_lon, new_lat = [], []
    for i in range(ring.n):
        new_lon.append(lon_c[i])
        new_lat.append(lat_c[i])
        a, b = lon_c[i], lon_c[i + 1]
        lo, hi = min(a, b), max(a, b)
        k0 = math.ceil((lo - 180.0) / 360.0)
        seams = [180.0 + 360.0 * k for k in range(k0, k0 + 3) if lo < 180.0 + 360.0 * k < hi]
        seams.sort(reverse=bool(b < a))
        for s in seams:
            new_lon.append(s)
            new_lat.append(sphere.great_circle_lat_at_lon(a, lat_c[i], b, lat_c[i + 1], s))
    return Ring(np.array(new_lon), np.array(new_lat), [""] * len(new_lon))


@dataclass
class RawRing:
    """A ring on its way in: checked, in the continuous frame, orientation as given."""

    lon: np.ndarray  # continuous frame
    lat: np.ndarray
    vertex_no: np.ndarray  # 1-based vertex numbers in the user's input
    label: str  # "", "part 2 ", "part 1 hole 1 " for messages
    where: str  # " in 'file.geojson'" etc. for messages
    removed: int = 0  # repeated consecutive vertices dropped


