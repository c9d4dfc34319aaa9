"""Validity checks of normalised rings: crossings, zero area, holes, overlapping parts.

Each problem is one sentence naming the edges or parts and what to do.
"""

from __future__ import annotations

import numpy as np
import shapely
import shapely.affinity
import shapely.validation
from shapely.geometry import Polygon

from ..errors import RegionError
from .model import RawRing
from .text import fmt_point


def _edge_label(ring: RawRing, i: int) -> str:
    n = ring.lon.size
    return f"{ring.vertex_no[i]}→{ring.vertex_no[(i + 1) % n]}"


def validate_part(rings: list[RawRing]) -> None:
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
            loc = f" near {fmt_point(float(xy[0]), float(xy[1]))}"
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


def _zero_area(ring: RawRing) -> RegionError:
    label = ring.label.strip()
    return RegionError(
        f"The {label + ' ' if label else ''}ring{ring.where} has zero area (all its vertices "
        "lie on one line); give at least three vertices that are not in a line."
    )


def _all_collinear(ring: RawRing) -> bool:
    x = ring.lon - ring.lon[0]
    y = ring.lat - ring.lat[0]
    cross = x[1:-1] * y[2:] - y[1:-1] * x[2:]
    scale = max(1.0, float(np.max(np.abs(x)) + np.max(np.abs(y))))
    return bool(np.all(np.abs(cross) <= 1e-12 * scale * scale))


def _find_crossing(rings: list[RawRing]) -> str | None:
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
        near = fmt_point(pt.x, pt.y)
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




def check_parts_overlap(raw_parts: list[list[RawRing]], where: str) -> None:
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
