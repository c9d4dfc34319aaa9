"""Regions: polygons in longitude-latitude, parsed, validated and normalised.

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

Every problem with the input raises :class:`budget.errors.RegionError` with one sentence that
names the culprit (file, feature, vertex or edge) and says what to do.
"""

from __future__ import annotations

import io
import json
import math
import os
import warnings as warnings_module
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import shapely
import shapely.affinity
import shapely.validation
from shapely.geometry import MultiPolygon, Polygon
from shapely.geometry.polygon import orient

from . import sphere
from .constants import EARTH_RADIUS
from .errors import RegionError

__all__ = [
    "Ring",
    "Part",
    "Region",
    "region_from_bbox",
    "region_from_vertices",
    "region_from_geojson",
    "region_from_shapefile",
    "region_from_upload",
    "list_features",
    "load_region",
]

#: Longitudes accepted on input (degrees); anything else is taken as a mistake
#: (often a projected coordinate system).
LON_LIMIT = 360.0

_NAME_KEYS = ("name", "NAME", "Name", "title", "label", "id", "ID")


# --------------------------------------------------------------------------------------------
# formatting helpers


def _fmt_lon(lon: float) -> str:
    x = (float(lon) + 180.0) % 360.0 - 180.0
    if x == -180.0 and lon > 0:
        x = 180.0
    return f"{abs(x):.1f}°{'E' if x >= 0 else 'W'}"


def _fmt_lat(lat: float) -> str:
    return f"{abs(float(lat)):.1f}°{'N' if lat >= 0 else 'S'}"


def _fmt_point(lon: float, lat: float) -> str:
    return f"({_fmt_lon(lon)}, {_fmt_lat(lat)})"


def _cap(text: str) -> str:
    """Text to start a sentence with, or '' ('part 2 ' -> 'Part 2 ')."""
    return text[:1].upper() + text[1:]


def _num(x: float) -> str:
    return f"{x:g}"


# --------------------------------------------------------------------------------------------
# data model


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


# --------------------------------------------------------------------------------------------
# ring preparation and validation


@dataclass
class _RawRing:
    lon: np.ndarray  # continuous frame
    lat: np.ndarray
    vertex_no: np.ndarray  # 1-based vertex numbers in the user's input
    label: str  # "", "part 2 ", "part 1 hole 1 " for messages
    where: str  # " in 'file.geojson'" etc. for messages
    removed: int = 0  # repeated consecutive vertices dropped


def _prepare_ring(coords, label: str, where: str, great_circle: bool) -> _RawRing:
    """Check one input ring and bring it into the continuous frame (orientation untouched)."""
    ring_desc = f"{label.strip()} " if label.strip() else ""
    try:
        arr = np.asarray([list(c)[:2] for c in coords], dtype=float)
    except (TypeError, ValueError):
        raise RegionError(
            f"The {ring_desc}ring{where} has coordinates that are not numbers; give each "
            "vertex as [longitude, latitude] in degrees."
        ) from None
    if arr.ndim != 2 or arr.shape[0] == 0 or arr.shape[1] < 2:
        raise RegionError(
            f"The {ring_desc}ring{where} is not a list of [longitude, latitude] pairs; give "
            "each vertex as [longitude, latitude] in degrees."
        )
    lon_in, lat_in = arr[:, 0], arr[:, 1]
    bad = ~(np.isfinite(lon_in) & np.isfinite(lat_in))
    bad |= ~((lat_in >= -90.0) & (lat_in <= 90.0) & (np.abs(lon_in) <= LON_LIMIT))
    for i in np.flatnonzero(bad)[:1]:
        x, y = lon_in[i], lat_in[i]
        v = f"{label}vertex {i + 1}"
        if not (np.isfinite(x) and np.isfinite(y)):
            raise RegionError(
                f"{v[0].upper() + v[1:]}{where} is ({x}, {y}), which is not a finite number; "
                "give every vertex a real longitude and latitude in degrees."
            )
        if not -90.0 <= y <= 90.0:
            raise RegionError(
                f"The latitude {_num(y)} of {v}{where} is outside −90 … 90; give latitudes in "
                "degrees north (the coordinates may be projected or swapped: GeoJSON order is "
                "[longitude, latitude])."
            )
        if not -LON_LIMIT <= x <= LON_LIMIT:
            raise RegionError(
                f"The longitude {_num(x)} of {v}{where} is outside −360 … 360; give longitudes "
                "in degrees east (the coordinates may be in a projected coordinate system)."
            )
    vno = np.arange(1, lon_in.size + 1)
    lon, lat = lon_in.copy(), lat_in.copy()
    # drop a repeated closing vertex
    if lon.size > 1 and lat[-1] == lat[0] and lon[-1] == lon[0]:
        lon, lat, vno = lon[:-1], lat[:-1], vno[:-1]
    # steps between consecutive vertices (including the closing edge), the short way round,
    # except an exact ±360 step along a parallel, which is a full circle of latitude
    nxt_lon, nxt_lat = np.roll(lon, -1), np.roll(lat, -1)
    raw = nxt_lon - lon
    step = (raw + 180.0) % 360.0 - 180.0
    full = (np.abs(raw) == 360.0) & (nxt_lat == lat)
    step = np.where(full, raw, step)
    # remove repeated consecutive vertices (same point, also across a 360 shift)
    keep = ~((step == 0.0) & (nxt_lat == lat))
    removed = int((~keep).sum()) if lon.size > 1 else 0
    if not keep.all():
        lon, lat, vno = lon[keep], lat[keep], vno[keep]
        nxt_lon, nxt_lat = np.roll(lon, -1), np.roll(lat, -1)
        raw = nxt_lon - lon
        step = (raw + 180.0) % 360.0 - 180.0
        full = (np.abs(raw) == 360.0) & (nxt_lat == lat)
        step = np.where(full, raw, step)
    if lon.size < 3:
        raise RegionError(
            f"The {ring_desc}ring{where} has only {lon.size} distinct "
            f"vert{'ex' if lon.size == 1 else 'ices'}; a polygon needs at least 3."
        )
    n = lon.size
    ambiguous = np.flatnonzero((np.abs(step) == 180.0) & ~full)
    if ambiguous.size:
        i = int(ambiguous[0])
        a, b = vno[i], vno[(i + 1) % n]
        raise RegionError(
            f"{_cap(label + 'vertices')} {a} and {b}{where} are exactly 180° of longitude "
            "apart, so the edge between them could go either way round; add a vertex between "
            "them."
        )
    if great_circle:
        for i in range(n):
            j = (i + 1) % n
            p = sphere._to_xyz([lon[i], lon[j]], [lat[i], lat[j]])
            if np.dot(p[0], p[1]) < -1 + 1e-12:
                raise RegionError(
                    f"{_cap(label + 'vertices')} {vno[i]} and {vno[j]}{where} are antipodal, "
                    "so no single great circle joins them; add a vertex between them."
                )
    cont = lon[0] + np.concatenate([[0.0], np.cumsum(step[:-1])])
    winding = float(np.sum(step))
    if abs(winding) > 180.0:
        pole = "North" if np.mean(lat) >= 0 else "South"
        if np.mean(lat) >= 0:
            edge_lat = math.floor(float(np.min(lat)))
            eg = f"bbox -180,{edge_lat:g},180,90"
        else:
            edge_lat = math.ceil(float(np.max(lat)))
            eg = f"bbox -180,-90,180,{edge_lat:g}"
        raise RegionError(
            f"The {ring_desc}ring{where} winds once round the {pole} Pole, which a polygon with "
            f"lon-lat edges cannot enclose; give the region as a box up to the pole instead "
            f"(e.g. {eg})."
        )
    # first vertex into −180 … 180
    shift = 360.0 * math.floor((cont[0] + 180.0) / 360.0)
    if cont[0] - shift == -180.0 and cont[0] > 0:
        shift -= 360.0
    cont = cont - shift
    if cont[0] > 180.0:
        cont = cont - 360.0
    extent = float(cont.max() - cont.min())
    if extent > 360.0:
        raise RegionError(
            f"The {ring_desc}ring{where} spans {extent:.1f}° of longitude, more than once round "
            "the globe; check the vertex order or split the polygon."
        )
    return _RawRing(cont, lat.copy(), vno, label, where, removed)


def _shift_to_frame(ring: _RawRing, centre: float) -> _RawRing:
    """Shift a ring by a multiple of 360 so that its mean longitude is nearest `centre`."""
    k = round((centre - float(np.mean(ring.lon))) / 360.0)
    if k:
        ring.lon = ring.lon + 360.0 * k
    return ring


def _edge_label(ring: _RawRing, i: int) -> str:
    n = ring.lon.size
    return f"{ring.vertex_no[i]}→{ring.vertex_no[(i + 1) % n]}"


def _validate_part(rings: list[_RawRing]) -> None:
    """Self-intersection and hole checks of one part (exterior first)."""
    ext = rings[0]
    poly = Polygon(np.c_[ext.lon, ext.lat], [np.c_[h.lon, h.lat] for h in rings[1:]])
    if poly.is_valid:
        if abs(Polygon(np.c_[ext.lon, ext.lat]).area) == 0.0:
            raise _zero_area(ext)
        return
    if Polygon(np.c_[ext.lon, ext.lat]).area == 0.0 and _all_collinear(ext):
        raise _zero_area(ext)
    problem = _find_crossing(rings)
    if problem:
        raise RegionError(problem)
    reason = shapely.validation.explain_validity(poly)
    where = ext.where
    loc = ""
    if "[" in reason:
        try:
            xy = reason[reason.index("[") + 1: reason.index("]")].split()
            loc = f" near {_fmt_point(float(xy[0]), float(xy[1]))}"
        except (ValueError, IndexError):
            loc = ""
        reason = reason[: reason.index("[")].strip()
    label = ext.label.strip()
    what = f"{label} of the region" if label else "region"
    hint = "check that the rings do not touch or cross"
    for key, text in (
        ("outside shell", "every hole must lie inside its exterior ring"),
        ("disconnected", "holes must not cut the polygon into pieces"),
        ("holes are nested", "holes must not lie inside one another"),
        ("nested holes", "holes must not lie inside one another"),
        ("nested shells", "parts must not lie inside one another"),
    ):
        if key in reason.lower():
            hint = text
            break
    raise RegionError(
        f"The {what}{where} is not a valid polygon ({reason.lower()}{loc}); {hint}."
    )


def _zero_area(ring: _RawRing) -> RegionError:
    label = ring.label.strip()
    return RegionError(
        f"The {label + ' ' if label else ''}ring{ring.where} has zero area (all its vertices "
        "lie on one line); give at least three vertices that are not in a line."
    )


def _all_collinear(ring: _RawRing) -> bool:
    x = ring.lon - ring.lon[0]
    y = ring.lat - ring.lat[0]
    cross = x[1:-1] * y[2:] - y[1:-1] * x[2:]
    scale = max(1.0, float(np.max(np.abs(x)) + np.max(np.abs(y))))
    return bool(np.all(np.abs(cross) <= 1e-12 * scale * scale))


def _find_crossing(rings: list[_RawRing]) -> str | None:
    """Name the first pair of edges that cross, touch or overlap, or None."""
    x0 = np.concatenate([r.lon for r in rings])
    y0 = np.concatenate([r.lat for r in rings])
    x1 = np.concatenate([np.roll(r.lon, -1) for r in rings])
    y1 = np.concatenate([np.roll(r.lat, -1) for r in rings])
    owner = np.concatenate([np.full(r.lon.size, k) for k, r in enumerate(rings)])
    index = np.concatenate([np.arange(r.lon.size) for r in rings])
    sizes = np.array([r.lon.size for r in rings])
    segs = shapely.linestrings(np.stack([np.c_[x0, y0], np.c_[x1, y1]], axis=1))
    tree = shapely.STRtree(segs)
    a_idx, b_idx = tree.query(segs, predicate="intersects")
    sel = a_idx < b_idx
    a_idx, b_idx = a_idx[sel], b_idx[sel]
    # neighbouring edges always share their vertex; they only matter when they fold back
    n_of = sizes[owner[a_idx]]
    d = (index[b_idx] - index[a_idx]) % n_of
    adjacent = (owner[a_idx] == owner[b_idx]) & ((d == 1) | (d == n_of - 1))
    ux, uy = x1 - x0, y1 - y0
    cross = ux[a_idx] * uy[b_idx] - uy[a_idx] * ux[b_idx]
    dot = ux[a_idx] * ux[b_idx] + uy[a_idx] * uy[b_idx]
    scale = np.hypot(ux[a_idx], uy[a_idx]) * np.hypot(ux[b_idx], uy[b_idx])
    folds = (np.abs(cross) <= 1e-12 * scale) & (dot < 0)
    cand = ~adjacent | folds
    for a, b in sorted(zip(a_idx[cand].tolist(), b_idx[cand].tolist())):
        ra, rb = int(owner[a]), int(owner[b])
        ia, ib = int(index[a]), int(index[b])
        inter = segs[a].intersection(segs[b])
        pt = inter.representative_point() if not inter.is_empty else segs[a].centroid
        near = _fmt_point(pt.x, pt.y)
        if inter.geom_type != "Point":
            verb = "overlap"
        else:
            ends = [shapely.Point(c) for c in (*segs[a].coords, *segs[b].coords)]
            verb = "touch" if any(pt.equals(e) for e in ends) else "cross"
        ring_a, ring_b = rings[ra], rings[rb]
        where = rings[0].where
        if ra == rb:
            prefix = ring_a.label.strip()
            lead = f"In {prefix}{where}, edges" if prefix else f"Edges"
            tail = "" if prefix else where
            return (
                f"{lead} {_edge_label(ring_a, ia)} and {_edge_label(ring_b, ib)}{tail} {verb} "
                f"near {near}; reorder the vertices or split the polygon."
            )
        name_a = f"the exterior of {ring_a.label.strip()}" if ring_a.label.strip() else "the exterior"
        name_b = ring_b.label.strip()
        return (
            f"Edge {_edge_label(ring_a, ia)} of {name_a} and edge {_edge_label(ring_b, ib)} of "
            f"{name_b}{where} {verb} near {near}; a hole must lie wholly inside its exterior ring."
        )
    return None


def _orient(ring: _RawRing, ccw: bool, names: list[str]) -> Ring:
    """Ring with the wanted orientation; edges keep their names when reversed."""
    area = sphere.ring_area(ring.lon, ring.lat)
    lon, lat = ring.lon, ring.lat
    if (area > 0) != ccw:
        lon = np.r_[lon[:1], lon[:0:-1]]
        lat = np.r_[lat[:1], lat[:0:-1]]
        names = names[::-1]
    return Ring(lon.copy(), lat.copy(), list(names))


def _build_region(
    raw_parts: list[list[_RawRing]],
    name: str | None,
    great_circle: bool,
    merge_seams: bool,
    where: str,
) -> Region:
    """Validate raw parts (exterior first in each) and assemble the normalised Region."""
    # holes into their exterior's frame
    for rings in raw_parts:
        centre = float(np.mean(rings[0].lon))
        for h in rings[1:]:
            _shift_to_frame(h, centre)
    if merge_seams and len(raw_parts) > 1:
        raw_parts = _merge_seam_parts(raw_parts, where, great_circle)
    for rings in raw_parts:
        _validate_part(rings)
    _check_parts_overlap(raw_parts, where)
    multi = len(raw_parts) > 1 or any(len(r) > 1 for r in raw_parts)
    parts = []
    for p_i, rings in enumerate(raw_parts):
        ext = rings[0]
        pre = f"part {p_i + 1} " if multi else ""
        ext_names = [f"{pre}edge {k + 1}" for k in range(ext.lon.size)]
        exterior = _orient(ext, True, ext_names)
        holes = []
        for h_i, h in enumerate(rings[1:]):
            h_names = [f"part {p_i + 1} hole {h_i + 1} edge {k + 1}" for k in range(h.lon.size)]
            holes.append(_orient(h, False, h_names))
        parts.append(Part(exterior, holes))
    region = Region(parts, name=name, great_circle=great_circle, kind="polygon")
    removed = sum(r.removed for rings in raw_parts for r in rings)
    if removed:
        region.warnings.append(
            f"{removed} repeated {'vertex' if removed == 1 else 'vertices'}{where} "
            f"{'was' if removed == 1 else 'were'} removed."
        )
    return region


def _check_parts_overlap(raw_parts: list[list[_RawRing]], where: str) -> None:
    if len(raw_parts) < 2:
        return
    polys = [Polygon(np.c_[r[0].lon, r[0].lat], [np.c_[h.lon, h.lat] for h in r[1:]])
             for r in raw_parts]
    tree = shapely.STRtree(polys)
    for i, poly in enumerate(polys):
        for s in (-360.0, 0.0, 360.0):
            other = shapely.affinity.translate(poly, xoff=s)
            for j in tree.query(other, predicate="intersects"):
                j = int(j)
                if j <= i:
                    continue
                ov = other.intersection(polys[j]).area
                if ov > 1e-9 * min(poly.area, polys[j].area):
                    raise RegionError(
                        f"Parts {i + 1} and {j + 1} of the region{where} overlap; merge "
                        "them into one polygon so that no area counts twice."
                    )


def _merge_seam_parts(raw_parts, where, great_circle):
    """Join parts that were cut at the antimeridian (RFC 7946 style) back into one."""
    on_seam = [i for i, r in enumerate(raw_parts)
               if np.any(np.isclose(np.abs((r[0].lon + 180.0) % 360.0 - 180.0), 180.0, atol=1e-9))]
    if len(on_seam) < 2:
        return raw_parts
    rest = [raw_parts[i] for i in range(len(raw_parts)) if i not in on_seam]
    raw_parts = [raw_parts[i] for i in on_seam]
    polys = [Polygon(np.c_[r[0].lon, r[0].lat], [np.c_[h.lon, h.lat] for h in r[1:]])
             for r in raw_parts]
    groups = [[i] for i in range(len(polys))]
    geoms = list(polys)
    merged_any = True
    while merged_any:
        merged_any = False
        for a in range(len(geoms)):
            for b in range(a + 1, len(geoms)):
                for s in (-360.0, 360.0):
                    other = shapely.affinity.translate(geoms[b], xoff=s)
                    if not geoms[a].intersects(other):
                        continue
                    shared = geoms[a].boundary.intersection(other.boundary)
                    if shared.length <= 0.0:
                        continue
                    # the shared boundary must lie on a seam (lon = ±180 + k·360)
                    xs = np.array([c[0] for g in _lines_of(shared) for c in g.coords])
                    if not np.all(np.isclose((xs + 180.0) % 360.0, 0.0, atol=1e-9)
                                  | np.isclose((xs + 180.0) % 360.0, 360.0, atol=1e-9)):
                        continue
                    u = shapely.union(geoms[a], other)
                    if u.geom_type != "Polygon":
                        u = shapely.union(shapely.set_precision(geoms[a], 1e-9),
                                          shapely.set_precision(other, 1e-9))
                    if u.geom_type != "Polygon":
                        continue
                    geoms[a] = u
                    groups[a] += groups[b]
                    del geoms[b], groups[b]
                    merged_any = True
                    break
                if merged_any:
                    break
            if merged_any:
                break
    rest_idx = [i for i in range(len(rest) + len(on_seam)) if i not in on_seam]
    keyed = list(zip(rest_idx, rest))
    for g, grp in zip(geoms, groups):
        key = on_seam[min(grp)]
        if len(grp) == 1:
            keyed.append((key, raw_parts[grp[0]]))
            continue
        g = orient(g, 1.0)
        rings_xy = [np.asarray(g.exterior.coords)] + [np.asarray(h.coords) for h in g.interiors]
        new = []
        for k, xy in enumerate(rings_xy):
            xy = _drop_seam_vertices(xy[:-1], great_circle)
            label = "" if k == 0 else f"hole {k} "
            new.append(_prepare_ring(xy, label, where, great_circle))
        centre = float(np.mean(new[0].lon))
        for h in new[1:]:
            _shift_to_frame(h, centre)
        keyed.append((key, new))
    keyed.sort(key=lambda kv: kv[0])
    return [rings for _, rings in keyed]


def _lines_of(geom):
    if geom.is_empty:
        return []
    if geom.geom_type in ("LineString", "LinearRing"):
        return [geom]
    if hasattr(geom, "geoms"):
        return [g for sub in geom.geoms for g in _lines_of(sub)]
    return []


def _drop_seam_vertices(xy: np.ndarray, great_circle: bool) -> np.ndarray:
    """Remove vertices on a seam that only split an edge (collinear with their neighbours)."""
    changed = True
    while changed and len(xy) > 3:
        changed = False
        n = len(xy)
        for i in range(n):
            x = xy[i, 0]
            if not np.isclose(((x + 180.0) % 360.0 + 1e-9) % 360.0, 1e-9, atol=1e-8):
                continue
            p, q = xy[i - 1], xy[(i + 1) % n]
            if great_circle:
                pts = sphere._to_xyz([p[0], x, q[0]], [p[1], xy[i, 1], q[1]])
                on = abs(np.dot(np.cross(pts[0], pts[2]), pts[1])) < 1e-12
                between = np.dot(pts[0], pts[1]) > np.dot(pts[0], pts[2]) - 1e-15
            else:
                d1 = xy[i] - p
                d2 = q - xy[i]
                cross = d1[0] * d2[1] - d1[1] * d2[0]
                scale = (np.abs(d1).sum() + np.abs(d2).sum()) ** 2
                on = abs(cross) <= 1e-12 * max(scale, 1e-300)
                between = float(np.dot(d1, d2)) > 0
            if on and between and abs(q[0] - p[0]) < 180.0:
                xy = np.delete(xy, i, axis=0)
                changed = True
                break
    return xy


# --------------------------------------------------------------------------------------------
# constructors


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
                f"The bbox {key} latitude {_num(v)} is outside −90 … 90; give latitudes in "
                "degrees north."
            )
    for key, v in (("west", w), ("east", e)):
        if not -LON_LIMIT <= v <= LON_LIMIT:
            raise RegionError(
                f"The bbox {key} longitude {_num(v)} is outside −360 … 360; give longitudes in "
                "degrees east."
            )
    if not s < n:
        raise RegionError(
            f"The bbox south latitude {_num(s)} is not below the north latitude {_num(n)}; "
            "give the box as west,south,east,north."
        )
    if w == e:
        raise RegionError(
            f"The bbox west and east longitudes are both {_num(w)}, so the box has no width; "
            "for a box round all longitudes use west -180 and east 180."
        )
    span = e - w
    if span < 0:
        span = (span % 360.0) or 360.0
    if span > 360.0:
        raise RegionError(
            f"The bbox from {_num(w)} to {_num(e)} spans {span:g}° of longitude, more than once "
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
        name = f"box {_num(w)},{_num(s)},{_num(e)},{_num(n)}"
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
    raw = _prepare_ring(np.c_[lon_a, lat_a], "", "", great_circle)
    return _build_region([[raw]], name or "drawn region", great_circle, False, "")


def _read_json(obj_or_path) -> tuple[Any, str, str | None]:
    """(parsed object, ' in "file"' text for messages, file stem or None)."""
    if isinstance(obj_or_path, dict):
        return obj_or_path, "", None
    if isinstance(obj_or_path, (bytes, bytearray)):
        text = bytes(obj_or_path).decode("utf-8-sig", errors="replace")
        return _parse_json_text(text, "the uploaded region"), "", None
    if isinstance(obj_or_path, str) and obj_or_path.lstrip().startswith(("{", "[")):
        return _parse_json_text(obj_or_path, "the region text"), "", None
    path = Path(obj_or_path)
    if not path.exists():
        raise RegionError(f"The region file '{path}' does not exist; check the path.")
    if path.is_dir():
        raise RegionError(f"The region path '{path}' is a folder; give a .geojson, .shp or .zip file.")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise RegionError(
            f"The region file '{path.name}' cannot be read as UTF-8 text ({exc.__class__.__name__}); "
            "give a GeoJSON file."
        ) from None
    return _parse_json_text(text, f"The region file '{path.name}'"), f" in '{path.name}'", path.stem


def _parse_json_text(text: str, what: str) -> Any:
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        subject = what if what[0].isupper() else what[0].upper() + what[1:]
        raise RegionError(
            f"{subject} is not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno}); "
            "fix the file or export it again as GeoJSON."
        ) from None


def _features_of(obj: Any, where: str) -> list[dict]:
    if not isinstance(obj, dict) or "type" not in obj:
        raise RegionError(
            f"The region{where} is not a GeoJSON object (no \"type\" member); give a Polygon, "
            "MultiPolygon, Feature or FeatureCollection."
        )
    t = obj["type"]
    if t == "FeatureCollection":
        feats = obj.get("features")
        if not isinstance(feats, list) or not feats:
            raise RegionError(
                f"The FeatureCollection{where} has no features; add a Polygon feature."
            )
        return feats
    if t == "Feature":
        return [obj]
    return [{"type": "Feature", "properties": {}, "geometry": obj}]


def _feature_name(props: dict | None) -> str | None:
    if not props:
        return None
    for key in _NAME_KEYS:
        if props.get(key) not in (None, ""):
            return str(props[key])
    return None


def _summary(i: int, feat: dict) -> dict:
    props = feat.get("properties") or {}
    geom = feat.get("geometry") or {}
    short = {k: v for k, v in list(props.items())[:6]
             if isinstance(v, (str, int, float, bool)) or v is None}
    return {
        "index": i,
        "name": _feature_name(props) or f"feature {i}",
        "geometry": geom.get("type") if isinstance(geom, dict) else None,
        "properties": short,
    }


def list_features(obj_or_path) -> list[dict]:
    """One summary per feature: {"index", "name", "geometry", "properties"} (for a picker).

    Works for GeoJSON (object, text, bytes or path) and for shapefiles (.shp or .zip path).
    """
    if _is_shapefile_path(obj_or_path):
        feats, _, _, _ = _shapefile_features(obj_or_path)
    else:
        obj, where, _ = _read_json(obj_or_path)
        feats = _features_of(obj, where)
    return [_summary(i, f) for i, f in enumerate(feats)]


def _select_feature(feats: list[dict], feature, where: str) -> tuple[int, dict]:
    names = [_summary(i, f)["name"] for i, f in enumerate(feats)]
    listing = ", ".join(f"{i}: {n}" for i, n in enumerate(names[:20]))
    if len(names) > 20:
        listing += f", … ({len(names)} in all)"
    if feature is None:
        if len(feats) == 1:
            return 0, feats[0]
        subject = f"The region file{where[3:]}" if where.startswith(" in ") else "The FeatureCollection"
        raise RegionError(
            f"{subject} holds {len(feats)} features; choose one by name or index "
            f"({listing})."
        )
    if isinstance(feature, (int, np.integer)) and not isinstance(feature, bool):
        idx = int(feature)
        if -len(feats) <= idx < len(feats):
            return idx % len(feats), feats[idx]
        raise RegionError(
            f"There is no feature number {idx}{where}; it holds {len(feats)} features "
            f"({listing})."
        )
    key = str(feature)
    matches = []
    for i, f in enumerate(feats):
        props = f.get("properties") or {}
        if any(str(v) == key for v in props.values() if v is not None) or str(f.get("id")) == key:
            matches.append(i)
    if len(matches) == 1:
        return matches[0], feats[matches[0]]
    if len(matches) > 1:
        raise RegionError(
            f"{len(matches)} features{where} match '{key}' (numbers "
            f"{', '.join(map(str, matches[:10]))}); choose one by index instead."
        )
    if key.lstrip("-").isdigit():
        return _select_feature(feats, int(key), where)
    raise RegionError(
        f"No feature{where} has a property equal to '{key}'; available: {listing}."
    )


def _geometry_rings(geom: Any, where: str) -> tuple[list[list], bool]:
    """List of polygons (each a list of rings) and whether it was a MultiPolygon."""
    if not isinstance(geom, dict):
        raise RegionError(
            f"The feature{where} has no geometry; give a Polygon or MultiPolygon."
        )
    t = geom.get("type")
    coords = geom.get("coordinates")
    if t == "Polygon":
        polys, multi = [coords], False
    elif t == "MultiPolygon":
        polys, multi = coords, True
    elif t == "GeometryCollection":
        polys = []
        for g in geom.get("geometries") or []:
            sub, _ = _geometry_rings(g, where)
            polys.extend(sub)
        multi = True
    else:
        raise RegionError(
            f"The geometry type '{t}'{where} is not supported; give a Polygon or MultiPolygon "
            "(a closed ring of vertices)."
        )
    if not isinstance(polys, list) or not polys or any(
        not isinstance(p, list) or not p for p in polys
    ):
        raise RegionError(
            f"The {t}{where} has no coordinates; give at least one ring of [longitude, latitude] "
            "vertices."
        )
    return polys, multi


def _region_from_polys(polys, multi, name, great_circle, where) -> Region:
    raw_parts = []
    several = len(polys) > 1
    for p_i, rings in enumerate(polys):
        prepared = []
        for r_i, ring in enumerate(rings):
            if r_i == 0:
                label = f"part {p_i + 1} " if several else ""
            else:
                label = f"part {p_i + 1} hole {r_i} " if several else f"hole {r_i} "
            prepared.append(_prepare_ring(ring, label, where, great_circle))
        raw_parts.append(prepared)
    return _build_region(raw_parts, name, great_circle, multi, where)


def _maybe_bbox_region(feat: dict, name: str | None) -> Region | None:
    """A Feature written by Region.to_geojson for a box comes back as the same box."""
    props = feat.get("properties") or {}
    bb = feat.get("bbox")
    if props.get("region_kind") != "bbox" or not isinstance(bb, list) or len(bb) != 4:
        return None
    try:
        region = region_from_bbox(*bb, name=name)
    except RegionError:
        return None
    # only trust the bbox member when the geometry is that box
    geom_area = None
    try:
        polys, multi = _geometry_rings(feat.get("geometry"), "")
        geom_area = _region_from_polys(polys, multi, name, False, "").area_m2()
    except RegionError:
        return None
    if not np.isclose(geom_area, region.area_m2(), rtol=1e-9):
        return None
    return region


def region_from_geojson(obj_or_path, feature=None, name: str | None = None,
                        great_circle: bool | None = None) -> Region:
    """A region from GeoJSON: a Polygon, MultiPolygon, Feature or FeatureCollection.

    ``obj_or_path`` is a parsed object, JSON text, bytes or a file path.  ``feature`` picks a
    feature by any property value (e.g. its name) or by index (0-based, as list_features).
    ``great_circle=None`` takes the "great_circle" property when present, else False.
    MultiPolygon parts cut at the antimeridian are joined back into one part.
    """
    obj, where, stem = _read_json(obj_or_path)
    return _region_from_geojson_obj(obj, where, stem, feature, name, great_circle)


def _region_from_geojson_obj(obj, where, stem, feature, name, great_circle) -> Region:
    feats = _features_of(obj, where)
    idx, feat = _select_feature(feats, feature, where)
    if not isinstance(feat, dict):
        raise RegionError(f"Feature {idx}{where} is not a GeoJSON object; give a Feature.")
    props = feat.get("properties") or {}
    fname = _feature_name(props)
    region_name = name or fname or stem or "region"
    if len(feats) > 1:
        where = f" (feature {fname or idx}){where}"
    if great_circle is None:
        great_circle = bool(props.get("great_circle", False))
    if not great_circle:
        bb = _maybe_bbox_region(feat, region_name)
        if bb is not None:
            return bb
    polys, multi = _geometry_rings(feat.get("geometry"), where)
    return _region_from_polys(polys, multi, region_name, great_circle, where)


# --------------------------------------------------------------------------------------------
# shapefiles


def _is_shapefile_path(p) -> bool:
    return isinstance(p, (str, os.PathLike)) and not (
        isinstance(p, str) and p.lstrip().startswith(("{", "["))
    ) and Path(p).suffix.lower() in (".shp", ".zip")


def _shapefile_features(path_or_files, display: str | None = None):
    """Read a shapefile into GeoJSON-like features: (features, where, stem, warnings).

    ``path_or_files`` is a .shp or .zip path, or a dict {"shp": bytes, "dbf": ..., "shx": ...,
    "prj": ...} (bytes from an upload).
    """
    import shapefile  # pyshp

    warnings: list[str] = []
    if isinstance(path_or_files, dict):
        files = path_or_files
        stem = Path(display).stem if display else None
        shown = display or "the uploaded shapefile"
    else:
        path = Path(path_or_files)
        shown = path.name
        stem = path.stem
        if not path.exists():
            raise RegionError(f"The region file '{path}' does not exist; check the path.")
        if path.suffix.lower() == ".zip":
            files = _files_from_zip(path.read_bytes(), path.name)
        else:
            files = {"shp": path.read_bytes()}
            for ext in ("dbf", "shx", "prj"):
                for cand in (path.with_suffix("." + ext), path.with_suffix("." + ext.upper())):
                    if cand.exists():
                        files[ext] = cand.read_bytes()
                        break
    where = f" in '{shown}'"
    with warnings_module.catch_warnings(record=True) as caught:
        warnings_module.simplefilter("always")
        feats = _read_shapes(shapefile, files, where, shown, warnings)
    for w in caught:
        warnings.append(f"Reading '{shown}': {w.message}")
    return feats, where, stem, warnings


def _read_shapes(shapefile, files, where, shown, warnings):
    try:
        reader = shapefile.Reader(
            shp=io.BytesIO(files["shp"]),
            dbf=io.BytesIO(files["dbf"]) if "dbf" in files else None,
            shx=io.BytesIO(files["shx"]) if "shx" in files else None,
        )
        shapes = reader.shapes()
        if "dbf" in files:
            field_names = [f[0] for f in reader.fields[1:]]
            records = [dict(zip(field_names, list(r))) for r in reader.records()]
        else:
            records = [{} for _ in shapes]
            warnings.append(f"No .dbf file came with '{shown}', so features have no names.")
    except shapefile.ShapefileException as exc:
        raise RegionError(
            f"The shapefile{where} cannot be read ({exc}); give the .shp together with its .shx "
            "and .dbf files, or all of them in one .zip."
        ) from None
    except Exception as exc:  # corrupt binary data surfaces as struct/index errors
        raise RegionError(
            f"The shapefile{where} is damaged or not a shapefile ({exc.__class__.__name__}); "
            "export it again."
        ) from None
    transform = None
    if "prj" in files:
        transform = _prj_transformer(files["prj"], shown)
        if transform is not None:
            warnings.append(
                f"'{shown}' is in a projected coordinate system; its vertices were converted "
                "to longitude-latitude (edges stay straight between the converted vertices)."
            )
    feats = []
    for i, (shape, rec) in enumerate(zip(shapes, records)):
        if shape.shapeType == shapefile.NULL:
            geom = None
        else:
            geom = shape.__geo_interface__
            if transform is not None:
                geom = _transform_geom(geom, transform)
        rec = {k: (v if isinstance(v, (str, int, float, bool)) or v is None else str(v))
               for k, v in rec.items()}
        feats.append({"type": "Feature", "properties": rec, "geometry": geom})
    if not feats:
        raise RegionError(f"The shapefile{where} holds no shapes; add a polygon.")
    return feats


def _files_from_zip(data: bytes, shown: str) -> dict:
    try:
        zf = zipfile.ZipFile(io.BytesIO(data))
    except zipfile.BadZipFile:
        raise RegionError(f"The file '{shown}' is not a valid .zip archive; zip the shapefile again.") from None
    names = [n for n in zf.namelist() if not n.startswith("__MACOSX") and not n.endswith("/")]
    shps = [n for n in names if n.lower().endswith(".shp")]
    if not shps:
        raise RegionError(
            f"The archive '{shown}' holds no .shp file; zip the .shp, .shx, .dbf (and .prj) "
            "files of one shapefile."
        )
    if len(shps) > 1:
        raise RegionError(
            f"The archive '{shown}' holds {len(shps)} shapefiles ({', '.join(shps[:5])}); zip "
            "only one."
        )
    base = shps[0][:-4]
    files = {"shp": zf.read(shps[0])}
    for n in names:
        if n[:-4] == base and n[-4:].lower() in (".dbf", ".shx", ".prj"):
            files[n[-3:].lower()] = zf.read(n)
    return files


def _prj_transformer(prj: bytes, shown: str):
    """A pyproj Transformer to lon-lat when the .prj names a projected CRS, else None."""
    from pyproj import CRS, Transformer
    from pyproj.exceptions import CRSError

    try:
        crs = CRS.from_wkt(prj.decode("latin-1"))
    except CRSError:
        raise RegionError(
            f"The .prj file of '{shown}' does not describe a coordinate system pyproj can read; "
            "remove it if the shapefile is in longitude-latitude, or export it again."
        ) from None
    if crs.is_geographic:
        return None
    return Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)


def _transform_geom(geom: dict, transformer) -> dict:
    def tr_ring(ring):
        xy = np.asarray(ring, dtype=float)
        x, y = transformer.transform(xy[:, 0], xy[:, 1])
        return np.c_[x, y].tolist()

    if geom["type"] == "Polygon":
        return {"type": "Polygon", "coordinates": [tr_ring(r) for r in geom["coordinates"]]}
    if geom["type"] == "MultiPolygon":
        return {"type": "MultiPolygon",
                "coordinates": [[tr_ring(r) for r in p] for p in geom["coordinates"]]}
    return geom


def _region_from_shape_features(feats, where, stem, warnings, feature, name, great_circle):
    idx, feat = _select_feature(feats, feature, where)
    fname = _feature_name(feat.get("properties"))
    if len(feats) > 1:
        where = f" (feature {fname or idx}){where}"
    if feat.get("geometry") is None:
        raise RegionError(f"The shape{where} is empty; choose a feature with a polygon.")
    polys, multi = _geometry_rings(feat["geometry"], where)
    region = _region_from_polys(polys, multi, name or fname or stem or "region", great_circle, where)
    region.warnings.extend(warnings)
    return region


def region_from_shapefile(path, feature=None, name: str | None = None,
                          great_circle: bool = False) -> Region:
    """A region from a shapefile (.shp with .shx/.dbf beside it, or a .zip holding one).

    Shapefile rings are clockwise outside and counter-clockwise for holes; they are
    normalised like any other input.  A .prj naming a projected coordinate system is
    converted to longitude-latitude with pyproj (and noted in Region.warnings).
    """
    feats, where, stem, warnings = _shapefile_features(path)
    return _region_from_shape_features(feats, where, stem, warnings, feature, name, great_circle)


def region_from_upload(filename: str, data: bytes, feature=None, name: str | None = None,
                       great_circle: bool = False) -> Region:
    """A region from uploaded bytes, by the file name's extension (.geojson/.json/.zip/.shp)."""
    ext = Path(filename).suffix.lower()
    shown = Path(filename).name
    if ext in (".geojson", ".json"):
        try:
            obj = _parse_json_text(bytes(data).decode("utf-8-sig"), f"The uploaded file '{shown}'")
        except UnicodeDecodeError:
            raise RegionError(
                f"The uploaded file '{shown}' is not UTF-8 text; upload a GeoJSON file."
            ) from None
        return _region_from_geojson_obj(obj, f" in '{shown}'", Path(filename).stem, feature,
                                        name, great_circle or None)
    if ext == ".zip":
        files = _files_from_zip(bytes(data), shown)
    elif ext == ".shp":
        files = {"shp": bytes(data)}
    else:
        raise RegionError(
            f"The uploaded file '{shown}' has an unsupported type '{ext or '(none)'}'; upload "
            ".geojson, .json, a .zip holding a shapefile, or a .shp."
        )
    feats, where, stem, warnings = _shapefile_features(files, display=shown)
    return _region_from_shape_features(feats, where, stem, warnings, feature, name, great_circle)


# --------------------------------------------------------------------------------------------
# dispatcher


def _parse_bbox(bbox) -> list:
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


def load_region(path=None, bbox=None, feature=None, great_circle: bool = False,
                name: str | None = None) -> Region:
    """The region for the command line: a file (GeoJSON, shapefile, .zip) or a bbox.

    ``bbox`` is "W,S,E,N" or a 4-sequence; ``feature`` a name/property value or an index.
    """
    if path is not None and bbox is not None:
        raise RegionError("Give either a region file or a bbox, not both.")
    if path is None and bbox is None:
        raise RegionError(
            "No region given; give a GeoJSON or shapefile path, or a bbox west,south,east,north."
        )
    if bbox is not None:
        region = region_from_bbox(*_parse_bbox(bbox), name=name)
        if great_circle:
            region.warnings.append(
                "A box keeps its edges along meridians and parallels; great-circle edges were "
                "not used."
            )
        return region
    p = Path(path)
    ext = p.suffix.lower()
    if ext in (".shp", ".zip"):
        return region_from_shapefile(p, feature=feature, name=name, great_circle=great_circle)
    if ext in (".geojson", ".json", ""):
        return region_from_geojson(p, feature=feature, name=name, great_circle=great_circle or None)
    raise RegionError(
        f"The region file '{p.name}' has an unsupported type '{ext}'; give a .geojson, .json, "
        ".shp or .zip file."
    )
