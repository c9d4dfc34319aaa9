"""Normalise input rings: checks, the continuous longitude frame (dateline), poles,
orientation, edge names, and parts cut at the antimeridian joined again."""

from __future__ import annotations

import math

import numpy as np
import shapely
import shapely.affinity
from shapely.geometry import Polygon
from shapely.geometry.polygon import orient

from .. import sphere
from ..errors import RegionError
from .model import Part, RawRing, Region, Ring
from .text import cap, num
from .validate import check_parts_overlap, validate_part

#: Longitudes accepted on input (degrees); anything else is taken as a mistake
#: (often a projected coordinate system).
LON_LIMIT = 360.0


def prepare_ring(coords, label: str, where: str, great_circle: bool) -> RawRing:
    """Check one input ring and bring it into the continuous frame (orientation untouched)."""
    ring_desc = f"{label.strip()} " if label.strip() else ""
    lon, lat = _vertex_array(coords, ring_desc, label, where)
    vno = np.arange(1, lon.size + 1)
    # drop a repeated closing vertex
    if lon.size > 1 and lat[-1] == lat[0] and lon[-1] == lon[0]:
        lon, lat, vno = lon[:-1], lat[:-1], vno[:-1]
    step, full = _steps(lon, lat)
    # remove repeated consecutive vertices (same point, also across a 360 shift)
    keep = ~((step == 0.0) & (np.roll(lat, -1) == lat))
    removed = int((~keep).sum()) if lon.size > 1 else 0
    if not keep.all():
        lon, lat, vno = lon[keep], lat[keep], vno[keep]
        step, full = _steps(lon, lat)
    if lon.size < 3:
        raise RegionError(
            f"The {ring_desc}ring{where} has only {lon.size} distinct "
            f"vert{'ex' if lon.size == 1 else 'ices'}; a polygon needs at least 3."
        )
    _check_edges(lon, lat, vno, step, full, label, where, great_circle)
    cont = lon[0] + np.concatenate([[0.0], np.cumsum(step[:-1])])
    _check_winding(lat, float(np.sum(step)), ring_desc, where)
    cont = _first_vertex_in_range(cont)
    extent = float(cont.max() - cont.min())
    if extent > 360.0:
        raise RegionError(
            f"The {ring_desc}ring{where} spans {extent:.1f}° of longitude, more than once round "
            "the globe; check the vertex order or split the polygon."
        )
    return RawRing(cont, lat.copy(), vno, label, where, removed)


def _vertex_array(coords, ring_desc: str, label: str, where: str):
    """Longitudes and latitudes of the input vertices, each checked (copies)."""
    try:
        arr = np.asarray([list(c)[:2] for c in coords], dtype=float)
    except (TypeError, ValueError, RecursionError):
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
                f"The latitude {num(y)} of {v}{where} is outside −90 … 90; give latitudes in "
                "degrees north (the coordinates may be projected or swapped: GeoJSON order is "
                "[longitude, latitude])."
            )
        if not -LON_LIMIT <= x <= LON_LIMIT:
            raise RegionError(
                f"The longitude {num(x)} of {v}{where} is outside −360 … 360; give longitudes "
                "in degrees east (the coordinates may be in a projected coordinate system)."
            )
    return lon_in.copy(), lat_in.copy()


def _steps(lon: np.ndarray, lat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Longitude steps between consecutive vertices (closing edge included), the short way
    round, except an exact ±360 step along a parallel, which is a full circle of latitude;
    and where those full circles are."""
    nxt_lon, nxt_lat = np.roll(lon, -1), np.roll(lat, -1)
    raw = nxt_lon - lon
    step = (raw + 180.0) % 360.0 - 180.0
    full = (np.abs(raw) == 360.0) & (nxt_lat == lat)
    return np.where(full, raw, step), full


def _check_edges(lon, lat, vno, step, full, label, where, great_circle) -> None:
    """Edges whose way round is undefined: 180° of longitude apart, or antipodal ends."""
    n = lon.size
    ambiguous = np.flatnonzero((np.abs(step) == 180.0) & ~full)
    if ambiguous.size:
        i = int(ambiguous[0])
        a, b = vno[i], vno[(i + 1) % n]
        raise RegionError(
            f"{cap(label + 'vertices')} {a} and {b}{where} are exactly 180° of longitude "
            "apart, so the edge between them could go either way round; add a vertex between "
            "them."
        )
    if not great_circle:
        return
    for i in range(n):
        j = (i + 1) % n
        p = sphere.to_xyz([lon[i], lon[j]], [lat[i], lat[j]])
        if np.dot(p[0], p[1]) < -1 + 1e-12:
            raise RegionError(
                f"{cap(label + 'vertices')} {vno[i]} and {vno[j]}{where} are antipodal, "
                "so no single great circle joins them; add a vertex between them."
            )


def _check_winding(lat: np.ndarray, winding: float, ring_desc: str, where: str) -> None:
    """A ring that winds round a pole cannot be a polygon with lon-lat edges."""
    if abs(winding) <= 180.0:
        return
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


def _first_vertex_in_range(cont: np.ndarray) -> np.ndarray:
    """The continuous ring shifted by whole turns so that its first vertex is in −180 … 180."""
    shift = 360.0 * math.floor((cont[0] + 180.0) / 360.0)
    if cont[0] - shift == -180.0 and cont[0] > 0:
        shift -= 360.0
    cont = cont - shift
    if cont[0] > 180.0:
        cont = cont - 360.0
    return cont


def shift_to_frame(ring: RawRing, centre: float) -> RawRing:
    """Shift a ring by a multiple of 360 so that its mean longitude is nearest `centre`."""
    k = round((centre - float(np.mean(ring.lon))) / 360.0)
    if k:
        ring.lon = ring.lon + 360.0 * k
    return ring



def _orient(ring: RawRing, ccw: bool, names: list[str]) -> Ring:
    """Ring with the wanted orientation; edges keep their names when reversed."""
    area = sphere.ring_area(ring.lon, ring.lat)
    lon, lat = ring.lon, ring.lat
    if (area > 0) != ccw:
        lon = np.r_[lon[:1], lon[:0:-1]]
        lat = np.r_[lat[:1], lat[:0:-1]]
        names = names[::-1]
    return Ring(lon.copy(), lat.copy(), list(names))


def build_region(
    raw_parts: list[list[RawRing]],
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
            shift_to_frame(h, centre)
    if merge_seams and len(raw_parts) > 1:
        raw_parts = merge_seam_parts(raw_parts, where, great_circle)
    for rings in raw_parts:
        validate_part(rings)
    check_parts_overlap(raw_parts, where)
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




def merge_seam_parts(raw_parts, where, great_circle):
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
            new.append(prepare_ring(xy, label, where, great_circle))
        centre = float(np.mean(new[0].lon))
        for h in new[1:]:
            shift_to_frame(h, centre)
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
                pts = sphere.to_xyz([p[0], x, q[0]], [p[1], xy[i, 1], q[1]])
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
